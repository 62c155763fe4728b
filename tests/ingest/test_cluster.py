"""Import with embedding on a Ray cluster (service.ingest.ray_embedding): a local Ray head
limited to 2 CPUs, reached through the Ray Client as a remote cluster would be."""

from __future__ import annotations

import csv
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from models.embedding import Embedder
from models.errors import ServiceUnavailable
from service.cli import app
from service.cli.base import use_embedder
from service.ingest.options import ImportOptions
from service.ingest.ray_embedding import RayEmbedder, check_address
from service.settings import Settings
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[2]
DEMO_CSV = ROOT / "demo_data" / "posts.csv"
RAY = Path(sys.executable).with_name("ray")


def free_ports(n: int) -> list[int]:
    socks = [socket.socket() for _ in range(n)]
    try:
        for s in socks:
            s.bind(("127.0.0.1", 0))
        return [s.getsockname()[1] for s in socks]
    finally:
        for s in socks:
            s.close()


@pytest.fixture(scope="module")
def ray_head() -> Iterator[str]:
    """A Ray head (2 CPUs) with its client server on free ports; yields ray://..."""
    if not RAY.is_file():
        pytest.skip("the ray command is not installed (pip install 'sounding[cluster]')")
    try:
        import grpc  # noqa: F401  (the Ray Client needs it)
        import ray
        import ray.util.client  # noqa: F401
    except ImportError as exc:
        pytest.skip(f"Ray with the client is not installed ({exc.name})")
    ports = free_ports(8)
    gcs, client, node, obj, agent, agent_grpc, metrics, env_agent = ports
    # A block of 100 worker ports near a free one, holding none of the ports above
    # (Ray refuses to start when two of its components would share a port).
    lo = free_ports(1)[0] // 100 * 100
    while any(lo <= p <= lo + 99 for p in ports):
        lo = free_ports(1)[0] // 100 * 100
    tmp = Path(tempfile.mkdtemp(prefix="sray"))  # short: Ray's socket paths must stay short
    log = (tmp / "head.log").open("w")
    env = dict(os.environ, PYTHONPATH=str(ROOT), RAY_USAGE_STATS_ENABLED="0")
    cmd = [
        str(RAY),
        "start",
        "--head",
        "--block",
        "--num-cpus",
        "2",
        "--port",
        str(gcs),
        "--ray-client-server-port",
        str(client),
        "--node-manager-port",
        str(node),
        "--object-manager-port",
        str(obj),
        "--dashboard-agent-listen-port",
        str(agent),
        "--dashboard-agent-grpc-port",
        str(agent_grpc),
        "--metrics-export-port",
        str(metrics),
        "--runtime-env-agent-port",
        str(env_agent),
        "--include-dashboard",
        "false",
        "--min-worker-port",
        str(lo),
        "--max-worker-port",
        str(lo + 99),
        "--object-store-memory",
        str(200_000_000),
        "--temp-dir",
        str(tmp),
        "--disable-usage-stats",
    ]
    proc = subprocess.Popen(
        cmd, stdout=log, stderr=subprocess.STDOUT, env=env, start_new_session=True
    )  # its own group: stopped by our pid only
    try:
        deadline, up = time.monotonic() + 120, False
        while not up and proc.poll() is None and time.monotonic() < deadline:
            with socket.socket() as s:
                up = s.connect_ex(("127.0.0.1", client)) == 0
            time.sleep(0 if up else 1)
        if not up:
            text = (tmp / "head.log").read_text()[-800:]
            pytest.skip(f"a local Ray head could not start here: {text}")
        yield f"ray://127.0.0.1:{client}"
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGTERM)  # `ray start --block` stops what it started
            try:
                # Ray's own orderly stop waits about 30 s for its processes; the whole
                # group (its own session) is ended after a few seconds instead.
                proc.wait(timeout=5)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait(timeout=30)
        log.close()
        shutil.rmtree(tmp, ignore_errors=True)


def small_csv(path: Path, n: int = 60) -> Path:
    with DEMO_CSV.open(encoding="utf-8", newline="") as f:
        rows = list(csv.reader(f))
    with path.open("w", encoding="utf-8", newline="") as f:
        csv.writer(f).writerows(rows[: n + 1])
    return path


def test_address_must_be_a_ray_client_address() -> None:
    for bad in ("127.0.0.1:10001", "ray://", "ray://host", "http://host:10001", "ray://h:1 x"):
        with pytest.raises(Exception, match="not a Ray Client address"):
            check_address(bad)
    assert check_address("ray://head.internal:10001") == "ray://head.internal:10001"


def test_cli_refuses_a_bad_cluster_address(
    embedder: Embedder, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(tmp_path / "home"))
    res = CliRunner().invoke(
        app, ["import", str(small_csv(tmp_path / "p.csv", 5)), "--cluster", "10.0.0.1:10001"]
    )
    assert res.exit_code == 1 and "ray://HOST:PORT" in res.output
    assert (
        Workspace(settings=Settings(home=tmp_path / "home"), embedder=embedder).store.counts()["posts"] == 0
    )


def test_connect_tries_again_after_a_failed_session(
    embedder: Embedder, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A head whose per-client server dies at start is tried again: two failures
    then a success connect; three failures report how many tries were made."""
    ray = pytest.importorskip("ray")
    pytest.importorskip("ray.data")
    calls: list[str] = []
    shutdowns: list[int] = []

    def flaky_init(address: str, **_: object) -> None:
        calls.append(address)
        if len(calls) <= failures:
            raise ConnectionAbortedError("Starting Ray client server failed")

    monkeypatch.setattr(ray, "init", flaky_init)
    monkeypatch.setattr(ray, "shutdown", lambda: shutdowns.append(1))
    addr = "ray://head.internal:10001"

    failures = 2
    emb = RayEmbedder(address=addr, embedder=embedder, retry_pause=0.0).connect()
    assert calls == [addr] * 3 and len(shutdowns) == 2 and emb._ray is ray

    calls.clear()
    failures = 3
    with pytest.raises(ServiceUnavailable, match=r"3 tries\): ConnectionAbortedError"):
        RayEmbedder(address=addr, embedder=embedder, retry_pause=0.0).connect()
    assert len(calls) == 3


@pytest.mark.slow
def test_cluster_import_equals_local_import(
    ray_head: str, embedder: Embedder, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import ray

    src = small_csv(tmp_path / "posts.csv", 60)
    local = Workspace(settings=Settings(home=tmp_path / "local"), embedder=embedder)
    local_summary = local.import_csv(src, ImportOptions(new_accounts="UTC"))

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(tmp_path / "cluster"))
    before = embedder.calls
    try:
        res = CliRunner().invoke(
            app,
            [
                "import",
                str(src),
                "--cluster",
                ray_head,
                "--cluster-workers",
                "2",
                "--json",
                "--new-account",
                "--timezone",
                "UTC",
            ],
        )
    finally:
        ray.shutdown()
    assert res.exit_code == 0, res.output
    assert embedder.calls == before, "texts were embedded locally, not on the cluster"
    remote = Workspace(settings=Settings(home=tmp_path / "cluster"), embedder=embedder)
    assert local_summary.added == 60
    assert remote.store.counts() == local.store.counts()
    # The same rows, field by field.
    a = local.store.posts_frame().sort_values("post_id").reset_index(drop=True)
    b = remote.store.posts_frame().sort_values("post_id").reset_index(drop=True)
    cols = [c for c in a.columns if c != "pk"]
    assert a[cols].equals(b[cols])
    # Reference: the vectors of the local import, computed here by sentence-transformers;
    # the cluster's must equal them within float tolerance.
    keys = list(a["vector_key"])
    va, vb = local.store.vectors(keys), remote.store.vectors(keys)
    assert va.shape == vb.shape == (60, 384)
    np.testing.assert_allclose(vb, va, atol=1e-5)
    assert float(np.min(np.sum(va * vb, axis=1))) >= 0.99999
    # And the indexes built from them find the same 10 nearest posts (by post id).
    q = embedder.encode(["Bluebells in the woodland walk this week"])
    ids_by_pk_a, ids_by_pk_b = (
        dict(zip(a["pk"], a["post_id"], strict=True)),
        dict(zip(b["pk"], b["post_id"], strict=True)),
    )
    near_a = [ids_by_pk_a[int(p)] for p in local.index().search(q, 10)[1][0]]
    near_b = [ids_by_pk_b[int(p)] for p in remote.index().search(q, 10)[1][0]]
    assert near_a == near_b
    local.close()
    remote.close()
