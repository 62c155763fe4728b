"""The saved import mappings, for a page or a script to choose from."""

from __future__ import annotations

from fastapi import APIRouter
from pydantic import BaseModel, Field

from models.errors import StoreError
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.ingest.mappings import list_mappings

router = APIRouter(prefix="/v1", tags=["imports"])


class MappingNames(BaseModel):
    """The saved mappings of this data directory (``sounding mapping save``)."""

    mappings: list[str] = Field(description="Their names, sorted; pass one as the import form's `mapping`")


@router.get(
    "/mappings",
    response_model=MappingNames,
    responses=ERRORS(StoreError),
    summary="Saved import mappings",
)
def mappings(ws: WorkspaceDep) -> MappingNames:
    return MappingNames(mappings=list_mappings(ws.settings.resolved_home))
