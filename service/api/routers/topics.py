"""The topics the history holds, found without phrases."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query

from models.metrics import DEFAULT_METRIC
from service.analysis.topics import TopicsAnswer, topics
from service.api.deps import WorkspaceDep
from service.api.params import Since, metric_query, since_instant, since_query
from service.api.responses import ERRORS

router = APIRouter(prefix="/v1", tags=["topics"])


@router.get(
    "/topics",
    response_model=TopicsAnswer,
    responses=ERRORS(404, 409, 422, 503),
    summary="The topics the history holds, each named by its distinctive words",
    description="k-means on the text vectors with k chosen by the mean cosine silhouette; "
    "names from class-based TF-IDF; each topic's central posts, post ids and its median "
    "against the rest (Mann-Whitney, Holm). This team's own history: associations, not causes.",
)
def get_topics(
    ws: WorkspaceDep,
    metric: Annotated[str, metric_query()] = DEFAULT_METRIC.value,
    account: Annotated[str | None, Query(description="Only this account")] = None,
    since: Annotated[Since | None, since_query()] = None,
) -> TopicsAnswer:
    return topics(ws, metric=metric, account=account or None, since=since_instant(since))
