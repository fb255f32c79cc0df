"""Scaffolds: group-defined cores with attachment points."""

from __future__ import annotations

from fastapi import APIRouter
from sqlmodel import select

from ...deps import Reader, SessionDep, Writer
from ...models import Scaffold, ScaffoldCreate, ScaffoldRead
from ...services import registry
from .responses import AUTH_ERRORS, DUPLICATE, INPUT_ERRORS

router = APIRouter(tags=["scaffolds"])


@router.get("/scaffolds", response_model=list[ScaffoldRead], responses=AUTH_ERRORS)
def list_scaffolds(session: SessionDep, actor: Reader) -> list[ScaffoldRead]:
    return [registry.scaffold_read(session, s, actor=actor) for s in session.exec(select(Scaffold).order_by(Scaffold.code)).all()]


@router.post(
    "/scaffolds", status_code=201, response_model=ScaffoldRead, responses={**AUTH_ERRORS, **INPUT_ERRORS, **DUPLICATE}
)
def create_scaffold(data: ScaffoldCreate, session: SessionDep, actor: Writer) -> ScaffoldRead:
    sc = registry.create_scaffold(session=session, data=data, actor=actor.label)
    return registry.scaffold_read(session, sc, actor=actor)
