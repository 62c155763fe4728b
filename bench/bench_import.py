#!/usr/bin/env python3
"""Import benchmark: how close is a full import to bare embedding, and how cheap is a re-import?

Measured in one run, with one Embedder whose model is loaded (and warmed up)
before any clock starts:

  (a) bare embedding of the demo CSV's texts, in the same batches the importer
      makes (``import_batch_rows`` rows a batch, only texts not embedded before);
  (b) a full import of the demo CSV into an empty temporary data directory
      (validation, embedding, writes, index update);
  (c) a re-import of the unchanged file into the same directory.

Against the reference, measured in the same run on the same texts and batches:

  (r) a plain ``SentenceTransformer.encode`` (torch), alternated batch by batch
      with (a) so that both see the same load;
  (t) the same full import with the torch backend (the import before the ONNX
      backend), into another empty data directory (``--no-torch-import`` skips it).

Printed and saved (bench/results/, gitignored) as ratios from this one run:

  embedding_time / import_time     aim >= 0.8: the import adds little to embedding
  first_import_time / reimport     aim >= 20:  a re-import embeds nothing
  reference_encode / embedding     how much faster the backend embeds than plain encode
  torch_import / import            aim >= 1.5: the backend's gain on a whole import
  reference_encode / import        the whole import against plain encode of its texts

It also checks the backend's vectors against the reference's on every text:
the lowest cosine, and whether each text's top-10 neighbours by scikit-learn's
exact NearestNeighbors are the same (cosine >= 0.99999, identical).

The import is also broken down by stage (time inside Embedder.encode,
Store.write_batch, the vector-cache lookup and the index update) so that a
low ratio says where the time goes. No assertions: timings depend on the
machine and on what else runs on it (the load average is recorded).

Usage:  /path/to/venv/bin/python bench/bench_import.py [--csv FILE] [--limit N] [--profile]
            [--backend auto|onnx|torch] [--quantize none|int8] [--no-torch-import]
"""

from __future__ import annotations

import argparse
import cProfile
import csv
import functools
import io
import json
import os
import platform
import pstats
import sys
import tempfile
import time
from collections import defaultdict
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from models.embedding import Embedder, bundled_model_path, normalise_text  # noqa: E402
from service.cli.history import _demo_accounts  # noqa: E402
from service.ingest.options import ImportOptions  # noqa: E402
from service.settings import Settings  # noqa: E402
from service.workspace import Workspace  # noqa: E402

DEMO_CSV = ROOT / "demo_data" / "posts.csv"
RESULTS = Path(__file__).resolve().parent / "results"


def read_rows(path: Path, limit: int | None) -> tuple[list[str], list[list[str]]]:
    with path.open(encoding="utf-8-sig", newline="") as f:
        reader = csv.reader(f)
        header = next(reader)
        rows = [r for _, r in zip(range(limit or 10**12), reader, strict=False)]
    return header, rows


def import_batches(texts: list[str], batch_rows: int, key: Callable[[str], str]) -> list[list[str]]:
    """The texts the importer embeds, batch by batch: per batch of rows, each
    vector key not seen before, once."""
    seen: set[str] = set()
    batches = []
    for i in range(0, len(texts), batch_rows):
        batch: dict[str, str] = {}
        for t in texts[i : i + batch_rows]:
            k = key(t)
            if k not in seen:
                seen.add(k)
                batch.setdefault(k, t)
        batches.append(list(batch.values()))
    return batches


class StageTimer:
    """Wraps methods to add up the wall time spent inside them."""

    def __init__(self) -> None:
        self.total: dict[str, float] = defaultdict(float)
        self._undo: list[Callable[[], None]] = []

    def wrap(self, obj: Any, name: str, label: str) -> None:
        original = getattr(obj, name)

        @functools.wraps(original)
        def timed(*args: Any, **kwargs: Any) -> Any:
            t = time.perf_counter()
            try:
                return original(*args, **kwargs)
            finally:
                self.total[label] += time.perf_counter() - t

        setattr(obj, name, timed)
        self._undo.append(lambda: delattr(obj, name))

    def reset(self) -> None:
        self.total.clear()

    def restore(self) -> None:
        for undo in reversed(self._undo):
            undo()
        self._undo.clear()


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--csv", type=Path, default=DEMO_CSV, help="CSV to import (default: the demo)")
    ap.add_argument("--limit", type=int, default=None, help="Only the first N rows (quick runs)")
    ap.add_argument("--profile", action="store_true", help="cProfile the first import too")
    ap.add_argument(
        "--backend",
        choices=["auto", "onnx", "torch"],
        default=None,
        help="Embedding backend (default: SOUNDING_EMBED_BACKEND, auto)",
    )
    ap.add_argument(
        "--quantize",
        choices=["none", "int8"],
        default=None,
        help="Quantisation (default: SOUNDING_EMBED_QUANTIZE, none)",
    )
    ap.add_argument(
        "--export-dir",
        type=Path,
        default=RESULTS / "embedding",
        help="Where the ONNX export is kept between runs",
    )
    ap.add_argument(
        "--no-torch-import", action="store_true", help="Skip (t), the import with the torch backend"
    )
    args = ap.parse_args()

    settings = Settings()
    batch_rows = settings.import_batch_rows
    embedder = Embedder(
        batch_size=settings.embed_batch_size,
        backend=args.backend or settings.embed_backend,
        quantize=args.quantize or settings.embed_quantize,
        export_dir=args.export_dir,
        threads=settings.embed_threads,
    )
    t = time.perf_counter()
    embedder.encode(["warm up the model before any clock starts"])
    load_s = time.perf_counter() - t
    reference = reference_model()

    header, rows = read_rows(args.csv, args.limit)
    tmp = Path(tempfile.mkdtemp(prefix="sounding-bench-"))
    csv_path = tmp / "posts.csv"
    with csv_path.open("w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)
        w.writerow(header)
        w.writerows(rows)
    text_col = header.index("text")
    batches = import_batches([r[text_col] for r in rows], batch_rows, embedder.key)
    n_texts = sum(len(b) for b in batches)
    load_before = os.getloadavg()

    # (a) bare embedding, same batches and batch size as the importer, alternated
    # batch by batch with (r), plain SentenceTransformer.encode of the same texts.
    embed_s = ref_s = 0.0
    ours, ref = [], []
    for b in batches:
        if not b:
            continue
        clean = [normalise_text(x) for x in b]
        t = time.perf_counter()
        ref.append(
            reference.encode(
                clean,
                batch_size=embedder.batch_size,
                normalize_embeddings=True,
                convert_to_numpy=True,
                show_progress_bar=False,
            )
        )
        ref_s += time.perf_counter() - t
        t = time.perf_counter()
        ours.append(embedder.encode(b))
        embed_s += time.perf_counter() - t
    agreement = compare_vectors(np.concatenate(ours), np.concatenate(ref))

    # (t) the same import with the torch backend, for the before/after ratio.
    torch_import_s = None
    if not args.no_torch_import:
        torch_embedder = Embedder(batch_size=settings.embed_batch_size, backend="torch")
        torch_embedder._model = reference  # the same loaded model, already warm
        torch_embedder.backend_ = "torch"
        tws = Workspace(settings=Settings(home=tmp / "home-torch"), embedder=torch_embedder)
        for handle, name, tz in _demo_accounts():
            tws.store.set_account(handle, display_name=name, timezone=tz)
        t = time.perf_counter()
        tws.import_csv(csv_path, ImportOptions(new_accounts="UTC"))
        torch_import_s = time.perf_counter() - t
        tws.close()

    # (b) full import into an empty data directory.
    ws = Workspace(settings=Settings(home=tmp / "home"), embedder=embedder)
    for handle, name, tz in _demo_accounts():
        ws.store.set_account(handle, display_name=name, timezone=tz)
    stages = StageTimer()
    stages.wrap(embedder, "encode", "embed (Embedder.encode)")
    stages.wrap(ws.store, "write_batch", "write (Store.write_batch)")
    stages.wrap(ws.store, "missing_vectors", "vector cache lookup")
    stages.wrap(ws, "_sync_index", "index update")
    profiler = cProfile.Profile() if args.profile else None
    calls0 = embedder.calls
    t = time.perf_counter()
    if profiler:
        profiler.enable()
    first = ws.import_csv(csv_path, ImportOptions(new_accounts="UTC"))
    if profiler:
        profiler.disable()
    import_s = time.perf_counter() - t
    first_stages = dict(stages.total)
    embedded_first = embedder.calls - calls0
    stages.reset()

    # (c) re-import of the unchanged file.
    calls1 = embedder.calls
    t = time.perf_counter()
    again = ws.import_csv(csv_path, ImportOptions(new_accounts="UTC"))
    reimport_s = time.perf_counter() - t
    re_stages = dict(stages.total)
    embedded_again = embedder.calls - calls1
    stages.restore()
    ws.close()
    load_after = os.getloadavg()

    def breakdown(total: float, parts: dict[str, float]) -> dict[str, float]:
        out = {k: round(v, 3) for k, v in sorted(parts.items())}
        out["other (read, validate, hash, stamp)"] = round(total - sum(parts.values()), 3)
        return out

    result = {
        "when": datetime.now(UTC).isoformat(timespec="seconds"),
        "csv": str(args.csv),
        "rows": len(rows),
        "texts_embedded": n_texts,
        "batch_rows": batch_rows,
        "embed_batch_size": embedder.batch_size,
        "model_load_s": round(load_s, 3),
        "embedding_s": round(embed_s, 3),
        "import_s": round(import_s, 3),
        "reimport_s": round(reimport_s, 3),
        "ratio_embedding_over_import": round(embed_s / import_s, 3),
        "ratio_import_over_reimport": round(import_s / reimport_s, 1),
        "embedding": embedder.info(),
        "reference_encode_s": round(ref_s, 3),
        "ratio_reference_encode_over_embedding": round(ref_s / embed_s, 3),
        "ratio_reference_encode_over_import": round(ref_s / import_s, 3),
        "torch_import_s": None if torch_import_s is None else round(torch_import_s, 3),
        "ratio_torch_import_over_import": (
            None if torch_import_s is None else round(torch_import_s / import_s, 3)
        ),
        "agreement_with_reference": agreement,
        "import_breakdown_s": breakdown(import_s, first_stages),
        "reimport_breakdown_s": breakdown(reimport_s, re_stages),
        "import_summary": first.model_dump(mode="json", exclude={"problems"}),
        "reimport_summary": again.model_dump(mode="json", exclude={"problems"}),
        "texts_embedded_by_import": embedded_first,
        "texts_embedded_by_reimport": embedded_again,
        "machine": {
            "python": platform.python_version(),
            "cpus": os.cpu_count(),
            "torch_threads": _torch_threads(),
            "load_average_before": [round(x, 2) for x in load_before],
            "load_average_after": [round(x, 2) for x in load_after],
        },
    }

    print(
        f"rows {len(rows)}, texts embedded {n_texts} (batches of {batch_rows} rows, "
        f"embedder batch size {embedder.batch_size})"
    )
    print(f"(a) bare embedding      {embed_s:8.2f} s")
    print(f"(b) first import        {import_s:8.2f} s   embedded {embedded_first} texts")
    for k, v in result["import_breakdown_s"].items():
        print(f"      {k:<38} {v:8.2f} s  {100 * v / import_s:5.1f} %")
    print(f"(c) re-import unchanged {reimport_s:8.2f} s   embedded {embedded_again} texts")
    for k, v in result["reimport_breakdown_s"].items():
        print(f"      {k:<38} {v:8.2f} s  {100 * v / reimport_s:5.1f} %")
    print(f"(r) reference encode    {ref_s:8.2f} s   plain SentenceTransformer.encode, same texts")
    if torch_import_s is not None:
        print(f"(t) import with torch   {torch_import_s:8.2f} s")
    print(f"backend: {embedder.info()['backend']} ({embedder.quantize})")
    print(f"embedding / import      {result['ratio_embedding_over_import']:8.3f}   (aim >= 0.8)")
    print(
        f"reference / embedding   {result['ratio_reference_encode_over_embedding']:8.3f}   "
        "(> 1: the backend embeds faster than plain encode)"
    )
    print(f"reference / import      {result['ratio_reference_encode_over_import']:8.3f}")
    if torch_import_s is not None:
        print(f"torch import / import   {result['ratio_torch_import_over_import']:8.3f}   (aim >= 1.5)")
    print(
        f"agreement with reference: lowest cosine {agreement['min_cosine']:.7f} (aim >= 0.99999), "
        f"texts with identical top-10 neighbours {agreement['same_top10_share']:.4f} (aim 1)"
    )
    print(f"import / re-import      {result['ratio_import_over_reimport']:8.1f}   (aim >= 20)")
    print(
        f"load average before/after: {load_before[0]:.2f} / {load_after[0]:.2f} "
        f"on {os.cpu_count()} CPUs (ratios from one run; other work on the machine skews them)"
    )

    if profiler:
        buf = io.StringIO()
        pstats.Stats(profiler, stream=buf).sort_stats("cumulative").print_stats(30)
        result["profile_top"] = buf.getvalue()
        print(buf.getvalue())

    RESULTS.mkdir(exist_ok=True)
    out = RESULTS / f"bench_import-{datetime.now().strftime('%Y%m%d-%H%M%S')}.json"
    out.write_text(json.dumps(result, indent=2))
    print(f"results written to {out}")
    return 0


def reference_model() -> Any:
    """The reference: the bundled model as plain sentence-transformers (torch)."""
    from sentence_transformers import SentenceTransformer

    model = SentenceTransformer(str(bundled_model_path()), device="cpu", local_files_only=True)
    model.encode(["warm up the model before any clock starts"])
    return model


def compare_vectors(ours: np.ndarray, ref: np.ndarray) -> dict[str, float]:
    """Cosine per text, and top-10 neighbours by scikit-learn's exact search."""
    cos = np.sum(ours * ref, axis=1) / (np.linalg.norm(ours, axis=1) * np.linalg.norm(ref, axis=1))
    a, b = top_neighbours(ours, 10), top_neighbours(ref, 10)
    same = [set(x) == set(y) for x, y in zip(a, b, strict=True)]
    overlap = [len(set(x) & set(y)) / max(1, len(x)) for x, y in zip(a, b, strict=True)]
    return {
        "texts": len(ours),
        "min_cosine": float(cos.min()),
        "mean_cosine": float(cos.mean()),
        "same_top10_share": float(np.mean(same)),
        "mean_top10_overlap": float(np.mean(overlap)),
    }


def top_neighbours(vectors: np.ndarray, k: int) -> list[list[int]]:
    """Each row's k nearest other rows (scikit-learn, exact cosine). The row itself
    is dropped by index, not by position: texts that differ only in characters the
    tokenizer maps to [UNK] (emoji) have identical vectors and tie with it."""
    from sklearn.neighbors import NearestNeighbors

    n = min(k + 1, len(vectors))
    idx = (
        NearestNeighbors(n_neighbors=n, metric="cosine", algorithm="brute")
        .fit(vectors)
        .kneighbors(vectors, return_distance=False)
    )
    return [[int(j) for j in row if j != i][:k] for i, row in enumerate(idx)]


def _torch_threads() -> int | None:
    try:
        import torch

        return int(torch.get_num_threads())
    except ImportError:  # pragma: no cover
        return None


if __name__ == "__main__":
    sys.exit(main())
