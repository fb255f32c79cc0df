"""Compounds and batches."""

from __future__ import annotations

from dataclasses import replace
from typing import Any, Optional

from fastapi import APIRouter, Query, Request, Response
from fastapi.responses import Response as RawResponse

from pydantic import BaseModel, Field

from ... import access
from ...deps import Admin, Offset, Reader, SessionDep, SettingsDep, Writer
from ...models import BatchCreate, BatchRead, CompoundCreate, CompoundPage, CompoundRead, CompoundUpdate
from ...errors import InputError
from ...services import accounts, identity, registry, verdicts, views
from ...services.errors import NotFound
from .responses import ARCHIVED, AUTH_ERRORS, DUPLICATE, INPUT_ERRORS, NOT_FOUND, Closed

router = APIRouter(tags=["compounds"])



@router.post(
    "/compounds", status_code=201, response_model=CompoundRead, responses={**AUTH_ERRORS, **INPUT_ERRORS, **DUPLICATE}
)
def create_compound(data: CompoundCreate, session: SessionDep, settings: SettingsDep, actor: Writer) -> CompoundRead:
    """Register a compound from a SMILES or MOL block, or from a scaffold plus a side chain."""
    compound = registry.register_compound(session=session, settings=settings, data=data, actor=actor.label)
    return registry.compound_read(session, compound, actor=actor)


@router.get("/compounds", response_model=CompoundPage, responses={**AUTH_ERRORS, **INPUT_ERRORS})
def list_compounds(
    request: Request,
    session: SessionDep,
    actor: Reader,
    limit: int = Query(50, ge=1, le=500),
    offset: Offset = 0,
    include_archived: bool = False,
    count: bool = Query(True, description="false: total is null unless this page is the last; a first page "
                        "narrowed by a substructure alone then does not wait for the whole match"),
) -> CompoundPage:
    """Compounds, newest first, with the same filters as the registry table (`scaffold`, `chain_kind`,
    `c_min`, `c_max`, `branched`, `batch_state`, `verdict`, `polar`, `barrier_min`, `barrier_max`,
    `barrier_source`, `has`, `made_from`, `made_to`, `q`, `sort`, `dir`, `substructure`, `similar`).
    `next_after` is the next page's keyset position: `after=<it>` (in place of `offset`) reads that page
    at the cost of the first, however deep; `before=` pages back. `count=false` leaves `total` null
    while more pages follow (the same query with `count=true` counts)."""
    q = views.parse_view(request.query_params, max_size=500)
    if include_archived:
        q = replace(q, values={**q.values, "archived": True})
    if q.after is not None or q.before is not None:
        result = views.query_view(session, replace(q, size=limit), actor=actor, count=count)
        rows = result.rows
    elif offset % limit == 0:
        result = views.query_view(session, replace(q, page=offset // limit + 1, size=limit), actor=actor, count=count)
        rows = result.rows
    else:
        result = views.query_view(session, q, actor=actor, paged=False)
        rows = result.rows[offset: offset + limit]
        if offset + limit < len(result.rows) and rows and not (q.similar and q.sort == "code"):
            result = replace(result, next_cursor=views.Cursor(q.sort, q.descending, rows[-1].compound.number))
    items = [registry.compound_read(session, r.compound, actor=actor) for r in rows]
    return CompoundPage(items=accounts.hide_people(items, sees_people=actor.sees_people), total=result.total,
                        next_after=result.next_cursor.token if result.next_cursor else None)


class StructureHit(BaseModel):
    code: str
    similarity: Optional[float] = Field(None, description="Tanimoto similarity; only in a similarity search")


class StructureHits(BaseModel):
    items: list[StructureHit]
    total: int


@router.get("/search", response_model=StructureHits, response_model_exclude_unset=True,
            responses={**AUTH_ERRORS, **INPUT_ERRORS})
def search_structures(request: Request, session: SessionDep, actor: Reader) -> dict:
    """Structure search: `substructure` (SMARTS or SMILES) or `similar` (SMILES) with `threshold`
    (Tanimoto on Morgan radius-2 fingerprints), combinable with the compound filters.
    Answers `{"items": [{"code", "similarity"?}], "total"}`, most similar first."""
    q = views.parse_view(request.query_params, max_size=1000)
    if not (q.substructure or q.similar):
        raise InputError("give substructure=SMARTS or similar=SMILES", field="substructure")
    result = views.query_view(session, replace(q, sort="code", descending=True), actor=actor, paged=False)
    rows = result.rows
    items = [{"code": r.compound.code, **({"similarity": r.similarity} if q.similar else {})} for r in rows]
    return {"items": items, "total": len(items)}


@router.get("/compounds/{code}", response_model=CompoundRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_compound(code: str, session: SessionDep, actor: Reader) -> CompoundRead:
    compound = registry.get_compound(session, code)
    return accounts.hide_people(registry.compound_read(session, compound, actor=actor),
                                sees_people=actor.sees_people)


@router.patch(
    "/compounds/{code}", response_model=CompoundRead, responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS}
)
def patch_compound(code: str, data: CompoundUpdate, session: SessionDep, actor: Writer) -> CompoundRead:
    """Change label, notes, scaffold or embargo. Structures are immutable: register a new compound instead."""
    compound = registry.get_compound(session, code)
    compound = registry.update_compound(session=session, compound=compound, data=data, actor=actor.label)
    return registry.compound_read(session, compound, actor=actor)


@router.post("/compounds/{code}/archive", response_model=CompoundRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def archive_compound(code: str, session: SessionDep, actor: Writer) -> CompoundRead:
    """Archive (nothing is deleted); the code stays taken and the compound can be restored."""
    compound = registry.set_compound_archived(
        session=session, compound=registry.get_compound(session, code), archived=True, actor=actor.label
    )
    return registry.compound_read(session, compound, actor=actor)


@router.post("/compounds/{code}/restore", response_model=CompoundRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def restore_compound(code: str, session: SessionDep, actor: Writer) -> CompoundRead:
    compound = registry.set_compound_archived(
        session=session, compound=registry.get_compound(session, code), archived=False, actor=actor.label
    )
    return registry.compound_read(session, compound, actor=actor)


@router.get(
    "/compounds/{code}/structure.svg",
    responses={**AUTH_ERRORS, **NOT_FOUND, 200: {"content": {"image/svg+xml": {}}}},
    response_class=RawResponse,
)
def compound_svg(code: str, session: SessionDep, actor: Reader, thumbnail: bool = False) -> Response:
    compound = registry.get_compound(session, code)
    if not access.may_see_structure(actor, compound):
        raise NotFound(f"no drawing for {code}")
    svg = registry.structure_svg(compound, thumbnail=thumbnail)
    return Response(svg, media_type="image/svg+xml", headers={"Cache-Control": "private, max-age=3600"})


@router.post(
    "/compounds/{code}/batches",
    status_code=201,
    response_model=BatchRead,
    responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS},
)
def create_batch(code: str, data: BatchCreate, session: SessionDep, actor: Writer) -> BatchRead:
    compound = registry.get_compound(session, code)
    batch = registry.add_batch(session=session, compound=compound, data=data, actor=actor.label)
    return registry.batch_read(session, batch)


@router.get("/compounds/{code}/batches", response_model=list[BatchRead], responses={**AUTH_ERRORS, **NOT_FOUND})
def list_batches(code: str, session: SessionDep, actor: Reader) -> list[BatchRead]:
    compound = registry.get_compound(session, code)
    return [registry.batch_read(session, b) for b in registry.batches_of(session, compound)]


@router.post("/batches/{code}/archive", response_model=BatchRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def archive_batch(code: str, session: SessionDep, actor: Writer) -> BatchRead:
    batch = registry.set_batch_archived(session=session, batch=registry.get_batch(session, code), archived=True,
                                        actor=actor.label)
    return registry.batch_read(session, batch)


@router.post("/batches/{code}/restore", response_model=BatchRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def restore_batch(code: str, session: SessionDep, actor: Writer) -> BatchRead:
    batch = registry.set_batch_archived(session=session, batch=registry.get_batch(session, code), archived=False,
                                        actor=actor.label)
    return registry.batch_read(session, batch)


@router.get("/batches/{code}", response_model=BatchRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_batch(code: str, session: SessionDep, actor: Reader) -> BatchRead:
    return registry.batch_read(session, registry.get_batch(session, code))


class NmrEvidenceOut(Closed):
    """The batch's newest NMR spectrum; the expected count only for a caller who may see the structure."""

    measurement: int
    edited: bool = Field(description="a person's peak list stands over the automatic one")
    nucleus: Optional[str]
    solvent: Optional[str]
    spectrometer_MHz: Optional[float]
    signals_found: Optional[int]
    environments_expected: Optional[int] = None
    environments_check: Optional[Any] = None


class _PassOut(Closed):
    """An identity measurement that passes or fails: its id and ``pass``; what else it shows, only for a caller
    who may see the structure (the calculated values reveal the formula)."""

    measurement: int
    passed: Optional[bool] = Field(alias="pass")


class HrmsEvidenceOut(_PassOut):
    """The newest live HRMS."""

    ion: Optional[str] = None
    ion_formula: Optional[str] = None
    calc_mz: Optional[float] = None
    found_mz: Optional[float] = None
    error_ppm: Optional[float] = None
    tolerance_ppm: Optional[float] = None
    isotope_score: Optional[float] = None


class ElementalEvidenceOut(_PassOut):
    """The newest live elemental analysis."""

    calc_formula: Optional[str] = None
    solvate: Optional[str] = None
    calc_pct: Optional[dict[str, float]] = Field(None, description="mass percent by element, calculated")
    found_pct: Optional[dict[str, float]] = Field(None, description="mass percent by element, found")
    delta_pct: Optional[dict[str, float]] = Field(None, description="found minus calculated, percentage points")


class IdentityEvidenceOut(Closed):
    nmr_spectrum: Optional[NmrEvidenceOut]
    hrms: Optional[HrmsEvidenceOut]
    elemental: Optional[ElementalEvidenceOut]


class ConfirmationOut(Closed):
    by: str
    at: Optional[str] = Field(description="ISO 8601, UTC")
    note: Optional[str] = Field(description="left out (null) for a caller who may not see the structure")


class BatchIdentityOut(Closed):
    """A batch's identity evidence, status and SI paragraph (services/identity.py ``batch_identity``)."""

    batch: str
    status: str
    evidence: IdentityEvidenceOut
    identity_confirmed: bool
    si_text: Optional[str]
    si_markdown: Optional[str]
    si_nmr_note: Optional[str] = None  # the NMR spectrum's digital resolution and the J digits it allows
    confirmation: Optional[ConfirmationOut]


IDENTITY_ANSWER = {"response_model": BatchIdentityOut, "response_model_exclude_unset": True}


@router.get("/batches/{code}/identity", **IDENTITY_ANSWER, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_batch_identity(code: str, session: SessionDep, actor: Reader) -> dict:
    """The batch's identity evidence (latest live HRMS and elemental analysis), its status and the
    supporting-information paragraph (``si_text``, ``si_markdown``). Calculated values reveal the
    formula, so a caller who may not see an embargoed structure gets only the passes."""
    return identity.batch_identity(session=session, code=code, actor=actor)


class IdentityNoteIn(BaseModel):
    note: str = Field(default="", max_length=2000,
                      description="what the confirmation rests on (required when the stored evidence does "
                                  "not agree), or why it is withdrawn (always required)")


@router.post("/batches/{code}/identity/confirm", **IDENTITY_ANSWER,
             responses={**AUTH_ERRORS, **NOT_FOUND, **ARCHIVED, **INPUT_ERRORS})
def confirm_batch_identity(code: str, body: IdentityNoteIn, session: SessionDep, actor: Writer) -> dict:
    """Set the batch state "identity confirmed" (audited); answers the batch's identity summary."""
    return identity.set_identity(session=session, code=code, confirmed=True, note=body.note, actor=actor)


@router.post("/batches/{code}/identity/withdraw", **IDENTITY_ANSWER,
             responses={**AUTH_ERRORS, **NOT_FOUND, **ARCHIVED, **INPUT_ERRORS})
def withdraw_batch_identity(code: str, body: IdentityNoteIn, session: SessionDep, actor: Writer) -> dict:
    """Withdraw the batch's identity confirmation, with the reason (audited)."""
    return identity.set_identity(session=session, code=code, confirmed=False, note=body.note, actor=actor)


class OverrideIn(BaseModel):
    code: str = Field(description="a verdict code, e.g. polar_switching_supported")
    reason: str = Field(min_length=1, max_length=4000)


@router.post("/compounds/{code}/verdict/override", response_model=CompoundRead,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def override_verdict(code: str, data: OverrideIn, session: SessionDep, actor: Admin) -> CompoundRead:
    """A reviewed verdict (admins); the computed verdict stays visible beside it in `verdict_evidence`."""
    compound = verdicts.set_override(session=session, compound=registry.get_compound(session, code), code=data.code,
                                     reason=data.reason, actor=actor.label)
    return registry.compound_read(session, compound, actor=actor)


@router.post("/compounds/{code}/verdict/clear", response_model=CompoundRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def clear_override(code: str, session: SessionDep, actor: Admin) -> CompoundRead:
    compound = verdicts.set_override(session=session, compound=registry.get_compound(session, code), code=None,
                                     reason="", actor=actor.label)
    return registry.compound_read(session, compound, actor=actor)
