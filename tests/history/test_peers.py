"""Reference accounts (a peer's posts, without metrics): searched and warned
about, never measured, learnt from or scored; on SQLite and PostgreSQL."""

from __future__ import annotations

import csv
import io
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path

import pytest
from conftest import NEWS, NOW, SUBJECTS, history_csv

from models.embedding import Embedder
from models.errors import CSVFormatError, InputError
from service.analysis.distribution import distribution
from service.forecast.draft import Draft
from service.forecast.training import train
from service.ingest.options import ImportOptions
from service.segments.request import SegmentRequest
from service.segments.segmenting import segment
from service.settings import Settings
from service.workspace import Workspace

pytestmark = pytest.mark.both_backends

TEAM = ("loomhaven", "loomhaven_lab")
PEER = "fernbrook_park"
N_TEAM, N_PEER = 300, 500
#: The peer's post two days before NOW that a draft nearly repeats.
RECENT = "Dawn chorus walk: our birders lead a slow loop of the east meadow at six on Sunday"
DRAFTS = [
    Draft(text="Snowdrops open early this weekend", account="loomhaven", planned_at=NOW + timedelta(days=1)),
    Draft(
        text="The fern house gets a new bench", account="loomhaven_lab", planned_at=NOW + timedelta(hours=5)
    ),
    Draft(text="The herb garden needs volunteers", account="loomhaven", planned_at=NOW),
]
TOPICS = ["snowdrops | winter flowers", "volunteers | helping out"]


def peer_csv(n: int, *, impressions: bool) -> bytes:
    """Invented posts of the peer about the same subjects as the team's (so they
    sit among every draft's nearest posts), over the team's months."""
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["post_id", "account", "text", "posted_at", *(["impressions"] if impressions else [])])
    start = NOW.replace(year=2025, month=2, day=1, hour=10)
    for i in range(n):
        text = f"At Fernbrook Park, {SUBJECTS[i % 8].lower()} {NEWS[(i + 1) % 6]} (peer note {i})"
        when = (start + timedelta(hours=2.3 * i)).isoformat()
        w.writerow(
            [f"fp-{i}{'m' if impressions else ''}", PEER, text, when, *([90_000] if impressions else [])]
        )
    if not impressions:
        w.writerow(["fp-recent", PEER, RECENT, (NOW - timedelta(days=2)).isoformat()])
    return buf.getvalue().encode()


@dataclass
class Peers:
    ws: Workspace
    before: list[tuple[float, float, float, list[str]]]
    report: dict[str, object]
    segments: dict[str, object]
    distribution: dict[str, object]


def bands(ws: Workspace) -> list[tuple[float, float, float, list[str]]]:
    """Each draft's interval, and the precedents it was built from."""
    return [
        (f.low, f.median, f.high, [p.post_id for p in f.precedents])
        for f in ws.forecaster.forecast(DRAFTS, now=NOW)
    ]


@pytest.fixture(scope="module")
def peers(backend: str, tmp_path_factory: pytest.TempPathFactory, embedder: Embedder) -> Iterator[Peers]:
    """The team's 300 posts and a model trained on them; the answers before the
    peer's posts; then 500 of the peer's posts imported without metrics
    (and 50 more with metrics, which must stay unread)."""
    root = tmp_path_factory.mktemp("peers")
    ws = Workspace(settings=Settings(home=root / "home"), embedder=embedder)
    (root / "team.csv").write_bytes(history_csv(N_TEAM, prefix="t", accounts=TEAM, engagements=True))
    ws.import_csv(root / "team.csv", ImportOptions(new_accounts="UTC"))
    model = train(ws, "impressions", now=NOW, backtest=False)
    before = bands(ws)
    seg = segment(ws, SegmentRequest(topics=TOPICS), now=NOW).model_dump(mode="json")
    dist = distribution(ws, now=NOW).model_dump(mode="json")
    ws.change_account(PEER, reference=True, timezone="Europe/London")
    (root / "peer.csv").write_bytes(peer_csv(N_PEER, impressions=False))
    (root / "peer_numbers.csv").write_bytes(peer_csv(50, impressions=True))
    assert ws.import_csv(root / "peer.csv").added == N_PEER + 1
    assert ws.import_csv(root / "peer_numbers.csv").added == 50
    yield Peers(ws, before, dict(model.report), seg, dist)
    ws.close()


def test_the_same_drafts_forecast_the_same_with_500_reference_posts(peers: Peers) -> None:
    # The peer's posts sit among every draft's nearest posts, so they could intrude...
    for d in DRAFTS:
        assert any(p.reference for p in peers.ws.precedents(d.text, k=10, now=NOW)), d.text
    # ...yet the answers are exactly equal, not close: the peer's posts reach no
    # feature, baseline or neighbour list.
    assert bands(peers.ws) == peers.before


def test_training_reads_the_same_rows_with_reference_posts(peers: Peers) -> None:
    again = train(peers.ws, "impressions", now=NOW, backtest=False)
    for key in ("n_posts", "n_train", "n_calibration", "train_until", "calibration_from"):
        assert again.report[key] == peers.report[key], key
    # Every team post of 2025 is settled by NOW (common practice, no source: a
    # post's reach settles within days), so all of them train, none of the peer's.
    assert again.report["n_posts"] == N_TEAM


def test_segment_statistics_and_distribution_are_unchanged(peers: Peers) -> None:
    after = segment(peers.ws, SegmentRequest(topics=TOPICS), now=NOW).model_dump(mode="json")
    assert after["n_posts"] == peers.segments["n_posts"] == N_TEAM
    assert after["left_out"] == peers.segments["left_out"]
    for old, new in zip(peers.segments["splits"], after["splits"], strict=True):  # type: ignore[call-overload]
        for a, b in zip(old["segments"], new["segments"], strict=True):
            team_examples = [e for e in b.pop("examples") or [] if not e["reference"]]
            assert team_examples == a.pop("examples")
            assert a == b, a["name"]
    assert distribution(peers.ws, now=NOW).model_dump(mode="json") == peers.distribution


def test_topic_examples_show_the_peer_marked(peers: Peers) -> None:
    after = segment(peers.ws, SegmentRequest(topics=TOPICS), now=NOW)
    shown = [e for s in after.splits[0].segments for e in s.examples or [] if e.reference]
    assert shown, "the peer's posts on these topics are shown"
    assert {e.account for e in shown} == {PEER} and all(e.value is None for e in shown)


def test_a_peer_text_is_found_as_a_reference_precedent(peers: Peers) -> None:
    text = "At Fernbrook Park, the bee hotel get a new bench"
    found = peers.ws.precedents(text, k=5, now=NOW)
    top = found[0]
    assert top.account == PEER and top.reference
    assert all(v is None for v in top.metrics.values())
    assert top.model_dump(mode="json")["reference"] is True
    # A peer's row that came with impressions is found too, still without them.
    numbered = peers.ws.precedents(
        "At Fernbrook Park, magnolias need volunteers (peer note 8)", k=20, now=NOW
    )
    mine = [p for p in numbered if p.post_id.endswith("m")]
    assert mine and all(p.metrics["impressions"] is None for p in mine)


def test_a_near_repeat_of_a_peer_post_names_the_peer(peers: Peers) -> None:
    draft = Draft(
        text="Dawn chorus walk: our birders lead a slow loop of the east meadow at six this Sunday",
        account="loomhaven",
        planned_at=NOW,
    )
    f = peers.ws.forecaster.forecast([draft], now=NOW)[0]
    theirs = [r for r in f.repeats if r.scope == "reference"]
    assert [r.post_id for r in theirs] == ["fp-recent"]
    assert theirs[0].account == PEER and theirs[0].value is None
    assert f"{PEER} posted something like this 2 days ago" in theirs[0].message
    assert theirs[0].message in f.warnings


def test_the_peers_view_is_kept_per_metric(peers: Peers) -> None:
    fc = peers.ws.forecaster
    first = fc.peers("impressions")
    other = fc.peers("engagements")
    assert first is not None and other is not None
    assert (first.metric, other.metric) == ("impressions", "engagements")
    assert fc.peers("impressions") is first  # kept while the store is unchanged


def test_a_reference_account_is_not_forecast(peers: Peers) -> None:
    with pytest.raises(InputError, match="reference account"):
        peers.ws.forecaster.forecast([Draft(text="Snowdrops", account=PEER)], now=NOW)


def test_only_reference_accounts_import_without_metrics(peers: Peers, tmp_path: Path) -> None:
    bare = tmp_path / "bare.csv"
    bare.write_text("post_id,account,text,posted_at\nx-1,loomhaven,Snowdrops,2025-03-01T10:00:00Z\n")
    with pytest.raises(CSVFormatError, match=r"no metric column.*loomhaven is not one"):
        peers.ws.import_csv(bare)
    assert peers.ws.store.account("loomhaven").posts == N_TEAM // 2  # nothing written


def test_forget_removes_reference_posts(make_workspace, embedder: Embedder) -> None:
    ws = make_workspace()
    ws.change_account(PEER, reference=True, followers=1200, since=NOW - timedelta(days=900))
    path = Path(ws.settings.resolved_home).parent / "peer.csv"
    path.write_bytes(peer_csv(12, impressions=False))
    assert ws.import_csv(path).added == 13
    assert ws.precedents(RECENT, k=1, now=NOW)[0].reference
    assert ws.forget(account=PEER) == 13
    assert ws.store.counts()["posts"] == 0 and ws.precedents(RECENT, k=3, now=NOW) == []
    assert ws.store.follower_counts() == []
    # The account and its mark are gone with it: made again, it is a team account.
    assert not ws.change_account(PEER).reference


def test_the_precedents_screen_marks_the_peer(peers: Peers, embedder: Embedder) -> None:
    from typer.testing import CliRunner

    from service.cli import app as cli_app
    from service.cli.base import use_embedder

    use_embedder(embedder)
    env = {"SOUNDING_HOME": str(peers.ws.settings.resolved_home), "SOUNDING_NOW": NOW.isoformat()}
    res = CliRunner().invoke(cli_app, ["precedents", RECENT, "-k", "3"], env=env, terminal_width=80)
    assert res.exit_code == 0, res.output
    first = next(line for line in res.output.splitlines() if "Dawn chorus" in line)
    assert "reference" in first  # in the metric's place, at any width
    assert "reference: a reference account's post" in res.output
