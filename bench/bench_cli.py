"""Whole command-line processes, timed against a floor measured in the same run.

The floor is what any forecasting process must at least do: start Python,
``import numpy, onnxruntime, faiss`` and read the data directory's model and
index files. Each command runs as a fresh process (``python -m service.cli``,
what the ``sounding`` script runs), several times, interleaved with the floor
so that a change in the machine's load hits both alike; medians are compared.
The load average is recorded beside every figure (the machine may be shared).

Commands: ``--help``, ``check``, ``hours --week`` and ``compare`` with 4
wordings, on a data directory holding an imported history and a trained
impressions model (``sounding demo`` makes one from the 3,000-post demo).

Aims (ratios): ``--help`` <= 1.0x the floor; a cold ``check`` <= 3x the floor
at 3,000 posts (<= 4x at 100,000); ``hours --week`` <= 1.5x a cold ``check``.

    python bench/bench_cli.py --home .sounding-demo [--repeat 5] [--label demo-3000]
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
DRAFT = (
    "The magnolias along the Long Border are opening this week. Come for a slow walk before the petals drop."
)
WORDINGS = [
    DRAFT,
    "Magnolias are opening along the Long Border: a slow walk this week, before the petals drop.",
    "This week only: the Long Border magnolias in flower. #WhatsFlowering",
    "Petals will not wait. See the magnolias on the Long Border this week.",
]

FLOOR = (
    "import sys, pathlib, numpy, onnxruntime, faiss\n"
    "for d in sys.argv[1:]:\n"
    "    for p in pathlib.Path(d).rglob('*'):\n"
    "        if p.is_file():\n"
    "            p.read_bytes()\n"
)


def _account(home: Path) -> str:
    import sqlite3

    con = sqlite3.connect(home / "sounding.db")
    try:
        row = con.execute(
            "SELECT a.handle FROM accounts a JOIN posts p ON p.account_id = a.id "
            "GROUP BY a.id ORDER BY count(*) DESC LIMIT 1"
        ).fetchone()
    finally:
        con.close()
    return str(row[0])


def _posts(home: Path) -> int:
    import sqlite3

    con = sqlite3.connect(home / "sounding.db")
    try:
        return int(con.execute("SELECT count(*) FROM posts").fetchone()[0])
    finally:
        con.close()


def _run(cmd: list[str], env: dict[str, str], extra: dict[str, str] | None = None) -> tuple[float, float]:
    """Wall seconds of one process, and the 1-minute load average before it."""
    load = os.getloadavg()[0]
    t = time.perf_counter()
    r = subprocess.run(cmd, env={**env, **(extra or {})}, cwd=ROOT, capture_output=True, text=True)
    took = time.perf_counter() - t
    if r.returncode != 0:
        raise SystemExit(f"{' '.join(cmd[:6])} failed:\n{r.stderr[-2000:]}")
    return took, load


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument(
        "--home", type=Path, required=True, help="Data directory with a trained impressions model."
    )
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--label", default=None, help="Name of this run in the results file (default: the size).")
    args = ap.parse_args()
    home = args.home.resolve()
    env = {**os.environ, "PYTHONPATH": str(ROOT), "HF_HUB_OFFLINE": "1", "SOUNDING_HOME": str(home)}
    # An installed wheel's modules are compiled to bytecode when pip installs
    # it; a checkout run under PYTHONDONTWRITEBYTECODE would compile ours
    # afresh in every process (0.27 s of a cold check here). The untimed pass
    # below writes them, as any first run does.
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    account = _account(home)
    py = [sys.executable]
    cli = [*py, "-m", "service.cli"]
    files = [str(home / d) for d in ("embedding", "index", "forecasters") if (home / d).exists()]
    runs: dict[str, list[str]] = {
        "floor": [*py, "-c", FLOOR, *files],
        "help": [*cli, "--help"],
        "check": [*cli, "check", DRAFT, "--account", account],
        "hours_week": [*cli, "hours", DRAFT, "--account", account, "--week"],
        "compare_4": [*cli, "compare", *WORDINGS, "--account", account],
        # The same check with the embedding model loaded at its first use
        # rather than in a thread while the command starts (service/cli/warmup.py).
        "check_no_preload": [*cli, "check", DRAFT, "--account", account],
    }
    extra = {"check_no_preload": {"SOUNDING_EMBED_PRELOAD": "0"}}
    # One untimed pass: the OS file cache then holds every file for all alike.
    for name, cmd in runs.items():
        _run(cmd, env, extra.get(name))
    times: dict[str, list[float]] = {k: [] for k in runs}
    loads: dict[str, list[float]] = {k: [] for k in runs}
    for _ in range(args.repeat):
        for name, cmd in runs.items():  # interleaved: load changes hit every command alike
            took, load = _run(cmd, env, extra.get(name))
            times[name].append(took)
            loads[name].append(load)
    med = {k: statistics.median(v) for k, v in times.items()}
    floor, check = med["floor"], med["check"]
    n = _posts(home)
    check_aim = 3.0 if n <= 10_000 else 4.0
    ratios = {
        "help_vs_floor": med["help"] / floor,
        "check_vs_floor": check / floor,
        "hours_week_vs_check": med["hours_week"] / check,
        "compare_4_vs_check": med["compare_4"] / check,
        "check_no_preload_vs_floor": med["check_no_preload"] / floor,
    }
    aims = {
        "help_vs_floor": 1.0,
        "check_vs_floor": check_aim,
        "hours_week_vs_check": 1.5,
    }
    result = {
        "bench": "cli",
        "label": args.label or f"{n}-posts",
        "posts": n,
        "repeat": args.repeat,
        "cpus": os.cpu_count(),
        "seconds_median": {k: round(v, 4) for k, v in med.items()},
        "seconds_all": {k: [round(x, 4) for x in v] for k, v in times.items()},
        "load_average_1min": {k: [round(x, 2) for x in v] for k, v in loads.items()},
        "ratios": {k: round(v, 3) for k, v in ratios.items()},
        "aims": aims,
        "met": {k: bool(ratios[k] <= a) for k, a in aims.items()},
    }
    for k, v in med.items():
        load = statistics.median(loads[k])
        print(f"{k:12s} {v * 1000:8.0f} ms  (load {load:.1f})")
    for k, v in ratios.items():
        aim = aims.get(k)
        verdict = "" if aim is None else f"  aim <= {aim}: {'met' if v <= aim else 'not met'}"
        print(f"{k:22s} {v:6.2f}x{verdict}")
    out = ROOT / "bench" / "results" / f"cli-{time.strftime('%Y%m%dT%H%M%SZ', time.gmtime())}.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(result, indent=2) + "\n")
    print(f"wrote {out.relative_to(ROOT)}")


if __name__ == "__main__":
    main()
