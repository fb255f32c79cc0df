"""Import profiles: how to read one instrument's export (``server/ingest/profiles.py``)."""

from __future__ import annotations

from typing import Any, Optional

from fastapi import APIRouter, Body, Query
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict

from ...bounds import MAX_ROW_ID
from ...deps import Reader, SessionDep, Writer
from ...services import import_profiles
from .responses import AUTH_ERRORS, DUPLICATE, INPUT_ERRORS, NOT_FOUND

router = APIRouter(tags=["import profiles"])


class ImportProfileOut(BaseModel):
    """A profile version: the keys it was saved with, plus these."""

    model_config = ConfigDict(extra="allow")

    id: int
    name: str
    kind: str
    version: int
    created_at: str
    created_by: str


EXAMPLE = {"name": "tester-a", "kind": "pe_loop", "start_after": "^\\[Data\\]", "skip_lines": 0, "delimiter": ";",
           "decimal": ",", "encoding": "cp1252", "units_row": False,
           "columns": {"Drive Voltage": {"to": "V", "unit": "V"}, "Charge": {"to": "Q", "unit": "nC"},
                       "Time": {"to": "t", "unit": "ms"}},
           "ignore": ["Point"],
           "conditions": {"Area": {"to": "area", "unit": "mm^2"}, "Thickness": {"to": "thickness", "unit": "um"}},
           "blocks": {"separator": "blank_line", "varies": "temperature"}}


@router.post("/import-profiles", status_code=201, response_model=ImportProfileOut,
             responses={**AUTH_ERRORS, **INPUT_ERRORS, **DUPLICATE})
def create_profile(session: SessionDep, actor: Writer,
                   data: dict[str, Any] = Body(..., examples=[EXAMPLE])):
    """Save a new profile (version 1). It is checked on save: an unknown canonical column or a unit of
    the wrong dimension answers 422 naming the field (e.g. `columns.Charge.unit`)."""
    row = import_profiles.create_profile(session=session, data=data, actor=actor.label)
    return import_profiles.profile_read(row)


@router.get("/import-profiles", response_model=list[ImportProfileOut], responses=AUTH_ERRORS)
def list_profiles(session: SessionDep, actor: Reader):
    """The newest version of every profile."""
    return [import_profiles.profile_read(r) for r in import_profiles.list_profiles(session)]


@router.get("/import-profiles/{name}", response_model=ImportProfileOut, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_profile(name: str, session: SessionDep, actor: Reader,
                version: Optional[int] = Query(default=None, ge=1, le=MAX_ROW_ID)):
    """The newest version of the profile, or `version=N`."""
    return import_profiles.profile_read(import_profiles.get_profile(session, name, version))


@router.patch("/import-profiles/{name}", response_model=ImportProfileOut,
              responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS, **DUPLICATE,
                         201: {"model": ImportProfileOut, "description": "a new version"}})
def update_profile(name: str, session: SessionDep, actor: Writer, changes: dict[str, Any] = Body(...)):
    """Change keys of the profile: 201 with the new version; 200 with the current one when nothing
    changes. Measurements read with an older version keep it (re-analysis reads with it too)."""
    row, created = import_profiles.update_profile(session=session, name=name, changes=changes, actor=actor.label)
    return JSONResponse(import_profiles.profile_read(row), status_code=201 if created else 200)
