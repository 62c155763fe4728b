"""How reading a header scales with its width: 10,000 against 100,000 columns.

A dry run (``Workspace.preview_import``: read, resolve the header, validate,
nothing embedded or written) of a two-row file with N extra columns, timed at
N = 10,000 and N = 100,000 in one run. Linear work gives a ratio near 10; the
old duplicate-header check (``list.count`` per column) was quadratic, near 100.

    python bench/bench_wide_header.py
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

from service.settings import Settings
from service.workspace import Workspace


def wide_file(path: Path, width: int) -> Path:
    head = ["post_id", "account", "text", "posted_at", "impressions", *[f"c{i}" for i in range(width)]]
    row = ["w1", "garden", "Wide", "2026-05-01T10:00:00Z", "5", *["0"] * width]
    path.write_text(
        ",".join(head) + "\n" + ",".join(row) + "\n" + ",".join(row).replace("w1", "w2", 1) + "\n"
    )
    return path


def timed(ws: Workspace, path: Path, repeats: int = 3) -> float:
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        ws.preview_import(path)
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        ws = Workspace(settings=Settings(home=Path(tmp) / "home"))
        try:
            small = timed(ws, wide_file(Path(tmp) / "w10k.csv", 10_000))
            large = timed(ws, wide_file(Path(tmp) / "w100k.csv", 100_000))
        finally:
            ws.close()
    print(
        f"10,000 columns: {small:.3f} s; 100,000 columns: {large:.3f} s; "
        f"ratio {large / small:.1f} (linear ~10, quadratic ~100)"
    )


if __name__ == "__main__":
    main()
