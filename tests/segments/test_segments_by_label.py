"""Segments by the team's own label (--by label:campaign) on a generated
history where one campaign was planted far above the others.

The outside references: the generator's own record of each post's campaign
(kept here, never read back from the store) grouped by hand, with
scipy.stats.kruskal and scipy.stats.mannwhitneyu on those groups, the
rank-biserial r from its formula (Kerby 2014: r = 2U / (n1 n2) - 1) and
Holm's adjustment from statsmodels (multipletests, method "holm").
"""

from __future__ import annotations

import csv
import io
import json
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest
from conftest import NOW
from fastapi.testclient import TestClient
from scipy import stats
from statsmodels.stats.multitest import multipletests
from typer.testing import CliRunner

from models.embedding import Embedder
from models.errors import InputError, NotFound
from service.api.app import create_app
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.ingest.options import ImportOptions
from service.segments.request import NO_LABEL, SegmentRequest
from service.segments.segmenting import segment
from service.settings import Settings
from service.workspace import Workspace

pytestmark = pytest.mark.both_backends

CAMPAIGNS = ("open days", "members week", "spring fair")
PLANTED = "spring fair"  # four times the reach of the others
N = 120
PLACES = ("rose garden", "glasshouse", "lake path", "seed library", "orchard", "herb beds")


def generate(seed: int = 7) -> tuple[bytes, dict[str, str | None], dict[str, float]]:
    """The history file, each post's campaign (None: the cell left empty)
    and each post's impressions, as the generator made them."""
    rng = np.random.default_rng(seed)
    campaign_of: dict[str, str | None] = {}
    value_of: dict[str, float] = {}
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["post_id", "account", "text", "posted_at", "impressions", "campaign"])
    start = NOW - timedelta(days=200)
    for i in range(N):
        pid = f"lb-{i}"
        campaign = None if i % 5 == 4 else CAMPAIGNS[i % 3]
        base = 4.0 if campaign == PLANTED else 1.0
        value = round(800 * base * float(rng.lognormal(0.0, 0.35)))
        campaign_of[pid], value_of[pid] = campaign, float(value)
        when = start + timedelta(hours=31 * i)
        text = f"Notes from the {PLACES[i % 6]}, week {i // 6}: {('news', 'a walk', 'a visit')[i % 3]}"
        w.writerow([pid, "loomhaven", text, when.isoformat(), value, campaign or ""])
    return buf.getvalue().encode(), campaign_of, value_of


@pytest.fixture(scope="module")
def labelled(tmp_path_factory: pytest.TempPathFactory, embedder: Embedder, backend: str):
    """A workspace holding the generated history with its campaign label."""
    data, campaign_of, value_of = generate()
    home = tmp_path_factory.mktemp("labels") / "home"
    path = home.parent / "history.csv"
    path.write_bytes(data)
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    s = ws.import_csv(path, ImportOptions(new_accounts="UTC", labels=("campaign",)))
    assert (s.added, s.rejected) == (N, 0)
    yield ws, campaign_of, value_of
    ws.close()


def test_the_planted_campaign_is_highest_and_clearly_so(labelled) -> None:
    ws, campaign_of, value_of = labelled
    result = segment(ws, SegmentRequest(by="label:campaign"), now=NOW)
    split = result.split("label:campaign")
    names = [seg.name for seg in split.segments]
    assert names == [*sorted(CAMPAIGNS), NO_LABEL]
    # The generator's own groups, not the store's.
    groups = {
        name: np.array(
            [v for pid, v in value_of.items() if (campaign_of[pid] or NO_LABEL) == name], dtype=float
        )
        for name in names
    }
    assert [seg.n for seg in split.segments] == [groups[n].size for n in names]
    for seg in split.segments:
        assert seg.median == pytest.approx(float(np.median(groups[seg.name])))
    top = split.segment(PLANTED)
    assert top.median == max(seg.median for seg in split.segments)
    assert top.p_holm is not None and top.p_holm < split.alpha
    assert "higher than the rest" in top.summary and "clearly different" in top.summary
    # Kruskal–Wallis across the four segments: scipy.stats.kruskal on the generator's groups.
    h, p = stats.kruskal(*(groups[n] for n in names))
    assert split.kruskal_h == pytest.approx(h) and split.kruskal_p == pytest.approx(p)
    # Each segment against the rest: scipy.stats.mannwhitneyu (two-sided), the
    # rank-biserial r by its formula, Holm by statsmodels.
    raw_p = []
    for seg in split.segments:
        rest = np.concatenate([groups[n] for n in names if n != seg.name])
        mw = stats.mannwhitneyu(groups[seg.name], rest, alternative="two-sided")
        raw_p.append(mw.pvalue)
        assert seg.p_value == pytest.approx(mw.pvalue)
        assert seg.rank_biserial == pytest.approx(2 * mw.statistic / (groups[seg.name].size * rest.size) - 1)
    holm = multipletests(raw_p, method="holm")[1]
    assert [seg.p_holm for seg in split.segments] == pytest.approx(list(holm))


def test_label_splits_are_refused_clearly_when_there_is_no_such_label(labelled) -> None:
    ws, _, _ = labelled
    # An unknown label is an unknown name (404), like an unknown account.
    with pytest.raises(NotFound, match="no post has a label 'series'") as info:
        segment(ws, SegmentRequest(by="label:series"), now=NOW)
    assert info.value.hint == "labels kept: campaign"
    with pytest.raises(InputError, match="names no label"):
        segment(ws, SegmentRequest(by="label: "), now=NOW)
    with pytest.raises(InputError, match=r"or label:NAME"):
        segment(ws, SegmentRequest(by="campaign"), now=NOW)


def test_the_api_and_the_command_line_split_by_label(
    labelled, embedder: Embedder, monkeypatch: pytest.MonkeyPatch
) -> None:
    ws, _, _ = labelled
    monkeypatch.setenv("SOUNDING_NOW", NOW.isoformat())
    with TestClient(create_app(workspace=ws)) as client:
        r = client.post("/v1/segments", json={"by": "label:campaign", "topics": ["the rose garden"]})
        assert r.status_code == 200, r.text
        body = r.json()
        assert [s["by"] for s in body["splits"]] == ["topic", "label:campaign"]
        assert body["two_way"]["cols"] == [*sorted(CAMPAIGNS), NO_LABEL]
        r = client.post("/v1/segments", json={"by": "label:campaign", "format": "svg"})
        assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
        r = client.post("/v1/segments", json={"by": "label:"})
        assert r.status_code == 422
        r = client.post("/v1/segments", json={"by": "label:series"})
        assert r.status_code == 404 and r.json()["error"]["code"] == "not_found", r.text
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(ws.settings.resolved_home))
    out = CliRunner().invoke(cli_app, ["segments", "--by", "label:campaign", "--json"])
    assert out.exit_code == 0, out.output
    split = json.loads(out.stdout)["splits"][0]
    assert split["by"] == "label:campaign"
    assert max(split["segments"], key=lambda s: s["median"])["name"] == PLANTED
    out = CliRunner().invoke(cli_app, ["segments", "--by", "label:campaign"])
    assert out.exit_code == 0 and PLANTED in out.output and "label campaign" in out.output


def test_a_second_figure_names_the_label_file_safely(labelled, tmp_path: Path) -> None:
    from service.cli.segments import _plot_paths

    ws, _, _ = labelled
    result = segment(ws, SegmentRequest(topics=["the orchard"], by="label:campaign"), now=NOW)
    paths = [p.name for p, _ in _plot_paths(tmp_path / "fig.svg", result)]
    assert paths == ["fig.svg", "fig-label-campaign.svg"]
