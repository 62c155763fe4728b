"""The FastAPI application: one router per resource, errors mapped in one place."""

from __future__ import annotations

import importlib
import importlib.util
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from pathlib import Path

from fastapi import FastAPI

from .. import __version__
from ..settings import Settings, get_settings
from ..forecasting import CAUTION
from ..workspace import Workspace
from . import errors

STATIC = Path(__file__).resolve().parent.parent / "static"

# One router module per resource, in the order they appear in /docs.
ROUTERS = (
    "health", "precedents", "forecasts", "hours", "variants", "segments",
    "imports", "training", "forget", "track_record",
)


def create_app(*, workspace: Workspace | None = None, settings: Settings | None = None) -> FastAPI:
    """Build the app around one workspace (created from settings if not given)."""
    ws = workspace or Workspace(settings=settings or get_settings())

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        ws.index()  # check the index against the store once, at start
        yield

    app = FastAPI(
        title="sounding",
        version=__version__,
        description="A sounding board for social-media drafts. " + CAUTION,
        lifespan=lifespan,
    )
    app.state.workspace = ws
    errors.install(app)
    for name in ROUTERS:
        spec = f"{__package__}.routers.{name}"
        if importlib.util.find_spec(spec) is not None:
            app.include_router(importlib.import_module(spec).router)
    page = importlib.util.find_spec(f"{__package__}.page")
    if page is not None:
        importlib.import_module(page.name).mount(app)
    return app
