"""The history store: the demo import, re-imports, snapshots, accounts, backup."""

from __future__ import annotations

import csv
import json
import re
import unicodedata
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sqlalchemy import select

from models.embedding import Embedder
from models.errors import InputError, NotFound, StoreError
from models.features import has_link
from models.metrics import METRIC_COLUMNS
from service.ingest.options import ImportOptions
from service.storage.post_writes import PostRow
from service.storage.store import Store
from service.storage.tables import Snapshot
from service.workspace import Workspace

# These tests run on SQLite, then again on PostgreSQL when a server is set.
pytestmark = pytest.mark.both_backends

ROOT = Path(__file__).resolve().parents[2]
DEMO_CSV = ROOT / "demo_data" / "posts.csv"  # as in conftest
EFFECTS = ROOT / "demo_data" / "effects.json"


def demo_records() -> list[dict[str, str]]:
    """The demo CSV as read by Python's csv module (RFC 4180), independent of our importer."""
    with DEMO_CSV.open(encoding="utf-8-sig", newline="") as f:
        return list(csv.DictReader(f))


def write_records(path: Path, rows: list[dict[str, str]]) -> Path:
    with path.open("w", encoding="utf-8", newline="") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    return path


def snapshots_of(ws: Workspace, pk: int) -> list[Snapshot]:
    with ws.store.session() as s:
        return list(s.scalars(select(Snapshot).where(Snapshot.post_pk == pk).order_by(Snapshot.id)))


def frame_values(ws: Workspace) -> pd.DataFrame:
    cols = ["account", "post_id", "text", "posted_at", "has_media", *METRIC_COLUMNS]
    return ws.store.posts_frame()[cols].sort_values(["account", "post_id"]).reset_index(drop=True)


# The demo import -----------------------------------------------------------------


def test_demo_accounts_have_the_documented_zones(demo_workspace: Workspace) -> None:
    # effects.json documents each invented account's IANA zone.
    documented = json.loads(EFFECTS.read_text())["accounts"]
    got = {a.handle: (a.display_name, a.timezone) for a in demo_workspace.store.accounts()}
    assert got == {h: (v["display_name"], v.get("timezone", v.get("zone"))) for h, v in documented.items()}


def test_demo_store_matches_the_csv(demo_workspace: Workspace) -> None:
    rows = demo_records()
    counts = demo_workspace.store.counts()
    assert counts["posts"] == counts["snapshots"] == len(rows)
    assert counts["accounts"] == len({r["account"] for r in rows})
    # Texts that are the same after NFC (UAX #15) and whitespace folding share one vector.
    distinct = {re.sub(r"\s+", " ", unicodedata.normalize("NFC", r["text"])).strip() for r in rows}
    assert counts["vectors"] == len(distinct)
    df = demo_workspace.store.posts_frame().set_index(["account", "post_id"])
    for r in rows:
        got = df.loc[(r["account"], r["post_id"])]
        assert got["text"] == r["text"]
        # Python's datetime.fromisoformat (ISO 8601) as the reference reading of the time.
        assert got["posted_at"] == pd.Timestamp(datetime.fromisoformat(r["posted_at"]).astimezone(UTC))
        for m in METRIC_COLUMNS:
            assert got[m] == int(r[m])
        assert bool(got["has_media"]) == (r["has_media"].lower() == "true")
        assert bool(got["has_link"]) == (
            "https://" in r["text"] or "http://" in r["text"] or "www." in r["text"]
        )
    per_account = demo_workspace.store.accounts()
    for a in per_account:
        assert a.posts == sum(r["account"] == a.handle for r in rows)


def test_has_link() -> None:
    assert has_link("read more: https://loomhaven.example/x")
    assert has_link("WWW.loomhaven.example")
    assert not has_link("no link here, just www")


# Re-importing ----------------------------------------------------------------------


def test_unchanged_reimport_writes_and_embeds_nothing(demo_copy: Workspace, embedder: Embedder) -> None:
    n = len(demo_records())
    before_counts = demo_copy.store.counts()
    before = frame_values(demo_copy)
    calls = embedder.calls
    s = demo_copy.import_csv(DEMO_CSV, ImportOptions(new_accounts="UTC"))
    assert embedder.calls == calls  # not one text embedded again
    assert (s.added, s.updated, s.unchanged, s.rejected, s.embedded) == (0, 0, n, 0, 0)
    assert demo_copy.store.counts() == before_counts  # no new post, snapshot or vector
    pd.testing.assert_frame_equal(frame_values(demo_copy), before)
    assert demo_copy.index_state() == {"state": "ready", "count": n}


def test_one_changed_metric_makes_exactly_one_snapshot(
    demo_copy: Workspace, embedder: Embedder, tmp_path: Path
) -> None:
    rows = demo_records()
    n = len(rows)
    target = rows[1234]
    old = int(target["impressions"])
    target["impressions"] = str(old + 17)
    path = write_records(tmp_path / "changed.csv", rows)
    before_counts = demo_copy.store.counts()
    before = frame_values(demo_copy)
    calls = embedder.calls
    s = demo_copy.import_csv(path, ImportOptions(new_accounts="UTC"))
    assert embedder.calls == calls
    assert (s.added, s.updated, s.unchanged, s.embedded) == (0, 1, n - 1, 0)
    after_counts = demo_copy.store.counts()
    assert after_counts["snapshots"] == before_counts["snapshots"] + 1
    assert after_counts["posts"] == before_counts["posts"]
    after = frame_values(demo_copy)
    changed = (after["account"] == target["account"]) & (after["post_id"] == target["post_id"])
    assert changed.sum() == 1
    # The latest snapshot is the current value; every other post is as it was.
    assert after.loc[changed, "impressions"].item() == old + 17
    pd.testing.assert_frame_equal(after[~changed], before[~changed])
    pk = int(
        demo_copy.store.posts_frame(account=target["account"])
        .set_index("post_id")
        .loc[target["post_id"], "pk"]
    )
    history = snapshots_of(demo_copy, pk)
    assert [h.impressions for h in history] == [old, old + 17]
    assert history[0].engagements == history[1].engagements == int(target["engagements"])
    # Re-importing the same changed file again adds nothing.
    s2 = demo_copy.import_csv(path, ImportOptions(new_accounts="UTC"))
    assert (s2.updated, s2.unchanged) == (0, n)
    assert demo_copy.store.counts()["snapshots"] == before_counts["snapshots"] + 1


def _csv(path: Path, body: str) -> Path:
    path.write_text("post_id,account,text,posted_at,impressions,engagements,has_media\n" + body)
    return path


def test_blank_metric_carries_over(workspace: Workspace, tmp_path: Path) -> None:
    workspace.import_csv(
        _csv(tmp_path / "a.csv", "p1,g,Hello garden,2026-01-01T10:00Z,100,5,true\n"),
        ImportOptions(new_accounts="UTC"),
    )
    s = workspace.import_csv(
        _csv(tmp_path / "b.csv", "p1,g,Hello garden,2026-01-01T10:00Z,150,,\n"),
        ImportOptions(new_accounts="UTC"),
    )
    assert s.updated == 1
    pk = int(workspace.store.posts_frame()["pk"].iloc[0])
    hist = snapshots_of(workspace, pk)
    assert [(h.impressions, h.engagements) for h in hist] == [(100, 5), (150, 5)]
    row = workspace.store.posts_frame().iloc[0]
    assert (row["impressions"], row["engagements"], row["has_media"]) == (150, 5, True)


def test_changes_without_new_metrics(workspace: Workspace, embedder: Embedder, tmp_path: Path) -> None:
    workspace.import_csv(
        _csv(tmp_path / "a.csv", "p1,g,Hello garden,2026-01-01T10:00Z,100,5,true\n"),
        ImportOptions(new_accounts="UTC"),
    )
    key1 = workspace.store.posts_frame()["vector_key"].iloc[0]
    # A new time only: updated in place, no snapshot, nothing embedded.
    calls = embedder.calls
    s = workspace.import_csv(
        _csv(tmp_path / "b.csv", "p1,g,Hello garden,2026-01-02T10:00Z,100,5,true\n"),
        ImportOptions(new_accounts="UTC"),
    )
    assert (s.updated, s.embedded, embedder.calls) == (1, 0, calls)
    assert workspace.store.counts()["snapshots"] == 1
    assert workspace.store.posts_frame()["posted_at"].iloc[0] == pd.Timestamp("2026-01-02T10:00Z")
    # A new text: embedded once, new vector key, found by search.
    s = workspace.import_csv(
        _csv(tmp_path / "c.csv", "p1,g,Goodbye garden,2026-01-02T10:00Z,100,5,true\n"),
        ImportOptions(new_accounts="UTC"),
    )
    assert (s.updated, s.embedded, embedder.calls) == (1, 1, calls + 1)
    row = workspace.store.posts_frame().iloc[0]
    assert row["text"] == "Goodbye garden" and row["vector_key"] != key1
    assert row["vector_key"] == embedder.key("Goodbye garden")
    hits = workspace.retrieval.nearest(embedder.encode(["Goodbye garden"]), 1)[0]
    assert hits[0][1] == pytest.approx(1.0, abs=1e-4)


def test_same_text_shares_one_vector(workspace: Workspace, embedder: Embedder, tmp_path: Path) -> None:
    calls = embedder.calls
    s = workspace.import_csv(
        _csv(
            tmp_path / "a.csv",
            "p1,g,Bees  in the lavender,2026-01-01T10:00Z,1,1,\n"
            "p2,h,Bees in the lavender ,2026-01-02T10:00Z,2,1,\n",
        ),
        ImportOptions(new_accounts="UTC"),
    )
    assert (s.added, s.embedded, embedder.calls - calls) == (2, 1, 1)
    assert workspace.store.counts()["vectors"] == 1
    # Forgetting one post keeps the vector the other still uses.
    workspace.forget(account="g", post_id="p1")
    assert workspace.store.counts()["vectors"] == 1
    workspace.forget(account="h")
    assert workspace.store.counts() == {"accounts": 1, "posts": 0, "snapshots": 0, "vectors": 0}


def test_vectors_come_back_in_the_order_asked_with_repeats(demo_workspace: Workspace) -> None:
    store = demo_workspace.store
    keys = list(store.posts_frame()["vector_key"].iloc[:5])
    one_by_one = np.vstack([store.vectors([k]) for k in keys])
    asked = [keys[3], keys[0], keys[3], keys[4], keys[1], keys[0]]
    got = store.vectors(asked)
    # Reference: the rows fetched one key at a time, picked by position here.
    np.testing.assert_array_equal(got, one_by_one[[3, 0, 3, 4, 1, 0]])
    assert store.vectors([]).shape == (0, one_by_one.shape[1])  # the stored width, even for none
    with pytest.raises(StoreError, match="2 vectors are missing"):
        store.vectors([keys[0], "no-such-key", "nor-this-one"])


def test_posts_read_in_chunks_equal_posts_read_at_once(
    demo_workspace: Workspace, monkeypatch: pytest.MonkeyPatch
) -> None:

    import service.storage.post_reads as store_module

    whole = demo_workspace.store.posts_frame()
    monkeypatch.setattr(store_module, "_FRAME_CHUNK", 97)  # many chunks, the last one short
    chunked = demo_workspace.store.posts_frame()
    assert len(whole) > 10 * 97
    pd.testing.assert_frame_equal(chunked, whole)
    for c in ("text", "post_id", "account"):
        to_arrow = getattr(chunked[c].array, "__arrow_array__", None)
        if to_arrow is not None:  # Arrow-backed strings: one piece, so row look-ups stay cheap
            assert to_arrow().num_chunks == 1


def test_a_batch_is_one_transaction(workspace: Workspace, embedder: Embedder) -> None:
    """If anything fails while writing a batch, none of the batch is stored."""
    good = PostRow(
        account="g",
        post_id="p1",
        text="ok",
        posted_at=datetime(2026, 1, 1, tzinfo=UTC),
        metrics=dict.fromkeys(METRIC_COLUMNS, 1),
        has_media=None,
        vector_key=embedder.key("ok"),
    )
    bad = PostRow(
        account="g",
        post_id="p2",
        text="bad",
        posted_at=datetime(2026, 1, 1, tzinfo=UTC),
        metrics={"not_a_metric": 1},
        has_media=None,
        vector_key=embedder.key("bad"),
    )
    vec = {good.vector_key: np.ones(384, np.float32) / np.sqrt(384)}
    with pytest.raises(TypeError):
        workspace.store.write_batch([good, bad], vec, model_id="m")
    assert workspace.store.counts() == {"accounts": 0, "posts": 0, "snapshots": 0, "vectors": 0}


def test_stamp_moves_with_every_change(workspace: Workspace, tmp_path: Path) -> None:
    s0 = workspace.store.stamp()
    workspace.import_csv(
        _csv(tmp_path / "a.csv", "p1,g,One,2026-01-01T10:00Z,1,1,\n"), ImportOptions(new_accounts="UTC")
    )
    s1 = workspace.store.stamp()
    workspace.import_csv(
        _csv(tmp_path / "b.csv", "p1,g,One,2026-01-01T10:00Z,2,1,\n"), ImportOptions(new_accounts="UTC")
    )
    s2 = workspace.store.stamp()
    workspace.forget(post_id="p1")
    s3 = workspace.store.stamp()
    # The stamp is a counter of write transactions: it only grows, even when
    # a forget empties the store again.
    assert s0 < s1 < s2 < s3
    workspace.import_csv(
        _csv(tmp_path / "b.csv", "p1,g,One,2026-01-01T10:00Z,2,1,\n"), ImportOptions(new_accounts="UTC")
    )
    s4 = workspace.store.stamp()
    # Re-importing the same file writes nothing, so the stamp stays; reads never move it.
    workspace.import_csv(
        _csv(tmp_path / "b.csv", "p1,g,One,2026-01-01T10:00Z,2,1,\n"), ImportOptions(new_accounts="UTC")
    )
    workspace.store.posts_frame()
    assert workspace.store.stamp() == s4 > s3
    workspace.store.set_account("g", timezone="Europe/Paris")
    assert workspace.store.stamp() > s4


# Accounts ---------------------------------------------------------------------------


def test_accounts(workspace: Workspace) -> None:
    a = workspace.store.set_account("garden", display_name="The Garden", timezone="Europe/London")
    assert (a.handle, a.display_name, a.timezone, a.posts) == ("garden", "The Garden", "Europe/London", 0)
    # Updating the name keeps the zone; a new account starts in UTC.
    assert workspace.store.set_account("garden", display_name="Garden").timezone == "Europe/London"
    assert workspace.store.set_account("lab").timezone == "UTC"
    with pytest.raises(InputError, match="unknown time zone 'Mars/Olympus'"):
        workspace.store.set_account("garden", timezone="Mars/Olympus")
    with pytest.raises(InputError, match=r"holds U\+0020 \(SPACE\)"):
        workspace.store.set_account("two words")
    with pytest.raises(InputError):
        workspace.store.set_account("")
    assert workspace.store.account("garden").timezone == "Europe/London"  # unchanged by the refusals
    assert [x.handle for x in workspace.store.accounts()] == ["garden", "lab"]
    with pytest.raises(NotFound, match="unknown account 'nobody'"):
        workspace.store.account("nobody")
    with pytest.raises(NotFound):
        workspace.store.posts_frame(account="nobody")
    with pytest.raises(NotFound):
        workspace.store.pks_where(account="nobody")


def test_backup_is_a_consistent_copy(demo_copy: Workspace, tmp_path: Path, backend: str) -> None:
    if backend == "postgresql":
        pytest.skip("SQLite's online backup; PostgreSQL's backup path is tested in test_postgres.py")
    dest = demo_copy.store.backup(tmp_path / "backup.db")
    copy = Store(url=f"sqlite:///{dest}")
    try:
        assert copy.counts() == demo_copy.store.counts()
        assert copy.fingerprint() == demo_copy.store.fingerprint()
    finally:
        copy.close()
    with pytest.raises(InputError, match="already exists"):
        demo_copy.store.backup(dest)
