"""The page at ``/``: plain HTML, CSS and one small script.

Everything is served from ``service/static``; nothing is fetched from
elsewhere, and the Content-Security-Policy says so to the browser.
"""

from __future__ import annotations

from pathlib import Path

from fastapi import FastAPI
from fastapi.responses import FileResponse
from fastapi.staticfiles import StaticFiles

STATIC = Path(__file__).resolve().parent.parent / "static"

# Only this origin: no CDN, no fonts or scripts from the internet, no inline code.
CSP = (
    "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data: blob:; "
    "connect-src 'self'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'"
)


def mount(app: FastAPI) -> None:
    """Serve the page at ``/`` and its files under ``/static``."""
    app.mount("/static", StaticFiles(directory=STATIC), name="static")

    @app.get("/", include_in_schema=False)
    def index() -> FileResponse:
        return FileResponse(
            STATIC / "index.html",
            media_type="text/html",
            headers={"Content-Security-Policy": CSP, "Cache-Control": "no-cache"},
        )

    @app.get("/import", include_in_schema=False)
    def import_page() -> FileResponse:
        """Preview an export (a dry run), then import it; both need the token."""
        return FileResponse(
            STATIC / "import.html",
            media_type="text/html",
            headers={"Content-Security-Policy": CSP, "Cache-Control": "no-cache"},
        )
