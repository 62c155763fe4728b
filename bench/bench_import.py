#!/usr/bin/env python3
"""Import benchmark: how close is a full import to bare embedding, and how cheap is a re-import?

Measured in one run, with one Embedder whose model is loaded (and warmed up)
before any clock starts:

  (a) bare embedding of the demo CSV's texts, in the same batches the importer
      makes (``import_batch_rows`` rows a batch, only texts not embedded before);
  (b) a full import of the demo CSV into an empty temporary data directory
      (validation, embedding, writes, index update);
  (c) a re-import of the unchanged file into the same directory.

Printed and saved (bench/results/, gitignored) as ratios from this one run:

  embedding_time / import_time     aim >= 0.8: the import adds little to embedding
  first_import_time / reimport     aim >= 20:  a re-import embeds nothing

The import is also broken down by stage (time inside Embedder.encode,
Store.write_batch, the vector-cache lookup and the index update) so that a
low ratio says where the time goes. No assertions: timings depend on the
machine and on what else runs on it (the load average is recorded).

Usage:  /path/to/venv/bin/python bench/bench_import.py [--csv FILE] [--limit N] [--profile]
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
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from models.embedding import Embedder  # noqa: E402
from service.cli.history import _demo_accounts  # noqa: E402
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
    args = ap.parse_args()

    settings = Settings()
    batch_rows = settings.import_batch_rows
    embedder = Embedder(batch_size=settings.embed_batch_size)
    t = time.perf_counter()
    embedder.encode(["warm up the model before any clock starts"])
    load_s = time.perf_counter() - t

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

    # (a) bare embedding, same batches and batch size as the importer.
    t = time.perf_counter()
    for b in batches:
        if b:
            embedder.encode(b)
    embed_s = time.perf_counter() - t

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
    first = ws.import_csv(csv_path)
    if profiler:
        profiler.disable()
    import_s = time.perf_counter() - t
    first_stages = dict(stages.total)
    embedded_first = embedder.calls - calls0
    stages.reset()

    # (c) re-import of the unchanged file.
    calls1 = embedder.calls
    t = time.perf_counter()
    again = ws.import_csv(csv_path)
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
        "when": datetime.now(timezone.utc).isoformat(timespec="seconds"),
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
        "import_breakdown_s": breakdown(import_s, first_stages),
        "reimport_breakdown_s": breakdown(reimport_s, re_stages),
        "import_summary": {k: v for k, v in first.to_dict().items() if k != "problems"},
        "reimport_summary": {k: v for k, v in again.to_dict().items() if k != "problems"},
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

    print(f"rows {len(rows)}, texts embedded {n_texts} (batches of {batch_rows} rows, "
          f"embedder batch size {embedder.batch_size})")
    print(f"(a) bare embedding      {embed_s:8.2f} s")
    print(f"(b) first import        {import_s:8.2f} s   embedded {embedded_first} texts")
    for k, v in result["import_breakdown_s"].items():
        print(f"      {k:<38} {v:8.2f} s  {100 * v / import_s:5.1f} %")
    print(f"(c) re-import unchanged {reimport_s:8.2f} s   embedded {embedded_again} texts")
    for k, v in result["reimport_breakdown_s"].items():
        print(f"      {k:<38} {v:8.2f} s  {100 * v / reimport_s:5.1f} %")
    print(f"embedding / import      {result['ratio_embedding_over_import']:8.3f}   (aim >= 0.8)")
    print(f"import / re-import      {result['ratio_import_over_reimport']:8.1f}   (aim >= 20)")
    print(f"load average before/after: {load_before[0]:.2f} / {load_after[0]:.2f} "
          f"on {os.cpu_count()} CPUs (ratios from one run; other work on the machine skews them)")

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


def _torch_threads() -> int | None:
    try:
        import torch

        return int(torch.get_num_threads())
    except ImportError:  # pragma: no cover
        return None


if __name__ == "__main__":
    sys.exit(main())
