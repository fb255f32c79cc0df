"""Planning: the "what to make next" ranking, reagents with entered hazard data, routes and lineage."""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter, Query

from ...deps import Reader, RowId, SessionDep, Writer
from ...models import RankingRead, ReagentCreate, ReagentRead, ReagentUpdate, RouteCopy, RouteIn, RouteRead
from ...services import accounts, prediction, registry, routes
from .responses import AUTH_ERRORS, DUPLICATE, INPUT_ERRORS, NOT_FOUND

router = APIRouter(tags=["planning"])


@router.get("/planning/ranking", response_model=RankingRead, responses={**AUTH_ERRORS, **INPUT_ERRORS})
def get_ranking(session: SessionDep, actor: Reader,
                goal: str = Query("tc", max_length=20, description="tc, pr, switch or barrier"),
                t_ref_K: Optional[float] = Query(None, description="reference temperature of the pr goal (K); "
                                                 "default 300")) -> RankingRead:
    """Planned and in-synthesis compounds ordered by the goal's acquisition rule (expected improvement over
    the best measured value, times the probability of switching for tc and pr), with predictions, 95 %
    intervals and the models' leave-one-out errors. With too few data: `enough_data` false, no items.
    Pr is at `t_ref_K`: a switching loop within 5 K, or interpolated between switching loops either side;
    compounds without one are left out and named in `notes`."""
    return RankingRead(**prediction.ranking(session, actor=actor, goal=goal, t_ref_K=t_ref_K))


# --- reagents (hazard data entered by the group from the supplier's SDS) -------------------------


@router.get("/reagents", response_model=list[ReagentRead], responses={**AUTH_ERRORS})
def list_reagents(session: SessionDep, actor: Reader) -> list[ReagentRead]:
    """The reagent table. A reagent without entered hazard data says so (`notice`): read its SDS."""
    return accounts.hide_people([ReagentRead(**routes.reagent_read(r)) for r in routes.list_reagents(session)],
                                sees_people=actor.sees_people)


@router.post("/reagents", status_code=201, response_model=ReagentRead,
             responses={**AUTH_ERRORS, **INPUT_ERRORS, **DUPLICATE})
def create_reagent(data: ReagentCreate, session: SessionDep, actor: Writer) -> ReagentRead:
    """Add a reagent with the GHS hazard codes, statements and pictograms of the supplier's SDS."""
    return ReagentRead(**routes.reagent_read(routes.create_reagent(session=session, data=data, actor=actor.label)))


@router.patch("/reagents/{reagent_id}", response_model=ReagentRead,
              responses={**AUTH_ERRORS, **INPUT_ERRORS, **NOT_FOUND})
def update_reagent(reagent_id: RowId, data: ReagentUpdate, session: SessionDep, actor: Writer) -> ReagentRead:
    r = routes.update_reagent(session=session, reagent=routes.get_reagent(session, reagent_id), data=data,
                              actor=actor.label)
    return ReagentRead(**routes.reagent_read(r))


# --- routes and lineage --------------------------------------------------------------------------


@router.get("/batches/{code}/route", response_model=RouteRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_route(code: str, session: SessionDep, actor: Reader) -> RouteRead:
    """The batch's steps (reagents with their entered hazard data), what it was made from and every batch
    made from it downstream."""
    return RouteRead(**routes.route_read(session, registry.get_batch(session, code), actor=actor))


@router.put("/batches/{code}/route", response_model=RouteRead,
            responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def put_route(code: str, data: RouteIn, session: SessionDep, actor: Writer) -> RouteRead:
    """Record (or replace) the route: ordered steps and precursor batches. A cycle in the lineage, or an
    amount that is not an amount of substance, mass or volume, is a 422."""
    batch = routes.set_route(session=session, batch=registry.get_batch(session, code), data=data, actor=actor.label)
    return RouteRead(**routes.route_read(session, batch, actor=actor))


@router.post("/batches/{code}/route/copy", response_model=RouteRead,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def copy_route(code: str, data: RouteCopy, session: SessionDep, actor: Writer) -> RouteRead:
    """Start this batch's route from an earlier batch's steps (yields left empty, precursors not copied)."""
    batch = routes.copy_route(session=session, batch=registry.get_batch(session, code),
                              source=registry.get_batch(session, data.source), actor=actor.label)
    return RouteRead(**routes.route_read(session, batch, actor=actor))
