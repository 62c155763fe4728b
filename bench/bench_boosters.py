"""What serving the trained boosters costs a fresh process, by way of serving.

Each way runs as a fresh process that loads the newest impressions model's
median booster and predicts one row with TreeSHAP contributions, against a
floor measured in the same run (``import numpy, onnxruntime, faiss``):

- ``lightgbm``: the Python package (it imports scikit-learn, scipy, pandas);
- ``native``: LightGBM's own C library through ctypes (models.booster_loading).

ONNX Runtime (through onnxmltools) and compiled trees (treelite, lleaves)
predict but give no TreeSHAP contributions, which every forecast shows, so
each would still need one of the two above; they are not timed here.

    python bench/bench_boosters.py --home .sounding-demo [--repeat 5]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

WAYS = {
    "floor": "import numpy, onnxruntime, faiss",
    "lightgbm": (
        "import sys, numpy as np, onnxruntime, faiss, lightgbm as lgb\n"
        "b = lgb.Booster(model_file=sys.argv[1])\n"
        "b.predict(np.zeros((1, b.num_feature())), pred_contrib=True, num_threads=1)\n"
    ),
    "native": (
        "import sys, numpy as np, onnxruntime, faiss\n"
        "from models.booster_loading import NativeBooster\n"
        "b = NativeBooster(sys.argv[1])\n"
        "b.predict(np.zeros((1, b.num_feature())), pred_contrib=True, num_threads=1)\n"
    ),
}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--home", type=Path, required=True)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    median = sorted(args.home.resolve().glob("forecasters/impressions/*/quantiles/boosted/median.txt"))[-1]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    times: dict[str, list[float]] = {k: [] for k in WAYS}
    loads: dict[str, list[float]] = {k: [] for k in WAYS}
    for _ in range(args.repeat + 1):
        for name, code in WAYS.items():  # interleaved, so load changes hit all alike
            load = os.getloadavg()[0]
            t = time.perf_counter()
            subprocess.run([sys.executable, "-c", code, str(median)], env=env, cwd=ROOT, check=True)
            times[name].append(time.perf_counter() - t)
            loads[name].append(load)
    med = {k: statistics.median(v[1:]) for k, v in times.items()}  # the first pass warms the file cache
    result = {
        "bench": "boosters",
        "seconds_median": {k: round(v, 4) for k, v in med.items()},
        "load_average_1min": {k: [round(x, 2) for x in v[1:]] for k, v in loads.items()},
        "ratio_to_floor": {k: round(v / med["floor"], 3) for k, v in med.items()},
    }
    for k, v in med.items():
        load = statistics.median(loads[k])
        print(f"{k:9s} {v * 1000:8.0f} ms  {v / med['floor']:5.2f}x floor  (load {load:.1f})")
    out = ROOT / "bench" / "results" / f"boosters-{time.strftime('%Y%m%dT%H%M%SZ', time.gmtime())}.json"
    out.write_text(json.dumps(result, indent=2) + "\n")
    print(f"wrote {out.relative_to(ROOT)}")


if __name__ == "__main__":
    main()
