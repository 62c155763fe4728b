"""The demo history's backtest with and without the learned-neighbours
candidate (not part of the test suite): the invented Loomhaven history
imported into a fresh data directory, a model trained as `sounding train`
does, then the time-ordered backtest of `sounding backtest` twice on the
same rows, once offering the candidate and once not.

    python bench/bench_learned_demo.py [--home DIR] [--json out.json]
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

os.environ.setdefault("HF_HUB_OFFLINE", "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from models.backtest import run_backtest
from models.embedding import Embedder
from models.stacking import ALL_FEATURES, STACK_PARAMS
from service.cli.history import _demo_accounts
from service.forecast import training as FC
from service.settings import Settings
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[1]
NOW = datetime(2026, 12, 1, 12, 0, tzinfo=UTC)  # the tests' "now": a day after the history


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--home", type=Path, default=None)
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args()
    home = args.home or Path(tempfile.mkdtemp(prefix="sounding-demo-"))
    ws = Workspace(settings=Settings(home=home), embedder=Embedder())
    if ws.store.posts_frame().empty:
        for handle, name, tz in _demo_accounts():
            ws.store.set_account(handle, display_name=name, timezone=tz)
        ws.import_csv(ROOT / "demo_data" / "posts.csv")
    t0 = time.perf_counter()
    trained = FC.train(ws, "impressions", now=NOW)
    train_s = time.perf_counter() - t0
    _, _, X, y, times = FC.backtest_inputs(ws, "impressions", now=NOW)
    result: dict[str, object] = {
        "seconds_train_with_backtest": round(train_s, 1),
        "served": trained.report["combination"],
        "learned_model": trained.report.get("learned_neighbours"),
    }
    for name, learned in (("with_learned", True), ("without_learned", False)):
        bt = run_backtest(X, y, times, feature_names=ALL_FEATURES, params=STACK_PARAMS, learned=learned)
        result[name] = {
            "model": bt["model"],
            "candidates": bt["candidates"],
            "weights": bt["weights"],
            "learned_neighbours": bt["learned_neighbours"],
            "serve_fallback": bt["serve_fallback"],
        }
        m = bt["model"]
        print(
            f"{name:16s} MAE(log) {m['mae_log']:.4f}  Spearman {m['spearman']:.4f}  "
            f"coverage {m['coverage']:.3f}"
        )
    print("learned alone:", result["with_learned"]["candidates"]["learned_neighbours"])  # type: ignore[index]
    print("verdict:", result["with_learned"]["learned_neighbours"])  # type: ignore[index]
    if args.json:
        args.json.write_text(json.dumps(result, indent=2, default=float))
    ws.close()


if __name__ == "__main__":
    main()
