"""Paper freezes: create, list, read (with what moved since), add the DOI and depositions, export."""

from __future__ import annotations

from typing import Any, Optional

from fastapi import APIRouter, Response
from pydantic import Field

from ...deps import Reader, RowId, SessionDep, Writer
from ...models import FreezeCreate, FreezePublication
from ...services import accounts, freezes
from .responses import AUTH_ERRORS, DUPLICATE, INPUT_ERRORS, NOT_FOUND, Closed

router = APIRouter(tags=["freezes"])


class FreezeDifferencesOut(Closed):
    """What moved since the freeze for one compound (services/freezes.py ``compare_compound``)."""

    compound: str
    differs: bool
    measurements: list[dict[str, Any]] = Field(description="per frozen measurement: by result key, frozen, current, "
                                                            "change, relative change")
    added: list[int] = Field(description="ids of the live measurements added since")
    frozen_count: int
    attachments_archived_since: list[int]
    frozen_attachments: int
    verdict: dict[str, Optional[str]] = Field(description="the effective verdict code, frozen and current")
    largest_relative_change: Optional[float]


class FreezeCompoundOut(Closed):
    """One frozen compound; a caller who may not see an embargoed one gets only its code and ``withheld``."""

    compound: str
    withheld: bool
    verdict: Optional[dict[str, Any]] = None
    measurements: Optional[list[dict[str, Any]]] = Field(
        None, description="every live measurement then: id, raw-file SHA-256, kind, analysis version, results, "
                          "verdict, flag codes")
    attachments: Optional[list[dict[str, Any]]] = None
    differences: Optional[FreezeDifferencesOut] = Field(None, description="only when one freeze is read")


class FreezeOut(Closed):
    id: int
    name: str
    created_by: str
    created_at: str = Field(description="ISO 8601, UTC")
    dataset_doi: str
    depositions: list[dict[str, Any]] = Field(description='[{"number": "CCDC 2345678", "measurement": 12}]')
    compounds: list[FreezeCompoundOut]


class FreezeList(Closed):
    items: list[FreezeOut]


FREEZE_ANSWER = {"response_model": FreezeOut, "response_model_exclude_unset": True}


@router.post("/freezes", status_code=201, **FREEZE_ANSWER, responses={**AUTH_ERRORS, **INPUT_ERRORS, **DUPLICATE})
def create_freeze(data: FreezeCreate, session: SessionDep, actor: Writer) -> dict:
    """Freeze the named compounds (or those a registry view shows the caller now, `view`): every live
    measurement id, raw-file SHA-256, analysis version and result, and each compound's verdict, as they are now."""
    freeze = freezes.create_freeze(session=session, name=data.name, codes=data.compounds, view=data.view, actor=actor)
    return accounts.hide_people(freezes.freeze_read(session, freeze, actor=actor), sees_people=actor.sees_people)


@router.get("/freezes", response_model=FreezeList, response_model_exclude_unset=True, responses=AUTH_ERRORS)
def list_freezes(session: SessionDep, actor: Reader) -> dict:
    items = [freezes.freeze_read(session, f, actor=actor, with_diff=False) for f in freezes.list_freezes(session)]
    return accounts.hide_people({"items": items}, sees_people=actor.sees_people)


@router.get("/freezes/{freeze_id}", **FREEZE_ANSWER, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_freeze(freeze_id: RowId, session: SessionDep, actor: Reader) -> dict:
    """The frozen record and, per compound, ``differences``: what re-analysis, corrections or archiving
    changed since (by result key: frozen, current, change, relative change)."""
    return accounts.hide_people(freezes.freeze_read(session, freezes.get_freeze(session, freeze_id), actor=actor),
                                sees_people=actor.sees_people)


@router.post("/freezes/{freeze_id}/publication", **FREEZE_ANSWER,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def set_publication(freeze_id: RowId, data: FreezePublication, session: SessionDep, actor: Writer) -> dict:
    """Record the dataset DOI and the deposition numbers of structures (each may name its crystal measurement)."""
    freeze = freezes.set_publication(session=session, freeze=freezes.get_freeze(session, freeze_id),
                                     dataset_doi=data.dataset_doi, depositions=data.depositions, actor=actor)
    return accounts.hide_people(freezes.freeze_read(session, freeze, actor=actor), sees_people=actor.sees_people)


@router.get("/freezes/{freeze_id}/pack.zip", response_class=Response,
            responses={**AUTH_ERRORS, **NOT_FOUND, 200: {"content": {"application/zip": {}},
                                                         "description": "the freeze's pack with its manifest"}})
def freeze_pack(freeze_id: RowId, session: SessionDep, actor: Reader) -> Response:
    freeze = freezes.get_freeze(session, freeze_id)
    data = freezes.freeze_pack(session, freeze, actor=actor)
    return Response(data, media_type="application/zip",
                    headers={"Content-Disposition": f'attachment; filename="freeze-{freeze.id}.zip"'})
