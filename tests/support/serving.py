"""The real app served by uvicorn on loopback, for tests that need HTTP, and
a page of headless Chromium to drive it with."""

from __future__ import annotations

import math
import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest
import uvicorn
from fastapi import FastAPI

if TYPE_CHECKING:
    from playwright.sync_api import Page

# Debian's Chromium, for the browser tests (CI installs it), and the flags it needs on a
# machine with no network: without the background-networking ones it keeps trying to
# reach outside hosts.
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]

#: The marks of every browser test: marked ``browser``, and skipped where
#: Debian's chromium is missing.
BROWSER = [
    pytest.mark.browser,
    pytest.mark.skipif(
        not CHROMIUM.exists(), reason="Debian's chromium is not at /usr/bin/chromium (CI installs it)"
    ),
]


def shown_count(v: float) -> str:
    """How the page writes a count: rounded half up, with thousands separators."""
    return f"{math.floor(v + 0.5):,}"


@contextmanager
def serve(app: FastAPI, **config: Any) -> Iterator[str]:
    """The app on a free port of 127.0.0.1, in a background thread; stops on
    exit. ``config`` goes to ``uvicorn.Config`` (e.g. the HTTP protocol
    `sounding serve` uses)."""
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    server = uvicorn.Server(uvicorn.Config(app, log_level="warning", lifespan="on", **config))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    deadline = time.monotonic() + 60
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            raise RuntimeError("uvicorn did not start")
        time.sleep(0.05)
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=30)
        sock.close()
        if thread.is_alive():
            raise RuntimeError("uvicorn did not stop")


@contextmanager
def chromium_page(app: FastAPI, *, height: int = 1000) -> Iterator[tuple[str, Page, list[str]]]:
    """The app served (as :func:`serve`) and a fresh page of headless Chromium:
    the base URL, the page, and the script errors the page raises (a test
    ends by checking there were none). The browser is closed on exit."""
    from playwright.sync_api import sync_playwright

    with serve(app) as base, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": height})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            yield base, page, errors
        finally:
            browser.close()
