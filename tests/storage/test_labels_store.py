"""The labels table in the store's own jobs: a forget (post or account) takes
its posts' labels with it, and a copy onto PostgreSQL carries them. Rows are
read back with straight SQL through each backend's own driver, not through
the code under test."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest
from support.pgsupport import SERVER, create_database, drop_database, raw

from service.ingest.options import ImportOptions
from service.storage.copying import copy_store
from service.storage.store import Store
from service.workspace import Workspace

pytestmark = pytest.mark.both_backends

LABELLED = (
    "SELECT p.post_id, l.name, l.value FROM post_labels l JOIN posts p ON p.id = l.post_pk ORDER BY 1, 2"
)


def labelled_history(ws: Workspace, tmp_path: Path) -> None:
    """Six posts of two accounts, each with a campaign and every other one a series."""
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["post_id", "account", "text", "posted_at", "impressions", "campaign", "series"])
    for i in range(6):
        w.writerow(
            [
                f"p{i}",
                ("loomhaven", "loomhaven_lab")[i % 2],
                f"Garden note {i}: the {('ferns', 'roses', 'oaks')[i % 3]} today",
                f"2026-05-0{i + 1}T09:00:00Z",
                100 + i,
                ("spring fair", "open days")[i // 3],
                "weekly" if i % 2 == 0 else "",
            ]
        )
    path = tmp_path / "labelled.csv"
    path.write_text(buf.getvalue(), encoding="utf-8")
    s = ws.import_csv(path, ImportOptions(new_accounts="UTC", labels=("campaign", "series")))
    assert (s.added, s.rejected) == (6, 0)


def test_forget_removes_the_labels_of_a_post_and_of_an_account(workspace: Workspace, tmp_path: Path) -> None:
    labelled_history(workspace, tmp_path)
    url = workspace.store.url
    assert len(raw(url, LABELLED)) == 9  # six campaigns, three series
    assert workspace.forget(post_id="p2") == 1
    left = raw(url, LABELLED)
    assert {r[0] for r in left} == {"p0", "p1", "p3", "p4", "p5"} and len(left) == 7
    # loomhaven_lab holds p1, p3, p5 (no series, one campaign each).
    assert workspace.forget(account="loomhaven_lab") == 3
    assert raw(url, LABELLED) == [
        ("p0", "campaign", "spring fair"),
        ("p0", "series", "weekly"),
        ("p4", "campaign", "open days"),
        ("p4", "series", "weekly"),
    ]
    # No label row points at a post that is gone.
    assert raw(url, "SELECT COUNT(*) FROM post_labels WHERE post_pk NOT IN (SELECT id FROM posts)") == [(0,)]


@pytest.mark.skipif(not SERVER, reason="SOUNDING_TEST_POSTGRES_URL is not set")
def test_the_copy_to_postgresql_carries_the_labels(workspace: Workspace, tmp_path: Path) -> None:
    labelled_history(workspace, tmp_path)
    dest_url = create_database()
    try:
        dest = Store(url=dest_url)
        try:
            copied = copy_store(workspace.store, dest)
            assert copied["post_labels"] == 9
            assert dest.label_names() == {"campaign": 6, "series": 3}
        finally:
            dest.close()
        assert raw(dest_url, LABELLED) == raw(workspace.store.url, LABELLED)
    finally:
        drop_database(dest_url)
