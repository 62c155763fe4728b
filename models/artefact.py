"""A trained forecast model as a versioned artefact directory.

    <models_dir>/<metric>/<version>/
        config.json      metric, feature settings, training facts (written last)
        report.json      the training report with its backtest
        quantiles/       the forecaster: a StackedForecaster (older versions: a
                         QuantileForecaster), its own config.json + boosters
        text/            the ridge text model on embedding vectors (if any)

A version is written into a hidden temporary directory and renamed into
place in one step, so a reader either sees a whole model or none: the
service never serves a half-written one.
"""

from __future__ import annotations

import json
import os
import shutil
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import NotFound, NotReady, StoreError
from .features import FeatureParams
from .regressor import QuantileForecaster
from .stacking import StackedForecaster, draft_columns, load_forecaster
from .textmodel import RidgeText

CONFIG = "config.json"
REPORT = "report.json"
FORMAT = 1


@dataclass(slots=True)
class TrainedModel:
    metric: str
    version: str
    features: FeatureParams
    quantiles: QuantileForecaster | StackedForecaster
    report: dict[str, Any] = field(default_factory=dict)
    text: RidgeText | None = None

    def rows(self, X: np.ndarray, vectors: np.ndarray, accounts: list[int]) -> np.ndarray:
        """Draft rows as the forecaster reads them: the features of
        ``models.features.assemble`` plus, for a stacked forecaster, the text
        model's prediction and the account code (``stacking.draft_columns``)."""
        if X.shape[1] >= self.quantiles.n_features_in_:
            return X
        return np.hstack([X, draft_columns(self.text, vectors, accounts)])

    @property
    def backtested_coverage(self) -> dict[str, float]:
        return dict(self.report.get("backtest", {}).get("coverage_by_level", {}))

    def backtested_at(self, coverage: float) -> float | None:
        """Backtested coverage of the grid level that serves ``coverage``."""
        level = self.quantiles.levels_[self.quantiles.level_for(coverage)]
        return self.backtested_coverage.get(f"{level:g}")

    def save(self, root: Path) -> Path:
        """Write as ``root/<metric>/<version>``, atomically."""
        base = Path(root) / self.metric
        base.mkdir(parents=True, exist_ok=True)
        final = base / self.version
        if final.exists():
            raise StoreError(f"model version {self.version} already exists", where=str(final))
        tmp = base / f".tmp-{self.version}-{os.getpid()}"
        if tmp.exists():
            shutil.rmtree(tmp)
        self.quantiles.save(tmp / "quantiles")
        if self.text is not None:
            self.text.save(tmp / "text")
        (tmp / REPORT).write_text(json.dumps(self.report, indent=2, default=str))
        cfg = {"format": FORMAT, "metric": self.metric, "version": self.version,
               "features": asdict(self.features)}
        (tmp / CONFIG).write_text(json.dumps(cfg, indent=2))
        os.replace(tmp, final)
        return final

    @classmethod
    def load(cls, directory: Path) -> TrainedModel:
        d = Path(directory)
        try:
            cfg = json.loads((d / CONFIG).read_text())
            report = json.loads((d / REPORT).read_text())
        except FileNotFoundError:
            raise NotFound(f"no trained model in {d}") from None
        except json.JSONDecodeError as exc:
            raise StoreError(f"the model in {d} is unreadable: {exc}") from None
        if cfg.get("format") != FORMAT:
            raise StoreError(f"unsupported model format in {d}")
        return cls(
            metric=cfg["metric"], version=cfg["version"],
            features=FeatureParams(**cfg["features"]),
            quantiles=load_forecaster(d / "quantiles"), report=report,
            text=RidgeText.load(d / "text") if (d / "text").is_dir() else None,
        )


def versions(root: Path, metric: str) -> list[str]:
    """Complete versions of a metric's models, oldest first."""
    base = Path(root) / metric
    if not base.is_dir():
        return []
    return sorted(p.name for p in base.iterdir()
                  if not p.name.startswith(".") and (p / CONFIG).is_file())


def newest(root: Path, metric: str) -> str:
    found = versions(root, metric)
    if not found:
        raise NotReady(
            f"no model trained for {metric} yet",
            hint=f"run `sounding train --metric {metric}`",
        )
    return found[-1]
