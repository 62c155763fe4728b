"""The "posts sharing this post's key terms" columns in the time-ordered
backtest (not part of the tests).

For every training row, ``models.shared_terms`` counts the earlier posts
settled before it that share one of its key terms (its hashtags, or its
three rarest words found in two posts or more) and takes the median of
their log metric. The backtest ``sounding train`` runs (4 rolling-origin
folds, the served blend refitted in each) is run on the same rows without
the columns, with the hashtag columns and with the rarest-words columns.

    python bench/bench_shared_terms.py --source demo|realtext [--rows 3000] [--seed 0] [--json out.json]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

os.environ.setdefault("HF_HUB_OFFLINE", "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from models import shared_terms as S
from models.backtest import run_backtest
from models.embedding import Embedder
from models.stacking import ALL_FEATURES, STACK_PARAMS
from service.forecast import training as FC
from service.history.view import feature_params
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.storage import keywords
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[1]
#: The "now" of each source: the demo's fixed test time, and after the package list.
NOW = {"demo": datetime(2026, 12, 1, 12, tzinfo=UTC), "realtext": datetime(2027, 1, 1, tzinfo=UTC)}


def load(home: Path, source: str, rows: int, seed: int) -> Workspace:
    ws = Workspace(settings=Settings(home=home), embedder=Embedder())
    if not ws.store.posts_frame().empty:
        return ws
    if source == "demo":
        from service.cli.history import _demo_accounts

        for handle, name, tz in _demo_accounts():
            ws.store.set_account(handle, display_name=name, timezone=tz)
        ws.import_csv(ROOT / "demo_data" / "posts.csv")
    else:
        sys.path.insert(0, str(ROOT / "bench"))
        from bench_realtext import ACCOUNT, canonical_csv

        path = home / "realtext.csv"
        canonical_csv(path, rows=rows, seed=seed)
        ws.store.set_account(ACCOUNT, display_name="Package summaries", timezone="UTC")
        ws.import_csv(path, ImportOptions(new_accounts="UTC"))
    return ws


def summary(report: dict[str, object]) -> dict[str, object]:
    m = report["model"]
    assert isinstance(m, dict)
    return {
        "mae_log": m["mae_log"],
        "spearman": m["spearman"],
        "coverage_80": m["coverage"],
        "mean_width_log": m["mean_width_log"],
        "n_test": report["n_test"],
        "serve_fallback": report["serve_fallback"],
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--source", choices=("demo", "realtext"), default="demo")
    ap.add_argument("--rows", type=int, default=3000)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--home", type=Path, default=None)
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args()
    home = args.home or Path(tempfile.mkdtemp(prefix=f"sounding-shared-{args.source}-"))
    ws = load(home, args.source, args.rows, args.seed)
    now = NOW[args.source]
    params = feature_params(ws.settings)
    view, keep, X, y, times = FC.backtest_inputs(ws, "impressions", now=now)
    assert view.frame is not None
    tokens = [keywords.words(t) for t in view.frame["text"]]
    out: dict[str, object] = {"source": args.source, "rows": len(view.history), "training_rows": len(y)}
    runs: dict[str, object] = {}
    for kind in ("none", "hashtags", "rare_terms"):
        t0 = time.perf_counter()
        if kind == "none":
            Xk, names = X, ALL_FEATURES
        else:
            keys = S.key_terms(tokens, hashtags_only=kind == "hashtags")
            cols = S.TermIndex(view.history, keys).columns(keys, params, keep)
            Xk, names = np.hstack([X, cols]), ALL_FEATURES + S.NAMES
            runs[f"{kind}_rows_with_shared"] = int((cols[:, 0] > 0).sum())
        rep = run_backtest(Xk, y, times, feature_names=names, params=STACK_PARAMS, timing_only=False)
        runs[kind] = {**summary(rep), "seconds": round(time.perf_counter() - t0, 1)}
        print(kind, runs[kind], flush=True)
    out["runs"] = runs
    ws.close()
    if args.json:
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps(out, indent=2) + "\n", encoding="utf-8")
    print(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
