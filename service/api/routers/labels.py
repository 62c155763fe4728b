"""The team's own labels the store holds, for a page or a script to split on."""

from __future__ import annotations

from fastapi import APIRouter
from pydantic import BaseModel, Field

from models.errors import StoreError
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS

router = APIRouter(prefix="/v1", tags=["segments"])


class LabelCount(BaseModel):
    name: str = Field(description="The export's column the label was kept from (import --label)")
    posts: int = Field(description="How many posts carry it")


class LabelNames(BaseModel):
    """The labels kept at import; each splits segments as `by` `label:NAME`."""

    labels: list[LabelCount] = Field(description="Sorted by name")


@router.get(
    "/labels",
    response_model=LabelNames,
    responses=ERRORS(StoreError),
    summary="The team's own labels kept at import",
)
def labels(ws: WorkspaceDep) -> LabelNames:
    return LabelNames(labels=[LabelCount(name=n, posts=k) for n, k in ws.store.label_names().items()])
