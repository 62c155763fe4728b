"""A plain install runs: every runtime import is a declared dependency, and the
statistics the product needs come from its own dependencies."""

from __future__ import annotations

import ast
import math
import re
import sys
import tomllib
from importlib.metadata import packages_distributions
from pathlib import Path

import pytest

from models.proportions import wilson_interval

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text())

# Imported only inside a function that says which extra to install.
OPTIONAL = {"ray": "cluster"}


def _name(requirement: str) -> str:
    return re.split(r"[\s\[<>=!~;]", requirement, maxsplit=1)[0].lower().replace("_", "-")


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(a.name.split(".")[0] for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            found.add(node.module.split(".")[0])
    return found


def test_every_runtime_import_is_a_declared_dependency() -> None:
    declared = {_name(r) for r in PYPROJECT["project"]["dependencies"]}
    extras = {k: {_name(r) for r in v} for k, v in PYPROJECT["project"]["optional-dependencies"].items()}
    dists = packages_distributions()
    missing: dict[str, str] = {}
    for path in [*ROOT.glob("service/**/*.py"), *ROOT.glob("models/**/*.py")]:
        for top in _imports(path):
            if top in sys.stdlib_module_names or top in {"service", "models", "__future__"}:
                continue
            names = {d.lower().replace("_", "-") for d in dists.get(top, [top])}
            if top in OPTIONAL:
                assert names & extras[OPTIONAL[top]], (top, path)
                continue
            if not names & declared:
                missing[top] = str(path.relative_to(ROOT))
    assert missing == {}


def test_license_is_an_spdx_string() -> None:
    # PEP 639: project.license is an SPDX expression; the table form is deprecated
    # (setuptools >= 77 reads the string).
    assert PYPROJECT["project"]["license"] == "MIT"
    (req,) = [r for r in PYPROJECT["build-system"]["requires"] if _name(r) == "setuptools"]
    assert tuple(int(x) for x in req.split(">=")[1].split(".")) >= (77,)


def _wilson_by_hand(k: int, n: int, z: float) -> tuple[float, float]:
    # Wilson (1927), "Probable inference, the law of succession, and statistical
    # inference", JASA 22: centre (p + z²/2n) / (1 + z²/n), half-width
    # z / (1 + z²/n) * sqrt(p(1-p)/n + z²/4n²).
    p = k / n
    denom = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z / denom * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return centre - half, centre + half


@pytest.mark.parametrize(("k", "n"), [(0, 1), (1, 1), (7, 9), (42, 50), (0, 30), (30, 30), (800, 1000)])
def test_wilson_interval_matches_the_formula(k: int, n: int) -> None:
    z = 1.959963984540054  # 97.5% normal quantile, from memory (checked: scipy.stats.norm.ppf)
    lo, hi = wilson_interval(k, n)
    ref = _wilson_by_hand(k, n, z)
    assert lo == pytest.approx(max(ref[0], 0.0), abs=1e-12)
    assert hi == pytest.approx(min(ref[1], 1.0), abs=1e-12)


def test_track_record_needs_no_test_only_package() -> None:
    # statsmodels is installed only by the test extra; the track record must not need it.
    assert "statsmodels" not in _imports(ROOT / "service" / "track" / "facts.py")


@pytest.mark.slow
def test_the_wheel_holds_what_a_plain_install_runs(tmp_path: Path) -> None:
    # What `sounding demo` and the page read must ship in the wheel, and its
    # metadata carries the SPDX licence (PEP 639 Core Metadata 2.4).
    import subprocess
    import zipfile

    subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--quiet",
            "--no-deps",
            "--wheel-dir",
            str(tmp_path),
            str(ROOT),
        ],
        check=True,
        capture_output=True,
    )
    (wheel,) = tmp_path.glob("sounding-*.whl")
    with zipfile.ZipFile(wheel) as z:
        names = set(z.namelist())
        (meta,) = [n for n in names if n.endswith(".dist-info/METADATA")]
        metadata = z.read(meta).decode()
    for needed in ("demo_data/posts.csv", "demo_data/sample_draft.txt", "demo_data/effects.json"):
        assert needed in names
    assert "service/static/index.html" in names
    assert "License-Expression: MIT" in metadata
