"""The saved index is used without comparing every post with the store when
its step file says it is in step with the store's change counter
(service/history/index_step.py), and compared again whenever that is not
known."""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from models.embedding import Embedder
from service.history.index_step import HELD_FILE, STEP_FILE
from service.settings import Settings
from service.storage.store import Store
from service.workspace import Workspace


@pytest.fixture()
def pair_reads(monkeypatch: pytest.MonkeyPatch) -> list[int]:
    """Counts every read of the store's (post, vector key) pairs."""
    calls: list[int] = []
    real: Callable[..., Any] = Store.index_pairs

    def counting(self: Store) -> Any:
        calls.append(1)
        return real(self)

    monkeypatch.setattr(Store, "index_pairs", counting)
    return calls


def _fresh(ws: Workspace, embedder: Embedder) -> Workspace:
    """Another process's workspace over the same data directory."""
    return Workspace(settings=Settings(home=ws.settings.resolved_home), embedder=embedder)


def _search(ws: Workspace, queries: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(similarities, post row ids) of each query's 10 nearest."""
    return ws.index().search(queries, k=10)


def test_a_later_process_uses_the_kept_index_without_reading_every_post(
    demo_copy: Workspace, embedder: Embedder, pair_reads: list[int]
) -> None:
    first = demo_copy.index()  # compared with the store once (the copy's step names another store)
    assert pair_reads == [1]
    assert (demo_copy.settings.index_dir / STEP_FILE).is_file()
    later = _fresh(demo_copy, embedder)
    kept = later.index()
    assert pair_reads == [1]  # no second comparison
    assert kept.fingerprint_ == first.fingerprint_ and kept.ntotal == first.ntotal
    queries = embedder.encode(["Magnolias on the Long Border", "Volunteers for the seed library"])
    for got, want in zip(_search(later, queries), _search(demo_copy, queries), strict=True):
        np.testing.assert_array_equal(got, want)
    # It is caught up in place with what it holds (read from the held file)
    # when that process changes posts, and kept in step for the next one.
    post = later.store.posts_frame().iloc[0]
    own = embedder.encode([str(post["text"])])
    assert int(post["pk"]) in set(_search(later, own)[1].ravel().tolist())  # a post finds itself
    assert later.forget(account=str(post["account"]), post_id=str(post["post_id"])) == 1
    assert later.index().ntotal == first.ntotal - 1
    assert int(post["pk"]) not in set(_search(later, own)[1].ravel().tolist())
    pair_reads.clear()
    third = _fresh(demo_copy, embedder)
    assert third.index().ntotal == first.ntotal - 1
    assert pair_reads == []
    for ws in (later, third):
        ws.close()


def test_a_change_by_another_process_is_compared_again(
    demo_copy: Workspace, embedder: Embedder, pair_reads: list[int]
) -> None:
    demo_copy.index()
    other = _fresh(demo_copy, embedder)
    other.store.set_account("loomhaven", display_name="Loomhaven Gardens")  # moves the change counter
    pair_reads.clear()
    later = _fresh(demo_copy, embedder)
    later.index()
    assert pair_reads == [1]
    for ws in (other, later):
        ws.close()


@pytest.mark.parametrize(
    "spoil",
    [
        lambda d: _edit_step(d, store="sqlite:////elsewhere/sounding.db"),
        lambda d: _edit_step(d, stamp=-1),
        lambda d: _edit_step(d, fingerprint="0" * 64),
        lambda d: (d / HELD_FILE).write_bytes((d / HELD_FILE).read_bytes()[:-8]),
        lambda d: (d / STEP_FILE).write_text("{not json"),
    ],
    ids=["another store", "another counter", "another index", "cut held file", "unreadable step"],
)
def test_a_step_file_that_does_not_fit_is_not_trusted(
    spoil: Callable[[Path], None], demo_copy: Workspace, embedder: Embedder, pair_reads: list[int]
) -> None:
    good = demo_copy.index()
    spoil(demo_copy.settings.index_dir)
    pair_reads.clear()
    later = _fresh(demo_copy, embedder)
    again = later.index()
    assert pair_reads == [1]  # compared with the store again
    assert again.fingerprint_ == good.fingerprint_  # and found whole: nothing rebuilt
    later.close()


def _edit_step(directory: Path, **changes: Any) -> None:
    path = directory / STEP_FILE
    step = json.loads(path.read_text())
    step.update(changes)
    path.write_text(json.dumps(step))


def test_an_index_read_early_is_taken_once_and_checked_like_any_saved_one(
    demo_copy: Workspace, embedder: Embedder, pair_reads: list[int], monkeypatch: pytest.MonkeyPatch
) -> None:
    # The command line reads the saved index in a thread while it starts
    # (service/cli/warmup.py) and hands the workspace a way to take it.
    from models.index import VectorIndex

    demo_copy.index()
    early = VectorIndex.load(demo_copy.settings.index_dir)
    taken: list[int] = []

    def take() -> VectorIndex:
        taken.append(1)
        return early

    loads: list[int] = []
    real_load = VectorIndex.load
    monkeypatch.setattr(VectorIndex, "load", classmethod(lambda cls, d: loads.append(1) or real_load(d)))
    pair_reads.clear()
    later = Workspace(
        settings=Settings(home=demo_copy.settings.resolved_home), embedder=embedder, saved_index=take
    )
    assert later.index() is early
    assert (taken, loads, pair_reads) == ([1], [], [])
    later.close()


def test_a_damaged_index_read_early_is_rebuilt(demo_copy: Workspace, embedder: Embedder) -> None:
    from models.index import INDEX_FILE, VectorIndex

    before = demo_copy.index()
    path = demo_copy.settings.index_dir / INDEX_FILE
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0xFF
    path.write_bytes(bytes(data))
    later = Workspace(
        settings=Settings(home=demo_copy.settings.resolved_home),
        embedder=embedder,
        saved_index=lambda: VectorIndex.load(demo_copy.settings.index_dir),
    )
    rebuilt = later.index()
    assert rebuilt.fingerprint_ == before.fingerprint_ and rebuilt.ntotal == before.ntotal
    assert VectorIndex.load(demo_copy.settings.index_dir).ntotal == before.ntotal  # whole on disk again
    later.close()
