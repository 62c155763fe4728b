"""Saved boosters served through LightGBM's C library give LightGBM's
forecasts and TreeSHAP contributions (checked on the demo model)."""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import lightgbm as lgb
import numpy as np
import pytest

from models.artefact import load_forecaster
from models.booster_loading import NativeBooster
from models.errors import StoreError
from models.stacking import StackedForecaster


def _model_dir(demo_home: Path) -> Path:
    found = sorted(demo_home.glob("forecasters/impressions/*/quantiles"))
    assert found, "the demo data directory holds no trained model"
    return found[-1]


def _rows(n_features: int, n: int = 64) -> np.ndarray:
    """Feature rows spread over each column's range, with missing values."""
    rng = np.random.default_rng(7)
    X = rng.normal(0.0, 3.0, size=(n, n_features))
    X[rng.random(X.shape) < 0.1] = np.nan  # missing features take each split's default side
    X[rng.random(X.shape) < 0.05] = 0.0
    return X


def _walk(tree: dict[str, Any], x: np.ndarray) -> float:
    """One row down one dumped tree, by LightGBM's documented rule for
    numerical splits (LightGBM docs, "Missing Value Handle"; its tree.h
    NumericalDecision): NaN counts as 0 unless the split's missing type is
    NaN; a missing value (NaN, or 0 for type Zero) goes the default side;
    otherwise value <= threshold goes left. Written from the dump, without
    LightGBM's predictor."""
    node = tree["tree_structure"]
    while "leaf_value" not in node:
        assert node["decision_type"] == "<=", "the demo model has numerical splits only"
        v = float(x[node["split_feature"]])
        kind = node["missing_type"]
        if math.isnan(v) and kind != "NaN":
            v = 0.0
        if (kind == "NaN" and math.isnan(v)) or (kind == "Zero" and abs(v) <= 1e-35):
            left = bool(node["default_left"])
        else:
            left = v <= float(node["threshold"])
        node = node["left_child"] if left else node["right_child"]
    return float(node["leaf_value"])


@pytest.fixture(scope="module")
def boosters(demo_home: Path) -> list[Path]:
    files = sorted((_model_dir(demo_home) / "boosted").glob("*.txt"))
    assert len(files) >= 3  # median, and a lower and an upper per level
    return files


def test_each_booster_predicts_as_lightgbm(boosters: list[Path]) -> None:
    for path in boosters:
        native, reference = NativeBooster(path), lgb.Booster(model_file=str(path))
        X = _rows(native.num_feature())
        assert native.num_feature() == reference.num_feature()
        np.testing.assert_allclose(native.predict(X), reference.predict(X), rtol=0, atol=1e-6)
        np.testing.assert_allclose(
            native.predict(X, pred_contrib=True), reference.predict(X, pred_contrib=True), rtol=0, atol=1e-6
        )


def test_predictions_equal_a_walk_of_the_dumped_trees(boosters: list[Path]) -> None:
    # An independent computation: the dumped trees walked in Python.
    median = next(p for p in boosters if p.name == "median.txt")
    native = NativeBooster(median)
    X = _rows(native.num_feature(), n=16)
    dump = lgb.Booster(model_file=str(median)).dump_model()
    walked = np.array([sum(_walk(t, x) for t in dump["tree_info"]) for x in X])
    np.testing.assert_allclose(native.predict(X), walked, rtol=0, atol=1e-9)


def test_contributions_add_up_to_the_prediction(boosters: list[Path]) -> None:
    # TreeSHAP's local accuracy (Lundberg & Lee 2017, property 1): the
    # contributions and the expected value sum to the model's output.
    for path in boosters:
        native = NativeBooster(path)
        X = _rows(native.num_feature())
        phi = native.predict(X, pred_contrib=True)
        np.testing.assert_allclose(phi.sum(axis=1), native.predict(X), rtol=0, atol=1e-9)


def test_the_demo_forecaster_answers_as_with_lightgbm_boosters(demo_home: Path) -> None:
    served = load_forecaster(_model_dir(demo_home))
    assert isinstance(served, StackedForecaster)
    reference = load_forecaster(_model_dir(demo_home))
    assert isinstance(reference, StackedForecaster)
    q = reference.boosted_
    root = _model_dir(demo_home) / "boosted"
    cfg = json.loads((root / "config.json").read_text())
    q.median_model_ = lgb.Booster(model_file=str(root / cfg["median_model"]))
    q.lower_models_ = tuple(lgb.Booster(model_file=str(root / e["lower_model"])) for e in cfg["levels"])
    q.upper_models_ = tuple(lgb.Booster(model_file=str(root / e["upper_model"])) for e in cfg["levels"])
    assert isinstance(served.boosted_.median_model_, NativeBooster)
    X = _rows(served.n_features_in_, n=24)
    X[:, served._index["account_code"]] = 0.0
    for coverage in (0.5, 0.8, 0.95):
        got, want = served.predict(X, coverage=coverage), reference.predict(X, coverage=coverage)
        for a, b in zip(got, want, strict=True):
            np.testing.assert_allclose(a, b, rtol=0, atol=1e-6)
    np.testing.assert_allclose(served.contributions(X), reference.contributions(X), rtol=0, atol=1e-6)


def test_a_damaged_booster_file_is_a_clear_error(tmp_path: Path) -> None:
    bad = tmp_path / "median.txt"
    bad.write_text("not a model\n")
    with pytest.raises(StoreError, match="LightGBM"):
        NativeBooster(bad).predict(np.zeros((1, 3)))
    with pytest.raises(StoreError, match="missing booster file"):
        NativeBooster(tmp_path / "absent.txt")
