"""A bounded load test on loopback: the real service (uvicorn) answers a
fixed number of concurrent requests while an upload import adds posts.

Bounded in count (THREADS x PER_THREAD requests, one import) and time (a
timeout on every request and on the server's stop), sent only to
127.0.0.1. Zero errors are allowed and every answer must be well-formed.
Throughput is printed for the README, never asserted.

To load another endpoint, add one ``Kind`` to ``KINDS``.
"""

from __future__ import annotations

import json
import shutil
import socket
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
import pytest
import uvicorn
from conftest import NEWS, SUBJECTS, TOKEN, history_csv

from service.api.app import create_app
from service.api.schemas import ImportSummary, Precedents
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace

THREADS, PER_THREAD = 4, 50
BASE_ROWS, IMPORT_ROWS = 40, 240
K = 5

ACCOUNTS = ("loomhaven", "loomhaven_lab")


KNOWN_IDS = {f"base-{i}" for i in range(BASE_ROWS)} | {f"new-{i}" for i in range(IMPORT_ROWS)}


@dataclass(frozen=True)
class Kind:
    """One kind of request in the mix: how to make it and what a good answer is."""

    name: str
    method: str
    path: str
    body: Callable[[int, int], dict[str, Any]]  # (thread, i) -> JSON body
    check: Callable[[dict[str, Any]], None]  # raises on a malformed answer


def precedents_body(t: int, i: int) -> dict[str, Any]:
    return {"text": f"{SUBJECTS[(t + i) % 8]} {NEWS[i % 6]} next week, draft {t}.{i}", "k": K}


def check_precedents(data: dict[str, Any]) -> None:
    found = Precedents.model_validate(data).precedents
    assert len(found) == K
    assert {p.post_id for p in found} <= KNOWN_IDS
    sims = [p.similarity for p in found]
    # Cosine similarities lie in [-1, 1] and come best first.
    assert sims == sorted(sims, reverse=True) and all(-1.0001 <= s <= 1.0001 for s in sims)


KINDS: list[Kind] = [
    Kind("precedents", "POST", "/v1/precedents", precedents_body, check_precedents),
]


@dataclass
class Tally:
    ok: int = 0
    errors: int = 0
    during_import: int = 0
    problems: list[str] = None  # type: ignore[assignment]

    def __post_init__(self) -> None:
        self.problems = []


@pytest.fixture()
def served(tmp_path: Path, embedder) -> Iterator[tuple[str, Workspace]]:
    home = tmp_path / "home"
    ws = Workspace(settings=Settings(home=home, token=TOKEN, import_batch_rows=40), embedder=embedder)
    (tmp_path / "base.csv").write_bytes(history_csv(BASE_ROWS, prefix="base", accounts=ACCOUNTS))
    ws.import_csv(tmp_path / "base.csv", ImportOptions(new_accounts="UTC"))
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))  # a free port on loopback only
    port = sock.getsockname()[1]
    server = uvicorn.Server(uvicorn.Config(create_app(workspace=ws), log_level="warning"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    deadline = time.monotonic() + 60
    while not server.started and thread.is_alive() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert server.started, "the service did not start"
    try:
        yield f"http://127.0.0.1:{port}", ws
    finally:
        server.should_exit = True
        thread.join(timeout=30)
        sock.close()
        ws.close()
        shutil.rmtree(home, ignore_errors=True)
    assert not thread.is_alive(), "the service did not stop"


def test_concurrent_reads_during_an_import(served, artifacts: Path, capsys) -> None:
    base_url, _ws = served
    tally, lock = Tally(), threading.Lock()
    importing = threading.Event()
    import_result: dict[str, Any] = {}

    def client(t: int) -> None:
        with httpx.Client(base_url=base_url, timeout=120) as c:
            for i in range(PER_THREAD):
                kind = KINDS[i % len(KINDS)]
                try:
                    r = c.request(kind.method, kind.path, json=kind.body(t, i))
                    if r.status_code != 200:
                        raise AssertionError(f"{r.status_code} {r.text[:200]}")
                    kind.check(r.json())
                except Exception as exc:  # every failure is counted
                    with lock:
                        tally.errors += 1
                        tally.problems.append(f"{kind.name}: {exc!r}"[:300])
                else:
                    with lock:
                        tally.ok += 1
                        tally.during_import += importing.is_set()

    def importer() -> None:
        with httpx.Client(base_url=base_url, timeout=300) as c:
            importing.set()
            try:
                r = c.post(
                    "/v1/imports",
                    headers={"Authorization": f"Bearer {TOKEN}"},
                    files={
                        "file": (
                            "new.csv",
                            history_csv(IMPORT_ROWS, prefix="new", accounts=ACCOUNTS),
                            "text/csv",
                        )
                    },
                )
                import_result["status"] = r.status_code
                import_result["body"] = r.json()
            finally:
                importing.clear()

    threads = [threading.Thread(target=importer)]
    threads += [threading.Thread(target=client, args=(t,)) for t in range(THREADS)]
    start = time.perf_counter()
    for th in threads:
        th.start()
    for th in threads:
        th.join(timeout=600)
    elapsed = time.perf_counter() - start
    assert not any(th.is_alive() for th in threads), "a client thread hung"

    total = THREADS * PER_THREAD
    assert tally.errors == 0, tally.problems[:5]
    assert tally.ok == total
    assert import_result["status"] == 200, import_result
    summary = ImportSummary.model_validate(import_result["body"])
    assert (summary.added, summary.rejected) == (IMPORT_ROWS, 0)
    # The reads really overlapped the import (else this tested nothing).
    assert tally.during_import > 0
    # Afterwards store and index agree, and the new posts are found.
    health = httpx.get(f"{base_url}/v1/health", timeout=30).json()
    assert health["posts"] == BASE_ROWS + IMPORT_ROWS
    assert health["index"] == {"state": "ready", "count": BASE_ROWS + IMPORT_ROWS}
    r = httpx.post(
        f"{base_url}/v1/precedents",
        timeout=30,
        json={"text": f"{SUBJECTS[3]} {NEWS[3]} (new note 3)", "k": 1},
    )
    assert r.json()["precedents"][0]["post_id"] == "new-3"

    figures = {
        "requests": total,
        "errors": tally.errors,
        "threads": THREADS,
        "during_import": tally.during_import,
        "import_rows": IMPORT_ROWS,
        "seconds": round(elapsed, 2),
        "requests_per_s": round(total / elapsed, 1),
        "kinds": [k.name for k in KINDS],
    }
    (artifacts / "load.json").write_text(json.dumps(figures, indent=2))
    with capsys.disabled():
        print(
            f"\nload: {total} requests from {THREADS} threads ({', '.join(figures['kinds'])}) "
            f"with a {IMPORT_ROWS}-row upload import alongside, {tally.during_import} answered "
            f"during the import; {tally.errors} errors; {elapsed:.1f} s, "
            f"{figures['requests_per_s']} requests/s on this machine"
        )
