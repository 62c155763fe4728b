"""What the learned neighbours cost at scale (not part of the test suite):
the projection fitted on its block and the time-ordered neighbour column
for every post, on invented unit vectors (384 values) with a residual
driven by one direction, beside embedding texts with the bundled model
(timed on a sample and scaled to the same number of posts: ratios within
one run).

    python bench/bench_learned_scale.py [--sizes 10000 100000] [--json out.json]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

os.environ.setdefault("HF_HUB_OFFLINE", "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from models.embedding import Embedder
from models.learned_neighbours import LearnedNeighbours

SAMPLE = 512  # texts embedded to price embedding per post


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    texts = [f"The fern house opens {i % 7} days early for volunteer {i}" for i in range(SAMPLE)]
    emb = Embedder()
    emb.encode(texts[:8])  # load the model outside the timing
    t0 = time.perf_counter()
    emb.encode(texts)
    per_text = (time.perf_counter() - t0) / SAMPLE
    out: dict[str, object] = {"seconds_per_embedded_text": round(per_text, 5), "sizes": {}}
    for n in args.sizes:
        V = rng.normal(size=(n, 384)).astype(np.float32)
        V /= np.linalg.norm(V, axis=1, keepdims=True)
        y = 2.0 + np.tanh(20 * V[:, 0]) + rng.normal(scale=0.5, size=n)
        times = np.arange(n) * 3600.0
        t0 = time.perf_counter()
        m = LearnedNeighbours().fit(V, y, np.full(n, 2.0), times)
        whole = time.perf_counter() - t0
        t0 = time.perf_counter()
        m.predict(V[:100], np.full(100, 2.0))
        drafts = (time.perf_counter() - t0) / 100
        embed = per_text * n
        row = {
            "seconds_projection_and_column": round(whole, 1),
            "seconds_embedding_extrapolated": round(embed, 1),
            "column_over_embedding": round(whole / embed, 4),
            "milliseconds_per_draft": round(drafts * 1000, 2),
            "fitted_rows": m.n_fit_,
        }
        out["sizes"][str(n)] = row  # type: ignore[index]
        print(n, row)
    if args.json:
        args.json.write_text(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
