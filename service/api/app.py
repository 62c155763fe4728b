"""The FastAPI application: one router per resource, errors mapped in one place."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from pathlib import Path

import swagger_ui_bundle
from fastapi import FastAPI
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.responses import HTMLResponse, JSONResponse
from fastapi.staticfiles import StaticFiles

from service import __version__
from service.api import errors, guard, page
from service.api.csp import ContentSecurityPolicy
from service.api.routers import (
    account_changes,
    account_choice,
    distribution,
    forecasts,
    forget,
    health,
    hours,
    imports,
    labels,
    mappings,
    post_map,
    precedents,
    segments,
    surprises,
    team,
    topics,
    track_record,
    training,
    trends,
    variants,
)
from service.forecast.answer import CAUTION
from service.refresher import refreshing
from service.settings import Settings, get_settings
from service.workspace import Workspace

STATIC = Path(__file__).resolve().parent.parent / "static"

# One router module per resource, in the order they appear in /docs. Imported
# by name, so a missing module fails at import rather than dropping an endpoint.
ROUTERS = (
    health,
    precedents,
    forecasts,
    hours,
    variants,
    account_choice,
    segments,
    labels,
    distribution,
    trends,
    topics,
    post_map,
    surprises,
    team,
    imports,
    mappings,
    training,
    forget,
    account_changes,
    track_record,
)


def create_app(
    *, workspace: Workspace | None = None, settings: Settings | None = None, bound_host: str | None = None
) -> FastAPI:
    """Build the app around one workspace (created from settings if not given).
    ``bound_host`` is the address it listens on, one of the Host names it answers."""
    ws = workspace or Workspace(settings=settings or get_settings())
    ws.forecaster.keep_views = False  # a service holds its views, details and all, in memory

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        ws.index()  # check the index against the store once, at start
        # Other processes (replicas, the CLI) may write to the same store.
        with refreshing(ws, every=ws.settings.refresh_seconds):
            yield

    app = FastAPI(
        title="sounding",
        version=__version__,
        description="A sounding board for social-media drafts. " + CAUTION,
        lifespan=lifespan,
        docs_url=None,  # our /docs below serves its files itself, never from a CDN
        redoc_url=None,
    )
    app.state.workspace = ws
    app.state.bound_host = bound_host  # off loopback, recording forecasts needs the token
    errors.install(app)
    guard.install(app, ws.settings, bound=bound_host, routers=[m.router for m in ROUTERS])
    app.add_middleware(ContentSecurityPolicy)
    _docs(app)
    for module in ROUTERS:
        app.include_router(module.router)
    page.mount(app)
    return app


def _docs(app: FastAPI) -> None:
    """/docs: Swagger UI from the swagger-ui-bundle package, so it works offline."""
    app.mount(
        "/docs-assets", StaticFiles(directory=str(swagger_ui_bundle.swagger_ui_path)), name="docs-assets"
    )

    @app.get("/docs", include_in_schema=False)
    def docs() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url="/docs/openapi.json",
            title="sounding API",
            swagger_js_url="/docs-assets/swagger-ui-bundle.js",
            swagger_css_url="/docs-assets/swagger-ui.css",
            swagger_favicon_url="/docs-assets/favicon-32x32.png",
            # Swagger UI would send the schema to its online validator: nothing leaves the machine.
            swagger_ui_parameters={"validatorUrl": None},
        )

    @app.get("/docs/openapi.json", include_in_schema=False)
    def docs_schema() -> JSONResponse:
        # The bundled Swagger UI (4.15) renders OpenAPI 3.0 only and refuses a
        # document that says 3.1; this copy for the page says 3.0.3. The real
        # schema stays at /openapi.json.
        return JSONResponse({**app.openapi(), "openapi": "3.0.3"})
