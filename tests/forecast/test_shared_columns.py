"""The shared-terms columns in training and forecasts
(service.forecast.shared_columns): the automatic rule's decision is in the
backtest report with both sets of figures, and a model that keeps the
columns gives drafts the count and median an independent count finds."""

from __future__ import annotations

import math
import statistics
from collections import Counter
from datetime import UTC, datetime, timedelta

import numpy as np
from conftest import NOW, history_csv

from models import shared_terms as S
from service.forecast.draft import Draft
from service.forecast.training import train
from service.ingest.options import ImportOptions
from service.storage import keywords


def test_the_automatic_rule_is_reported_and_followed(demo_workspace) -> None:  # type: ignore[no-untyped-def]
    report = demo_workspace.forecaster.model("impressions").report
    decision = report["backtest"]["shared_terms"]
    assert decision["tried"] and decision["setting"] == "auto"
    # The demo's hashtags: a quarter of its posts or more have an earlier one sharing a tag.
    assert decision["kind"] == "hashtags" and decision["rows_sharing_a_hashtag"] >= 0.1
    without, with_ = decision["without"], decision["with"]
    better = with_["mae_log"] < without["mae_log"] and with_["spearman"] >= without["spearman"]
    assert decision["kept"] is better
    assert report["shared_terms"] == (decision["kind"] if better else None)
    names = demo_workspace.forecaster.model("impressions").forecaster.feature_names_
    assert (names[-2:] == S.NAMES) is better


def test_a_kept_column_gives_drafts_an_independent_count(make_workspace, tmp_path) -> None:  # type: ignore[no-untyped-def]
    ws = make_workspace(shared_terms="rare_terms")  # kept whatever the backtest says
    path = tmp_path / "history.csv"
    path.write_bytes(history_csv(240, start=datetime(2026, 9, 1, 9, tzinfo=UTC)))
    ws.import_csv(path, ImportOptions(new_accounts="UTC"))
    model = train(ws, "impressions", now=NOW)
    assert model.report["shared_terms"] == "rare_terms"
    assert model.forecaster.feature_names_[-2:] == S.NAMES
    text = "The fern house need volunteers this week"
    planned = NOW - timedelta(days=20)
    f = ws.forecaster.forecast([Draft(text=text, account="loomhaven", planned_at=planned)], now=NOW)[0]
    assert f.low <= f.median <= f.high

    # Independently: the draft's rarest words found in another post, and the
    # posts settled 48 h before the planned time that share one.
    frame = ws.store.posts_frame()
    docs = [set(keywords.words(t)) for t in frame["text"]]
    df = Counter(w for d in docs for w in d)
    mine = sorted((df[w] + 1, w) for w in set(keywords.words(text)) if df[w] >= 1)[: S.RARE_TERMS]
    keys = {w for _, w in mine}
    cut = planned - timedelta(hours=48)
    logs = [
        math.log1p(v)
        for d, at, v in zip(docs, frame["posted_at"], frame["impressions"], strict=True)
        if d & keys and at.to_pydatetime() <= cut
    ]
    view = ws.forecaster.view("impressions")
    got = ws.forecaster.shared_terms(view, "rare_terms").drafts([text], [planned.timestamp()], model.features)
    assert got[0, 0] == len(logs) > 0
    assert got[0, 1] == statistics.median(logs)
    assert np.isfinite(got).all()
