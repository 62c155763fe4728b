"""What a forecast asks of the store (nothing on the request path
that can be known in advance).

A warm forecast reads the store's change counters once and writes its own
track-record row, nothing else: precedents' details come from the cached
history view. Recording a forecast moves no counter, so the view and the
index stay cached; the track record's scoring moves only its own counter.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
from conftest import NOW
from fastapi.testclient import TestClient
from sqlalchemy import event

from models import features as F
from service.api.app import create_app
from service.checking import check_drafts
from service.forecast.draft import Draft
from service.ingest.options import ImportOptions
from service.storage.store import Store
from service.track import adaptation
from service.workspace import Workspace

BODY = {"text": "Guided walk through the winter glasshouse", "account": "loomhaven"}


@contextmanager
def statements(store: Store) -> Iterator[list[str]]:
    """Every SQL statement the store's engine runs meanwhile (first words)."""
    seen: list[str] = []

    def note(_conn: object, _cur: object, stmt: str, *_rest: object) -> None:
        seen.append(" ".join(stmt.split()[:6]))

    event.listen(store.engine, "before_cursor_execute", note)
    try:
        yield seen
    finally:
        event.remove(store.engine, "before_cursor_execute", note)


@pytest.mark.parametrize("record", [True, False])
def test_a_warm_forecast_reads_the_counters_once_and_writes_only_its_record(
    demo_copy: Workspace, record: bool
) -> None:
    ws = demo_copy
    with TestClient(create_app(workspace=ws)) as client:
        assert client.post("/v1/forecasts", json=BODY).status_code == 200  # warms the caches
        with statements(ws.store) as seen:
            r = client.post("/v1/forecasts", json={**BODY, "record": record})
    assert r.status_code == 200, r.text
    assert r.json()["precedents"], "precedents are still shown, from the view"
    reads = [s for s in seen if s.upper().startswith("SELECT")]
    writes = [s for s in seen if not s.upper().startswith("SELECT")]
    assert len(reads) == 1 and "store_stamp" in reads[0], seen
    if record:
        assert len(writes) == 1 and "INSERT INTO forecasts_given" in writes[0], seen
    else:
        assert writes == [], seen


def test_recording_moves_no_counter_and_scoring_moves_only_its_own(
    demo_copy: Workspace, tmp_path: Path
) -> None:
    ws = demo_copy
    before = ws.store.stamps()
    view, index = ws.forecaster.view("impressions"), ws.index()
    draft = Draft(text=BODY["text"], account="loomhaven")
    got = check_drafts(ws, [draft], now=NOW)
    assert got and ws.store.stamps() == before  # a forecast was written, no counter moved
    assert ws.forecaster.view("impressions") is view and ws.index() is index
    adaptation.reset_adaptation(ws)  # a write to the scoring tables
    assert ws.store.stamps() == (before[0], before[1] + 1)
    assert ws.forecaster.view("impressions") is view  # the history did not change
    csv = tmp_path / "one.csv"
    csv.write_text(
        "post_id,account,text,posted_at,impressions\nnew-1,loomhaven,A new post,2026-11-30T10:00Z,120\n",
        encoding="utf-8",
    )
    ws.import_csv(csv, ImportOptions(new_accounts="UTC"))
    assert ws.store.stamps()[0] > before[0]
    assert ws.forecaster.view("impressions") is not view  # rebuilt for the new post


def test_pinned_counters_hold_for_the_request_and_move_after(demo_copy: Workspace) -> None:
    ws = demo_copy
    other = Store(url=ws.store.url)  # another process sharing the store, in effect
    try:
        with ws.store.pinned() as held:
            other.set_account("loomhaven_lab", timezone="UTC")
            assert ws.store.stamps() == held  # one read for the whole request
            with ws.store.pinned() as inner:
                assert inner == held  # nested pins reuse the first read
        assert ws.store.stamps()[0] == held[0] + 1  # seen as soon as the request ends
    finally:
        other.close()


def test_a_warm_health_check_reads_only_the_counters_and_follows_other_writers(
    demo_copy: Workspace,
) -> None:
    ws = demo_copy
    with TestClient(create_app(workspace=ws)) as client:
        first = client.get("/v1/health").json()  # warm: counts kept, index in step
        with statements(ws.store) as seen:
            again = client.get("/v1/health").json()
        assert again == first and first["index"]["state"] == "ready"
        # No count(*) and no read of every (post, vector) pair: one counter read per part asked.
        assert seen and all("store_stamp" in s for s in seen), seen
        # A write by another handle on the same store (another process, in effect)
        # moves the counter, so the counts are taken again and the index is seen stale.
        other = Store(url=ws.store.url)
        try:
            other.set_account("glasshouse_night_desk", timezone="UTC")
            gone = str(ws.store.posts_frame()["post_id"].iloc[0])
            assert len(other.forget(post_id=gone)) == 1
        finally:
            other.close()
        after = client.get("/v1/health").json()
    assert after["accounts"] == first["accounts"] + 1
    assert after["posts"] == first["posts"] - 1
    assert after["index"]["state"] == "stale"


def test_counts_follow_a_write_made_inside_a_pinned_request(demo_copy: Workspace) -> None:
    store = demo_copy.store
    before = store.counts()
    with store.pinned():
        store.set_account("glasshouse_night_desk", timezone="UTC")
        assert store.counts()["accounts"] == before["accounts"] + 1


def test_eligible_rows_and_baseline_equal_the_whole_history_masks() -> None:
    rng = np.random.default_rng(7)
    n = 3000
    target = rng.normal(5, 1, n)
    target[rng.random(n) < 0.2] = np.nan
    h = F.History(
        pk=np.arange(n, dtype=np.int64),
        time=np.sort(rng.uniform(0, 1e7, n)),
        account=rng.integers(0, 3, n).astype(np.int64),
        log_target=target,
        vectors=np.zeros((n, 4), dtype=np.float32),
    )
    params = F.FeatureParams(k=5, maturity_s=86400.0, similar_threshold=0.8, baseline_n=20)
    for t in rng.uniform(0, 1.1e7, 25):
        # The definitions written out as whole-history masks.
        ok = (h.time <= t - params.maturity_s) & ~np.isnan(h.log_target)
        assert np.array_equal(h.eligible_rows(t, params), np.flatnonzero(ok))
        for a in range(3):
            mine = ok & (h.account == a)
            assert np.array_equal(h.eligible_rows(t, params, a), np.flatnonzero(mine))
            logs = h.log_target[mine][-params.baseline_n :]
            want = (float(np.median(logs)), float(len(logs))) if len(logs) else (np.nan, 0.0)
            got = F.baseline(h, a, t, params)
            assert got[1] == want[1] and (got[0] == want[0] or (np.isnan(got[0]) and np.isnan(want[0])))


def test_precedent_details_from_the_view_equal_the_stores(demo_workspace: Workspace) -> None:
    # The view's details replace a SQL read on every forecast: they must say
    # exactly what the store's own query (Store.posts_by_pk) says, post for post.
    view = demo_workspace.forecaster.view("impressions")
    got = view.details(range(len(view.history)))
    want = demo_workspace.store.posts_by_pk(list(got))
    assert len(got) == len(view.history) == len(want)
    for pk, d in got.items():
        assert d == want[pk]
        assert d["posted_at"].utcoffset() is not None and d["posted_at"] == want[pk]["posted_at"]


def test_an_import_leaves_the_views_in_use_ready_for_the_next_forecast(
    demo_copy: Workspace, tmp_path: Path
) -> None:
    ws = demo_copy
    old = ws.forecaster.view("impressions")
    csv = tmp_path / "one.csv"
    csv.write_text(
        "post_id,account,text,posted_at,impressions\n"
        "new-2,loomhaven,Moss garden reopens,2026-11-29T09:00Z,80\n",
        encoding="utf-8",
    )
    ws.import_csv(csv, ImportOptions(new_accounts="UTC"))
    with statements(ws.store) as seen:
        fresh = ws.forecaster.view("impressions")
    assert fresh is not old and "new-2" in set(fresh.frame["post_id"])
    assert len(seen) == 1 and "store_stamp" in seen[0]  # built by the import, only checked here
