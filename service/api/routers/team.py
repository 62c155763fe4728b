from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query

from models.errors import InputError, NotReady, StoreError
from models.metrics import DEFAULT_METRIC
from service.analysis.team import DEFAULT_MIN_POSTS, team_overview
from service.api.deps import WorkspaceDep
from service.api.params import metric_query
from service.api.responses import ERRORS
from service.api.schemas import TeamOverview

router = APIRouter(prefix="/v1", tags=["team"])


@router.get(
    "/team",
    response_model=TeamOverview,
    responses=ERRORS(NotReady, InputError, StoreError),
    summary="The team overview: each account's posts, share, median and trend, best hours, topics",
    description="Per account: posts and time span, share of the team's settled posts, the median "
    "and the Theil–Sen trend of its weekly medians over the last 13 weeks, its best local hours "
    "(Mann–Whitney against its other hours, Holm-adjusted) and the topics found in the history "
    "where its posts run further above its usual level than the rest of the team's. "
    "Associations in the team's own history, not causes.",
)
def team(
    ws: WorkspaceDep,
    metric: Annotated[str, metric_query()] = DEFAULT_METRIC.value,
    min_posts: Annotated[
        int, Query(ge=2, le=10_000, description="Posts an hour slot or a topic needs to be read")
    ] = DEFAULT_MIN_POSTS,
) -> TeamOverview:
    return team_overview(ws, metric=metric, min_posts=min_posts)
