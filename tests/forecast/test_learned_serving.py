"""The learned neighbours in the served model: kept only when the trained
model's own time-ordered backtest found the forecast with them better, and
said so by the health answer and the backtest table."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import NOW

from models.learned_rule import improves
from models.stacking import StackedForecaster
from service.cli.forecast import print_backtest
from service.forecast.draft import Draft
from service.health import health
from service.workspace import Workspace


def test_the_served_model_keeps_learned_neighbours_only_when_its_backtest_improved(
    demo_workspace: Workspace, capsys: pytest.CaptureFixture[str]
) -> None:
    model = demo_workspace.forecaster.model("impressions")
    assert isinstance(model.forecaster, StackedForecaster)
    bt = model.report["backtest"]
    verdict = bt["learned_neighbours"]
    # The verdict is the rule applied to the pooled scores it reports, and
    # "with" is the served forecast the backtest scored.
    assert verdict["in_use"] == improves(verdict["with"], verdict["without"])
    assert verdict["with"]["mae_log"] == pytest.approx(bt["model"]["mae_log"])
    used = model.forecaster.learned_in_use_
    assert not used or verdict["in_use"]
    assert (model.forecaster.weights_["learned_neighbours"] > 0) == used
    assert (model.learned is not None) == used
    assert model.report["combination"]["learned_neighbours_in_use"] is used
    assert health(demo_workspace).learned_neighbours is used
    # A draft's row carries the column the model was trained with.
    out = demo_workspace.forecaster.forecast(
        [Draft(text="The fern house opens early this weekend", account="loomhaven")], now=NOW
    )
    assert np.isfinite(out[0].log[1])
    print_backtest(bt, "impressions")
    said = capsys.readouterr().out
    assert ("learned neighbours: in use" in said) == verdict["in_use"]
    assert ("learned neighbours: not in use" in said) == (not verdict["in_use"])
