"""Planning: the "what to make next" ranking of target compounds."""

from __future__ import annotations

from fastapi import APIRouter, Query

from ...deps import Reader, SessionDep
from ...models import RankingRead
from ...services import prediction
from .responses import AUTH_ERRORS, INPUT_ERRORS

router = APIRouter(tags=["planning"])


@router.get("/planning/ranking", response_model=RankingRead, responses={**AUTH_ERRORS, **INPUT_ERRORS})
def get_ranking(session: SessionDep, actor: Reader,
                goal: str = Query("tc", max_length=20, description="tc, pr, switch or barrier")) -> RankingRead:
    """Planned and in-synthesis compounds ordered by the goal's acquisition rule (expected improvement over
    the best measured value, times the probability of switching for tc and pr), with predictions, 95 %
    intervals and the models' leave-one-out errors. With too few data: `enough_data` false, no items."""
    return RankingRead(**prediction.ranking(session, actor=actor, goal=goal))
