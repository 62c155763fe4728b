"""Two `sounding serve` processes on one PostgreSQL store: what one writes,
the other serves, and never half of it.

Each replica has its own data directory (index, uploads) and both share one
forecasters directory (SOUNDING_FORECASTERS_DIR), as the README's shared-store
set-up says. Needs SOUNDING_TEST_POSTGRES_URL; skipped without it.
"""

from __future__ import annotations

import csv
import os
import shutil
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import httpx
import pytest
from support.pgsupport import HOMES, copy_home_to_postgres, needs_postgres, release

pytestmark = [needs_postgres, pytest.mark.slow]

ROOT = Path(__file__).resolve().parents[2]
TOKEN = "replica-token-5"
AUTH = {"Authorization": f"Bearer {TOKEN}"}
NEW = 40  # posts imported through replica A
# An invented theme no demo post touches, so its posts outrank every old one.
QUERY = "Zeppelin regatta: airships race over the lily pond at dusk"


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def themed_csv(path: Path) -> Path:
    t0 = datetime(2026, 6, 1, 9, tzinfo=UTC)
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
        for i in range(NEW):
            w.writerow(
                [
                    f"zeppelin-{i}",
                    "loomhaven",
                    f"Zeppelin regatta night {i}: airship {i} races over the lily pond.",
                    (t0 + timedelta(hours=5 * i)).isoformat(),
                    700 + i,
                ]
            )
    return path


class Replica:
    def __init__(self, *, home: Path, url: str, forecasters: Path, log: Path) -> None:
        self.port = free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        env = {
            **os.environ,
            "PYTHONPATH": str(ROOT),
            "HF_HUB_OFFLINE": "1",
            "SOUNDING_HOME": str(home),
            "SOUNDING_DATABASE_URL": url,
            "SOUNDING_FORECASTERS_DIR": str(forecasters),
            "SOUNDING_TOKEN": TOKEN,
            "SOUNDING_REFRESH_SECONDS": "1",
        }
        self.log = log.open("w")
        self.proc = subprocess.Popen(
            [
                sys.executable,
                "-c",
                "from service.cli import main; main()",
                "serve",
                "--host",
                "127.0.0.1",
                "--port",
                str(self.port),
            ],
            cwd=ROOT,
            env=env,
            stdout=self.log,
            stderr=subprocess.STDOUT,
        )

    def wait_ready(self, client: httpx.Client, deadline: float) -> None:
        while time.monotonic() < deadline:
            assert self.proc.poll() is None, f"replica exited; see {self.log.name}"
            try:
                if client.get(f"{self.base}/v1/health").status_code == 200:
                    return
            except httpx.TransportError:
                pass
            time.sleep(0.5)
        raise AssertionError(f"replica on {self.port} did not start; see {self.log.name}")

    def stop(self) -> None:
        self.proc.terminate()
        try:
            self.proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait(timeout=30)
        self.log.close()


@pytest.fixture()
def replicas(demo_home: Path, tmp_path: Path) -> Iterator[tuple[Replica, Replica]]:
    home_a, home_b = tmp_path / "replica-a", tmp_path / "replica-b"
    url = copy_home_to_postgres(demo_home, home_a)  # the demo history, on PostgreSQL
    forecasters = tmp_path / "shared-forecasters"
    shutil.move(home_a / "forecasters", forecasters)
    home_b.mkdir()  # no index yet: B builds its own from the store
    started: list[Replica] = []
    try:
        for home in (home_a, home_b):
            started.append(
                Replica(home=home, url=url, forecasters=forecasters, log=tmp_path / f"{home.name}.log")
            )
        yield started[0], started[1]
    finally:
        for r in started:
            r.stop()
        release(home_a)
        assert home_a.resolve() not in HOMES


def new_in_precedents(client: httpx.Client, r: Replica) -> int:
    resp = client.post(f"{r.base}/v1/precedents", json={"text": QUERY, "k": NEW + 20})
    assert resp.status_code == 200, resp.text
    return sum(p["post_id"].startswith("zeppelin-") for p in resp.json()["precedents"])


def forecast_version(client: httpx.Client, r: Replica) -> str:
    resp = client.post(
        f"{r.base}/v1/forecasts", json={"text": "Snowdrops along the rill this week", "account": "loomhaven"}
    )
    assert resp.status_code == 200, resp.text
    return str(resp.json()["model_version"])


def test_two_replicas_share_one_store(replicas: tuple[Replica, Replica], tmp_path: Path) -> None:
    a, b = replicas
    with httpx.Client(timeout=300) as client:
        deadline = time.monotonic() + 600  # each process loads the embedding model
        a.wait_ready(client, deadline)
        b.wait_ready(client, deadline)
        assert new_in_precedents(client, b) == 0
        before = forecast_version(client, b)

        with themed_csv(tmp_path / "zeppelins.csv").open("rb") as f:
            resp = client.post(
                f"{a.base}/v1/imports", headers=AUTH, files={"file": ("zeppelins.csv", f, "text/csv")}
            )
        assert resp.status_code == 200, resp.text
        assert resp.json()["added"] == NEW
        # A serves its own import at once.
        assert new_in_precedents(client, a) == NEW

        # B notices the store's change stamp and swaps in a whole new index:
        # every answer holds none of the new posts or all of them, never a part.
        seen = []
        limit = time.monotonic() + 120
        while time.monotonic() < limit:
            seen.append(new_in_precedents(client, b))
            if seen[-1] == NEW:
                break
            time.sleep(0.25)
        assert seen[-1] == NEW, f"B never served the import: {seen[-5:]}"
        assert set(seen) <= {0, NEW}, seen

        # A model trained through A is what B forecasts with.
        resp = client.post(
            f"{a.base}/v1/training", headers=AUTH, json={"metric": "impressions", "backtest": False}
        )
        assert resp.status_code == 200, resp.text
        trained = resp.json()["model_version"]
        assert trained != before
        assert forecast_version(client, b) == trained

        # A forget through B is gone from A's answers too.
        resp = client.delete(f"{b.base}/v1/posts/zeppelin-0", headers=AUTH)
        assert resp.status_code == 200, resp.text
        limit = time.monotonic() + 120
        while time.monotonic() < limit and new_in_precedents(client, a) != NEW - 1:
            time.sleep(0.25)
        assert new_in_precedents(client, a) == NEW - 1
