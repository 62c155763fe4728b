"""The history view kept between commands: a later process maps the arrays
an earlier one saved, and only while the store's change counter stands."""

from __future__ import annotations

import numpy as np
from conftest import history_csv

from service.history import viewcache
from service.history.view import build_view
from service.ingest.options import ImportOptions


def test_a_kept_view_is_the_built_view_until_the_store_changes(make_workspace, tmp_path) -> None:
    ws = make_workspace()
    csv = tmp_path / "posts.csv"
    csv.write_bytes(history_csv(40, accounts=("loomhaven", "loomhaven_lab")))
    ws.import_csv(csv, ImportOptions(new_accounts="UTC"))
    stamp = ws.store.stamp()
    built = build_view(ws.store, "impressions", with_vectors=False)
    viewcache.save(ws.settings, built, stamp)

    kept = viewcache.load(ws.settings, ws.store, "impressions", stamp)
    assert kept is not None and kept.frame is None  # mapped arrays, no texts
    for name in ("pk", "time", "account", "log_target"):
        np.testing.assert_array_equal(getattr(kept.history, name), getattr(built.history, name))
    np.testing.assert_array_equal(kept.local_hours, built.local_hours)
    np.testing.assert_array_equal(kept.weekdays, built.weekdays)
    np.testing.assert_array_equal(kept.forms, built.forms)
    assert kept.account_codes == built.account_codes and kept.zones == built.zones
    # Shown posts come from the store by row id: the same details as the frame's.
    rows = [0, 7, len(built.history.pk) - 1]
    assert kept.details(rows) == built.details(rows)
    # Another metric, or a moved counter, is not this view.
    assert viewcache.load(ws.settings, ws.store, "engagements", stamp) is None

    ws.forget(post_id="h-3", account="loomhaven_lab")
    moved = ws.store.stamp()
    assert moved != stamp
    assert viewcache.load(ws.settings, ws.store, "impressions", moved) is None
    fresh = ws.forecaster.view("impressions")  # rebuilt, and kept for the next process
    assert len(fresh.history.pk) == len(built.history.pk) - 1
    again = viewcache.load(ws.settings, ws.store, "impressions", moved)
    assert again is not None
    np.testing.assert_array_equal(again.history.pk, fresh.history.pk)
    # Only the current counter's arrays are left in the folder.
    assert all(
        p.name.startswith(f"{moved}-") for p in viewcache.folder(ws.settings, "impressions").glob("*.npy")
    )
