"""Forecast latency over loopback HTTP, and training time, at 10,000 and
100,000 posts, as ratios to measurements made in the same run.

Stores of that size are made from the demo history: each demo post is
repeated with a numbered variant of its text and a vector near its own
(the demo vector plus small noise, renormalised), spread over the same
18 months, so neighbourhoods look like real ones without embedding
100,000 texts first. Timings:

- bare embedding: ``Embedder.encode([draft])``, the floor of any forecast;
- forecast: ``POST /v1/forecasts`` for one draft to a uvicorn server on
  127.0.0.1, end to end (HTTP, embedding, search, features, model);
- training: ``forecasting.train`` with its backtest, at 100,000 posts
  (``--no-train`` skips it);
- a week of hours: ``POST /v1/hours`` with ``week`` (168 slots) for the same
  draft, as a ratio to one unrecorded forecast (aim: <= 4).

Prints p50/p95 and the ratio forecast p50 / embedding p50 (aim: <= 1.5),
and writes JSON under bench/results/.

    python bench/bench_forecast.py [--sizes 10000 100000] [--requests 60] [--no-train]
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import timedelta
from pathlib import Path

import faiss
import httpx
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from models.embedding import Embedder, bundled_model_path  # noqa: E402
from models.index import VectorIndex, recall_at  # noqa: E402
from service.cli.history import _demo_accounts  # noqa: E402
from service.forecast import training as forecasting  # noqa: E402
from service.ingest.options import ImportOptions  # noqa: E402
from service.settings import Settings  # noqa: E402
from service.storage.post_writes import PostRow  # noqa: E402
from service.workspace import Workspace  # noqa: E402

DRAFT = (ROOT / "demo_data" / "sample_draft.txt").read_text().strip()


def bench_embedder() -> Embedder:
    """The embedder a workspace gets from the settings (ONNX by default), with
    its export kept under bench/results/ between runs."""
    s = Settings()
    return Embedder(
        batch_size=s.embed_batch_size,
        backend=s.embed_backend,
        quantize=s.embed_quantize,
        export_dir=ROOT / "bench" / "results" / "embedding",
        threads=s.embed_threads,
    )


class ReferenceEncode:
    """Plain ``SentenceTransformer.encode`` of the draft (torch): the reference
    a forecast's p50 is compared with (forecast p50 <= 1.0x this)."""

    def __init__(self) -> None:
        from sentence_transformers import SentenceTransformer

        self.model = SentenceTransformer(str(bundled_model_path()), device="cpu", local_files_only=True)
        self.model.encode([DRAFT])
        self.times: list[float] = []

    def time_once(self) -> None:
        t0 = time.perf_counter()
        self.model.encode([DRAFT], normalize_embeddings=True, convert_to_numpy=True)
        self.times.append(time.perf_counter() - t0)
        # torch's worker threads spin for a while after an encode; let them
        # park so they do not slow the timing that follows.
        time.sleep(0.1)

    def row(self, forecast_times: list[float]) -> dict[str, object]:
        ref = statistics.median(self.times)
        out = {
            "reference_encode_p50_ms": round(1000 * ref, 2),
            "ratio_p50_reference": round(statistics.median(forecast_times) / ref, 2),
        }
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
    metrics = [
        "impressions",
        "engagements",
        "likes",
        "reposts",
        "replies",
        "link_clicks",
        "profile_clicks",
    ]
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
        batch.append(
            PostRow(
                account=r["account"],
                post_id=f"{r['post_id']}-{rep}",
                text=text,
                posted_at=posted,
                metrics={m: None if np.isnan(r[m]) else int(r[m] * noise) for m in metrics},
                has_media=bool(r["has_media"]),
                vector_key=key,
            )
        )
        if len(batch) == 2000:
            ws.store.write_batch(batch, vectors, model_id=ws.embedder.model_id)
            batch, vectors = [], {}
    if batch:
        ws.store.write_batch(batch, vectors, model_id=ws.embedder.model_id)
    ws.reindex()


SERVER = """
import sys, threading, time
from pathlib import Path
import uvicorn
sys.path.insert(0, sys.argv[2])
from service.api.app import create_app
from service.settings import Settings
config = uvicorn.Config(create_app(settings=Settings(home=Path(sys.argv[1]))),
                        host="127.0.0.1", port=0, log_level="error")
server = uvicorn.Server(config)
thread = threading.Thread(target=server.run)
thread.start()
while not server.started:
    time.sleep(0.05)
print(server.servers[0].sockets[0].getsockname()[1], flush=True)
thread.join()
"""


def serve(home: Path) -> tuple[subprocess.Popen, str]:
    """The service in its own process (so its resident memory is its own)."""
    proc = subprocess.Popen(
        [sys.executable, "-c", SERVER, str(home), str(ROOT)], stdout=subprocess.PIPE, text=True
    )
    port = int(proc.stdout.readline())  # type: ignore[union-attr]
    return proc, f"http://127.0.0.1:{port}"


def rss_mb(pid: int) -> tuple[float, float]:
    """Resident and peak resident memory of a process, in MiB (Linux /proc)."""
    fields = dict(
        line.split(":", 1) for line in Path(f"/proc/{pid}/status").read_text().splitlines() if ":" in line
    )
    return (int(fields["VmRSS"].split()[0]) / 1024, int(fields["VmHWM"].split()[0]) / 1024)


def pct(xs: list[float], q: float) -> float:
    return float(np.percentile(xs, q))


def embed_rate(embedder: Embedder, texts: list[str], batch: int) -> float:
    """Seconds per text when embedding ``texts`` in batches as an import does."""
    t0 = time.perf_counter()
    for i in range(0, len(texts), batch):
        embedder.encode(texts[i : i + batch])
    return (time.perf_counter() - t0) / len(texts)


def search_figures(
    ws: Workspace | VectorIndex, rng: np.random.Generator, n_queries: int = 200
) -> tuple[float, float]:
    """recall@10 of the workspace's index against an exact scan, and the p50
    of one single-query search, for stored vectors moved by a little noise
    (drafts close to past posts)."""
    index = ws if isinstance(ws, VectorIndex) else ws.index()
    xb = index.stored_vectors()
    ids = index.ids_ if index.approximate else faiss.vector_to_array(index.index_.id_map)
    live = np.flatnonzero(ids >= 0)
    pick = rng.choice(live, size=min(n_queries, len(live)), replace=False)
    q = xb[pick] + rng.normal(0, 0.02, (len(pick), xb.shape[1])).astype(np.float32)
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    exact_sims, _ = faiss.knn(np.ascontiguousarray(q), xb, 10, metric=faiss.METRIC_INNER_PRODUCT)
    times, got_sims, got_ids = [], [], []
    for row in q:
        t0 = time.perf_counter()
        s, i = index.search(row[None, :], 10)
        times.append(time.perf_counter() - t0)
        got_sims.append(s[0])
        got_ids.append(i[0])
    recall = recall_at(np.array(got_ids), exact_sims, np.array(got_sims))
    return recall, 1000 * statistics.median(times)


def index_only(sizes: list[int], rng: np.random.Generator, as_json: bool, keep: Path | None) -> None:
    """The index alone at each size, on demo vectors moved by N(0, 0.02) noise
    (the vectors grow() gives a store), built as the service builds it."""
    with tempfile.TemporaryDirectory() as tmp:
        demo = Workspace(settings=Settings(home=(keep or Path(tmp)) / "demo"))
        if not demo.store.counts()["posts"]:
            for handle, name, tz in _demo_accounts():
                demo.store.set_account(handle, display_name=name, timezone=tz)
            demo.import_csv(ROOT / "demo_data" / "posts.csv", ImportOptions(new_accounts="UTC"))
        _, base, _ = demo.store.index_data()
        settings = demo.settings
        demo.close()
    results = []
    out = ROOT / "bench" / "results"
    out.mkdir(exist_ok=True)
    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
    for size in sizes:
        vecs = np.empty((size, base.shape[1]), dtype=np.float32)
        for i in range(0, size, 100_000):
            j = min(size, i + 100_000)
            v = base[np.arange(i, j) % len(base)] + rng.normal(0, 0.02, (j - i, base.shape[1]))
            vecs[i:j] = v / np.linalg.norm(v, axis=1, keepdims=True)
        before = rss_mb(os.getpid())[0]
        t0 = time.perf_counter()
        index = VectorIndex(approximate_above=settings.index_approximate_above).fit(
            np.arange(size, dtype=np.int64), vecs
        )
        build = time.perf_counter() - t0
        del vecs
        gc.collect()
        recall, p50 = search_figures(index, rng)
        cfg = index.config()
        row = {
            "posts": size,
            "search_p50_ms": round(p50, 3),
            "search_recall_at_10": round(recall, 4),
            "index_build_s": round(build, 1),
            "index_rss_mb": round(rss_mb(os.getpid())[0] - before, 1),
            "index": {k: cfg[k] for k in ("kind", "ef_search", "recall_at_10", "count")},
            "load_average": list(os.getloadavg()),
        }
        results.append(row)
        print(json.dumps(row), file=sys.stderr, flush=True)
        (out / f"index-{stamp}.json").write_text(json.dumps(results, indent=2))
        del index
        gc.collect()
    if as_json:
        print(json.dumps(results, indent=2))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--requests", type=int, default=60)
    ap.add_argument(
        "--embed-sample",
        type=int,
        default=512,
        help="texts embedded to extrapolate the time to embed a store's texts",
    )
    ap.add_argument("--no-train", action="store_true")
    ap.add_argument("--no-backtest", action="store_true", help="skip the training run with backtest")
    ap.add_argument("--json", action="store_true", help="print the results as JSON")
    ap.add_argument(
        "--keep",
        type=Path,
        default=None,
        help="build the stores in this directory and keep them (default: a temporary one)",
    )
    ap.add_argument(
        "--index-only",
        action="store_true",
        help="measure only the index (build, recall, search, memory) on perturbed demo "
        "vectors, without a store, training or service",
    )
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    if args.index_only:
        index_only(args.sizes, rng, args.json, args.keep)
        return
    embedder = bench_embedder()
    embedder.encode(["warm up"])
    reference = ReferenceEncode()
    results: list[dict[str, object]] = []
    out = ROOT / "bench" / "results"
    out.mkdir(exist_ok=True)
    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
    with tempfile.TemporaryDirectory() as tmpdir:
        tmp = args.keep or Path(tmpdir)
        demo = Workspace(settings=Settings(home=tmp / "demo"), embedder=embedder)
        if not demo.store.counts()["posts"]:
            for handle, name, tz in _demo_accounts():
                demo.store.set_account(handle, display_name=name, timezone=tz)
            demo.import_csv(ROOT / "demo_data" / "posts.csv", ImportOptions(new_accounts="UTC"))
        texts = list(demo.store.posts_frame()["text"])
        sample = [
            texts[i] for i in rng.choice(len(texts), size=min(args.embed_sample, len(texts)), replace=False)
        ]
        per_text = embed_rate(embedder, sample, demo.settings.embed_batch_size)
        for size in args.sizes:
            home = tmp / f"s{size}"
            ws = Workspace(settings=Settings(home=home), embedder=embedder)
            t0 = time.perf_counter()
            if ws.store.counts()["posts"] != size:
                grow(ws, demo, size, rng)
            else:
                ws.index()
            fill = time.perf_counter() - t0
            index_cfg = ws.index().config()
            recall, search_p50 = search_figures(ws, rng)
            train_s = train_bt = None
            if not args.no_train:
                t0 = time.perf_counter()
                forecasting.train(ws, "impressions", backtest=False)
                train_s = time.perf_counter() - t0
                if not args.no_backtest:
                    t0 = time.perf_counter()
                    forecasting.train(ws, "impressions", backtest=True)
                    train_bt = time.perf_counter() - t0
            ws.close()
            del ws
            gc.collect()
            proc, url = serve(home)
            body = {"text": DRAFT, "account": "loomhaven", "planned_at": "2026-12-02T12:00"}
            emb, fc, bare, week = [], [], [], []
            # A week of hours (168 slots) for the same draft: aim <= 4x one forecast.
            hours_body = {"text": DRAFT, "account": "loomhaven", "day": "2026-12-07", "week": True}
            # The same forecast with "record": false, interleaved, so the cost of keeping
            # it in the track record is a ratio within this run.
            unrecorded = {**body, "record": False}
            try:
                with httpx.Client(base_url=url, timeout=600) as client:
                    client.post("/v1/forecasts", json=body).raise_for_status()  # warm caches
                    rss, peak = rss_mb(proc.pid)
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
                        t0 = time.perf_counter()
                        client.post("/v1/hours", json=hours_body).raise_for_status()
                        week.append(time.perf_counter() - t0)
            finally:
                proc.terminate()
                proc.wait(timeout=30)
            embed_eq = per_text * size
            row = {
                "posts": size,
                "embed_p50_ms": round(1000 * statistics.median(emb), 2),
                "forecast_p50_ms": round(1000 * statistics.median(fc), 2),
                "forecast_p95_ms": round(1000 * pct(fc, 95), 2),
                "ratio_p50": round(statistics.median(fc) / statistics.median(emb), 2),
                "search_p50_ms": round(search_p50, 3),
                "search_recall_at_10": round(recall, 4),
                "train_s": None if train_s is None else round(train_s, 1),
                "train_backtest_s": None if train_bt is None else round(train_bt, 1),
                "embed_equivalent_s": round(embed_eq, 1),
                "train_ratio": None if train_s is None else round(train_s / embed_eq, 3),
                "rss_mb": round(rss, 1),
                # Against a plain SentenceTransformer.encode of the draft (torch).
                **reference.row(fc),
                "embedding": embedder.info()["backend"],
                # Recorded / not recorded in the track record.
                "forecast_unrecorded_p50_ms": round(1000 * statistics.median(bare), 2),
                "record_ratio_p50": round(statistics.median(fc) / statistics.median(bare), 3),
                "hours_week_p50_ms": round(1000 * statistics.median(week), 2),
                "hours_week_ratio_p50": round(statistics.median(week) / statistics.median(bare), 2),
                # Context, needed to read the figures.
                "rss_peak_mb": round(peak, 1),
                "fill_s": round(fill, 1),
                "index": {k: index_cfg[k] for k in ("kind", "ef_search", "recall_at_10", "count")},
                "embed_ms_per_text_batched": round(1000 * per_text, 2),
                "load_average": list(os.getloadavg()),
            }
            results.append(row)
            print(json.dumps(row), file=sys.stderr, flush=True)
            (out / f"forecast-{stamp}.json").write_text(json.dumps(results, indent=2))
        demo.close()
    if args.json:
        print(json.dumps(results, indent=2))
    print(f"written to {out / f'forecast-{stamp}.json'}", file=sys.stderr)


if __name__ == "__main__":
    main()
