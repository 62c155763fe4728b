"""The FastAPI application: one router per resource, errors mapped in one place."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from pathlib import Path

from fastapi import FastAPI

from .. import __version__
from ..forecasting import CAUTION
from ..settings import Settings, get_settings
from ..workspace import Workspace
from . import errors, page
from .routers import (
    forecasts,
    forget,
    health,
    hours,
    imports,
    precedents,
    segments,
    training,
    variants,
)

STATIC = Path(__file__).resolve().parent.parent / "static"

# One router module per resource, in the order they appear in /docs. Imported
# by name, so a missing module fails at import rather than dropping an endpoint.
ROUTERS = (health, precedents, forecasts, hours, variants, segments, imports, training, forget)


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
    for module in ROUTERS:
        app.include_router(module.router)
    page.mount(app)
    return app
