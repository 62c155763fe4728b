"""Forecast latency over loopback HTTP, and training time, at 10,000 and
100,000 posts, as ratios to measurements made in the same run.

Stores of that size are made from the demo history: each demo post is
repeated with a numbered variant of its text and a vector near its own
(the demo vector plus small noise, renormalised), spread over the same
18 months, so neighbourhoods look like real ones without embedding
100,000 texts first. Timings:

- bare embedding: ``Embedder.encode([draft])``, the floor of any forecast;
- reference encode: a plain ``SentenceTransformer.encode([draft])`` (torch),
  reported as ``ratio_p50_reference`` = forecast p50 / reference p50 (aim:
  <= 1.0 at 100,000 posts with the ONNX backend, issue 16);
- forecast: ``POST /v1/forecasts`` for one draft to a uvicorn server on
  127.0.0.1, end to end (HTTP, embedding, search, features, model);
- training: ``forecasting.train`` with its backtest, at 100,000 posts
  (``--no-train`` skips it).

Prints p50/p95 and the ratio forecast p50 / embedding p50 (aim: <= 1.5),
and writes JSON under bench/results/.

    python bench/bench_forecast.py [--sizes 10000 100000] [--requests 60] [--no-train]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import threading
import time
from datetime import timedelta
from pathlib import Path

import httpx
import numpy as np
import uvicorn

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from models.embedding import Embedder, bundled_model_path  # noqa: E402
from service import forecasting  # noqa: E402
from service.api.app import create_app  # noqa: E402
from service.cli.history import _demo_accounts  # noqa: E402
from service.settings import Settings  # noqa: E402
from service.store import PostRow  # noqa: E402
from service.timeparse import parse_time  # noqa: E402
from service.track_record import give  # noqa: E402
from service.workspace import Workspace  # noqa: E402

DRAFT = (ROOT / "demo_data" / "sample_draft.txt").read_text().strip()


# Embedding (issue 16): the service's configured backend, and the reference.
def bench_embedder() -> Embedder:
    """The embedder a workspace gets from the settings (ONNX by default), with
    its export kept under bench/results/ between runs."""
    s = Settings()
    return Embedder(batch_size=s.embed_batch_size, backend=s.embed_backend,
                    quantize=s.embed_quantize, export_dir=ROOT / "bench" / "results" / "embedding",
                    threads=s.embed_threads)


class ReferenceEncode:
    """Plain ``SentenceTransformer.encode`` of the draft (torch): the reference
    a forecast's p50 is compared with (aim: forecast p50 <= 1.0x this)."""

    def __init__(self) -> None:
        from sentence_transformers import SentenceTransformer

        self.model = SentenceTransformer(str(bundled_model_path()), device="cpu",
                                         local_files_only=True)
        self.model.encode([DRAFT])
        self.times: list[float] = []

    def time_once(self) -> None:
        t0 = time.perf_counter()
        self.model.encode([DRAFT], normalize_embeddings=True, convert_to_numpy=True)
        self.times.append(time.perf_counter() - t0)

    def row(self, forecast_times: list[float]) -> dict[str, object]:
        ref = statistics.median(self.times)
        out = {"reference_encode_p50_ms": round(1000 * ref, 2),
               "ratio_p50_reference": round(statistics.median(forecast_times) / ref, 2)}
        self.times = []
        return out


def grow(ws: Workspace, demo: Workspace, size: int, rng: np.random.Generator) -> None:
    """Fill ``ws`` with ``size`` posts derived from the demo history."""
    frame = demo.store.posts_frame()
    vecs = demo.store.vectors(list(frame["vector_key"]))
    for handle, name, tz in _demo_accounts():
        ws.store.set_account(handle, display_name=name, timezone=tz)
    span = frame["posted_at"].max() - frame["posted_at"].min()
    batch: list[PostRow] = []
    vectors: dict[str, np.ndarray] = {}
    metrics = [m for m in ("impressions", "engagements", "likes", "reposts", "replies",
                           "link_clicks", "profile_clicks")]
    for n in range(size):
        i = n % len(frame)
        rep = n // len(frame)
        r = frame.iloc[i]
        text = r["text"] if rep == 0 else f"{r['text']} ({rep})"
        key = ws.embedder.key(text)
        v = vecs[i] + (0 if rep == 0 else rng.normal(0, 0.02, vecs.shape[1]))
        vectors[key] = (v / np.linalg.norm(v)).astype(np.float32)
        shift = timedelta(seconds=float(rng.uniform(-1, 1) * 3 * 86400)) if rep else timedelta(0)
        posted = min(r["posted_at"] + shift, frame["posted_at"].min() + span).to_pydatetime()
        noise = float(np.exp(rng.normal(0, 0.2))) if rep else 1.0
        batch.append(PostRow(
            account=r["account"], post_id=f"{r['post_id']}-{rep}", text=text, posted_at=posted,
            metrics={m: None if np.isnan(r[m]) else int(r[m] * noise) for m in metrics},
            has_media=bool(r["has_media"]), vector_key=key))
        if len(batch) == 2000:
            ws.store.write_batch(batch, vectors, model_id=ws.embedder.model_id)
            batch, vectors = [], {}
    if batch:
        ws.store.write_batch(batch, vectors, model_id=ws.embedder.model_id)
    ws.reindex()


def serve(ws: Workspace) -> tuple[uvicorn.Server, threading.Thread, str]:
    config = uvicorn.Config(create_app(workspace=ws), host="127.0.0.1", port=0, log_level="error")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    while not server.started:
        time.sleep(0.05)
    port = server.servers[0].sockets[0].getsockname()[1]
    return server, thread, f"http://127.0.0.1:{port}"


def pct(xs: list[float], q: float) -> float:
    return float(np.percentile(xs, q))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--requests", type=int, default=60)
    ap.add_argument("--no-train", action="store_true")
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    embedder = bench_embedder()
    embedder.encode(["warm up"])
    reference = ReferenceEncode()
    results: dict[str, object] = {"draft": DRAFT, "sizes": {}}
    with tempfile.TemporaryDirectory() as tmp:
        demo = Workspace(settings=Settings(home=Path(tmp) / "demo"), embedder=embedder)
        for handle, name, tz in _demo_accounts():
            demo.store.set_account(handle, display_name=name, timezone=tz)
        demo.import_csv(ROOT / "demo_data" / "posts.csv")
        for size in args.sizes:
            ws = Workspace(settings=Settings(home=Path(tmp) / f"s{size}"), embedder=embedder)
            t0 = time.perf_counter()
            grow(ws, demo, size, rng)
            fill = time.perf_counter() - t0
            t0 = time.perf_counter()
            forecasting.train(ws, "impressions", backtest=not args.no_train and size == max(args.sizes))
            train_s = time.perf_counter() - t0
            server, thread, url = serve(ws)
            body = {"text": DRAFT, "account": "loomhaven", "planned_at": "2026-12-02T12:00"}
            emb, fc, bare = [], [], []
            # Track record (issue 11): the same forecast with "record": false, interleaved,
            # so the cost of recording it is a ratio within this run.
            unrecorded = {**body, "record": False}
            with httpx.Client(base_url=url, timeout=60) as client:
                client.post("/v1/forecasts", json=body).raise_for_status()  # warm caches
                for _ in range(args.requests):
                    t0 = time.perf_counter()
                    embedder.encode([DRAFT])
                    emb.append(time.perf_counter() - t0)
                    t0 = time.perf_counter()
                    client.post("/v1/forecasts", json=body).raise_for_status()
                    fc.append(time.perf_counter() - t0)
                    reference.time_once()
                    t0 = time.perf_counter()
                    client.post("/v1/forecasts", json=unrecorded).raise_for_status()
                    bare.append(time.perf_counter() - t0)
            server.should_exit = True
            thread.join(timeout=10)
            # In process: everything the track record adds to a forecast (adaptation, live
            # coverage, staleness checks and the insert) against the bare forecaster.
            drafts = [forecasting.Draft(text=DRAFT, account="loomhaven",
                                        planned_at=parse_time("2026-12-02T12:00Z"))]
            plain, given = [], []
            for _ in range(args.requests):
                t0 = time.perf_counter()
                ws.forecaster.forecast(drafts)
                plain.append(time.perf_counter() - t0)
                t0 = time.perf_counter()
                give(ws, drafts, source="bench")
                given.append(time.perf_counter() - t0)
            row = {
                "posts": size, "fill_s": round(fill, 1), "train_s": round(train_s, 1),
                "train_with_backtest": not args.no_train and size == max(args.sizes),
                "embed_p50_ms": round(1000 * statistics.median(emb), 2),
                "forecast_p50_ms": round(1000 * statistics.median(fc), 2),
                "forecast_p95_ms": round(1000 * pct(fc, 95), 2),
                "ratio_p50": round(statistics.median(fc) / statistics.median(emb), 2),
                "embedding": embedder.info()["backend"],
                **reference.row(fc),
                "forecast_unrecorded_p50_ms": round(1000 * statistics.median(bare), 2),
                "record_ratio_p50": round(statistics.median(fc) / statistics.median(bare), 3),
                "in_process_forecast_p50_ms": round(1000 * statistics.median(plain), 2),
                "in_process_track_record_p50_ms": round(1000 * statistics.median(given), 2),
                "track_record_ratio_p50": round(statistics.median(given) / statistics.median(plain), 3),
            }
            results["sizes"][str(size)] = row  # type: ignore[index]
            print(json.dumps(row))
            ws.close()
        demo.close()
    out = ROOT / "bench" / "results"
    out.mkdir(exist_ok=True)
    (out / "forecast.json").write_text(json.dumps(results, indent=2))
    print(f"written to {out / 'forecast.json'}")


if __name__ == "__main__":
    main()
