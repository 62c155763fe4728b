"""Segmentation end to end on the demo history: topic phrases, timing and
form splits, the HTTP endpoint and the CLI.

The outside references are the demo generator's documentation of the
effects it planted (demo_data/effects.json, written by demo_data/generate.py),
scipy and scikit-learn for rank correlation and cosine similarity, zoneinfo
(IANA tz) for local hours, and the PNG and SVG specifications for figures.
Each is named beside its check.
"""

from __future__ import annotations

import itertools
import json
import math
from datetime import datetime, timedelta
from pathlib import Path
from xml.etree import ElementTree
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient
from scipy import stats
from sklearn.metrics.pairwise import cosine_similarity
from typer.testing import CliRunner

from models.errors import InputError, NotFound, NotReady
from models.segments import OTHER
from service.api.app import create_app
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.ingest.options import ImportOptions
from service.segments.answer import SegmentResult
from service.segments.figure import render
from service.segments.request import SegmentRequest
from service.segments.segmenting import segment

ROOT = Path(__file__).resolve().parents[2]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text())
DEMO_CSV = ROOT / "demo_data" / "posts.csv"
ORDER: list[str] = EFFECTS["topic_order_strongest_first"]
# One phrase per topic, as a user would type it: the first documented phrase.
FIRST_PHRASES = [EFFECTS["topic_phrases"][t][0] for t in ORDER]
# Every documented phrase of a topic, as one multi-phrase topic "a | b | ...".
ALL_PHRASES = [" | ".join(EFFECTS["topic_phrases"][t]) for t in ORDER]

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG spec (ISO/IEC 15948, RFC 2083 §3.1)
SVG_NS = "{http://www.w3.org/2000/svg}"  # W3C SVG namespace


def _medians(result: SegmentResult, names: list[str]) -> list[float]:
    split = result.split("topic")
    return [split.segment(n).median for n in names]


@pytest.fixture(scope="module")
def topic_hour(demo_workspace) -> SegmentResult:
    """One-phrase topics with the default threshold, crossed with hour."""
    return segment(demo_workspace, SegmentRequest(topics=FIRST_PHRASES, by="hour"))


@pytest.fixture(scope="module")
def link_split(demo_workspace) -> SegmentResult:
    return segment(demo_workspace, SegmentRequest(by="link"))


# ------------------------------------------------------------------ topics


def test_one_phrase_topics_recover_documented_topic_order(topic_hour: SegmentResult) -> None:
    meds = _medians(topic_hour, FIRST_PHRASES)
    # Bound derived from measurement. Assignment by embedding is noisy: of the
    # posts a one-word or two-word phrase catches, about 68% carry that topic
    # in demo_data/truth.csv, and "events" mostly catches volunteer calls for
    # event stewards. It also mixes with the account and hour effects. We
    # measured rho = 0.943 at the default threshold 0.3 (events and plant
    # science swap), and 0.83-0.94 over thresholds 0-0.4. The bound 0.8 sits
    # below that range; it allows sum(d^2) <= 7 (e.g. three adjacent swaps)
    # and fails for a reversed or shuffled order.
    # Reference: scipy.stats.spearmanr; order from demo_data/effects.json.
    rho = stats.spearmanr(meds, -np.arange(len(ORDER))).statistic
    assert rho >= 0.8, (rho, meds)
    # The strongest and weakest effects are far apart (0.8 on the log scale),
    # so their positions are exact: the two documented strongest topics
    # have the two highest medians, the documented weakest the lowest.
    by_median = [FIRST_PHRASES[i] for i in np.argsort(meds)[::-1]]
    assert set(by_median[:2]) == set(FIRST_PHRASES[:2])
    assert by_median[-1] == FIRST_PHRASES[-1]
    split = topic_hour.split("topic")
    assert split.kruskal_p is not None and split.kruskal_p < 1e-10
    weakest = split.segment(FIRST_PHRASES[-1])
    assert weakest.rank_biserial < 0 and weakest.p_holm < 0.001


def test_multi_phrase_topics_recover_the_full_order(demo_workspace) -> None:
    result = segment(demo_workspace, SegmentRequest(topics=ALL_PHRASES))
    meds = _medians(result, ALL_PHRASES)
    # Averaging every documented phrase of a topic catches it better (78% of
    # the caught posts carry the topic): we measured the exact documented
    # order (rho = 1.0). The bound allows one adjacent swap (rho = 0.943),
    # because blooms and behind_the_scenes have overlapping median intervals
    # (1,610 vs 1,547 measured).
    # Reference: scipy.stats.spearmanr; order from demo_data/effects.json.
    rho = stats.spearmanr(meds, -np.arange(len(ORDER))).statistic
    assert rho >= 0.94, (rho, meds)
    split = result.split("topic")
    strongest, weakest = split.segment(ALL_PHRASES[0]), split.segment(ALL_PHRASES[-1])
    assert strongest.rank_biserial > 0 and strongest.p_holm < 0.001
    assert weakest.rank_biserial < 0 and weakest.p_holm < 0.001
    assert list(split.topics[0].phrases) == EFFECTS["topic_phrases"][ORDER[0]]


def test_topic_assignment_matches_cosine_similarity(
    demo_workspace, embedder, topic_hour: SegmentResult
) -> None:
    frame = demo_workspace.store.posts_frame()
    posts = demo_workspace.store.vectors(list(frame["vector_key"]))
    phrases = embedder.encode(FIRST_PHRASES)
    # Reference: scikit-learn's cosine_similarity (normalises rows itself),
    # so this also checks that the phrases and posts are on one scale.
    sims = cosine_similarity(posts, phrases)
    best = sims.argmax(axis=1)
    caught = sims.max(axis=1) >= 0.3  # the default threshold
    split = topic_hour.split("topic")
    for j, name in enumerate(FIRST_PHRASES):
        assert split.segment(name).n == int(np.sum(caught & (best == j)))
        shown = split.segment(name).examples
        assert len(shown) == 3
        # Examples are the posts most similar to the phrase, most similar first.
        top = np.sort(sims[caught & (best == j), j])[::-1][:3]
        assert [e.similarity for e in shown] == pytest.approx(top, abs=1e-4)
    assert split.segment(OTHER).n == int(np.sum(~caught))
    # "other" shows the posts that came closest to a topic and still missed.
    assert split.segment(OTHER).examples[0].similarity == pytest.approx(
        sims.max(axis=1)[~caught].max(), abs=1e-4
    )
    assert split.segment(OTHER).examples[0].similarity < 0.3


def test_top_k_mode_gives_each_topic_its_k_nearest(demo_workspace, embedder) -> None:
    k = 150
    result = segment(demo_workspace, SegmentRequest(topics=FIRST_PHRASES[:3], mode="top-k", k=k))
    split = result.split("topic")
    frame = demo_workspace.store.posts_frame()
    sims = cosine_similarity(
        demo_workspace.store.vectors(list(frame["vector_key"])), embedder.encode(FIRST_PHRASES[:3])
    )  # reference: scikit-learn
    assert split.overlapping and split.kruskal_p is None
    for j, name in enumerate(FIRST_PHRASES[:3]):
        seg = split.segment(name)
        assert seg.n == k
        # The k-th largest similarity is where the topic's posts stop.
        kth = np.sort(sims[:, j])[::-1][k - 1]
        assert min(e.similarity for e in split.segment(name).examples) >= kth - 1e-4
        assert split.segment(name).examples[0].similarity == pytest.approx(sims[:, j].max(), abs=1e-4)
    n_in_none = int(np.sum(~np.any(sims >= np.sort(sims, axis=0)[::-1][k - 1], axis=1)))
    assert split.segment(OTHER).n == n_in_none
    assert any("overlap" in w for w in result.warnings)


def test_two_way_table_adds_up_to_both_one_way_splits(topic_hour: SegmentResult, demo_workspace) -> None:
    tw = topic_hour.two_way
    assert tw is not None and (tw.row_by, tw.col_by) == ("topic", "hour")
    topic, hour = topic_hour.split("topic"), topic_hour.split("hour")
    assert tw.rows == [s.name for s in topic.segments]
    assert tw.cols == [s.name for s in hour.segments]
    assert tw.n.sum(axis=1).tolist() == [s.n for s in topic.segments]
    assert tw.n.sum(axis=0).tolist() == [s.n for s in hour.segments]
    # One cell against pandas' groupby median (reference: pandas).
    split = topic_hour.split("topic")
    cells = (
        pd.DataFrame({"t": split.labels, "h": topic_hour.split("hour").labels, "v": split.values})
        .groupby(["t", "h"])["v"]
        .median()
    )
    i, j = tw.rows.index(FIRST_PHRASES[0]), tw.cols.index("12–15")
    assert tw.median[i, j] == cells[(FIRST_PHRASES[0], "12–15")]
    assert any("cells of the topic x hour table" in w for w in topic_hour.warnings)


def test_too_small_topics_are_flagged_in_plain_words(topic_hour: SegmentResult) -> None:
    split = topic_hour.split("topic")
    small = [s for s in split.segments if s.n < 20]
    assert small, "at the default threshold some one-phrase topics catch few posts"
    for seg in small:
        assert seg.too_small
        assert seg.summary.startswith("too few posts to judge")
        assert any(f"{seg.name!r} has only {seg.n} posts" in w for w in topic_hour.warnings)
    big = split.segment(FIRST_PHRASES[-1])
    assert big.summary.startswith("lower than the rest: median ")
    assert big.summary.endswith("clearly different from the rest")
    assert "Holm p" not in big.summary  # the statistics' names are for --details


# ------------------------------------------------------------------ timing and form


def _local_hours_by_zoneinfo() -> dict[tuple[str, str], int]:
    """Local hour of each demo post from the CSV, converted with zoneinfo
    (IANA tz database) in its account's documented zone."""
    zones = {h: a["zone"] for h, a in EFFECTS["accounts"].items()}
    raw = pd.read_csv(DEMO_CSV, usecols=["post_id", "account", "posted_at"])
    return {
        (a, p): datetime.fromisoformat(t).astimezone(ZoneInfo(zones[a])).hour
        for p, a, t in zip(raw["post_id"], raw["account"], raw["posted_at"], strict=True)
    }


def test_hour_split_recovers_documented_daily_rhythm(topic_hour: SegmentResult) -> None:
    hour = topic_hour.split("hour")
    # Bucket counts match local hours computed independently with zoneinfo.
    local = np.array(list(_local_hours_by_zoneinfo().values()))
    edges = [0, 6, 9, 12, 15, 18, 21, 24]
    for seg, lo, hi in zip(hour.segments, edges[:-1], edges[1:], strict=True):
        assert seg.name == f"{lo:02d}–{hi:02d}"
        assert seg.n == int(np.sum((local >= lo) & (local < hi)))
    # The documented peak hour (effects.json best_hours) falls in 12–15.
    peak = hour.segment("12–15")
    assert EFFECTS["best_hours"][0] in range(12, 15)
    night = hour.segment("00–06")
    assert peak.median > night.median
    assert peak.median == max(s.median for s in hour.segments)
    assert peak.rank_biserial > 0 and peak.p_holm < 0.001
    assert night.rank_biserial < 0 and night.p_holm < 0.001
    # Rank agreement with the documented hour curve, averaged over each
    # bucket with the documented posting weights. Measured rho = 0.991
    # (06–09 and 21–24 tie at 982). The bound 0.9 also allows one swap of
    # 09–12 and 15–18, whose documented means differ by 0.016 only.
    # Reference: scipy.stats.spearmanr.
    curve = {int(h): v for h, v in EFFECTS["hour_effect"].items()}
    weight = {int(h): v for h, v in EFFECTS["posting_hour_weight"].items()}
    documented = [
        np.average([curve[h] for h in range(lo, hi)], weights=[weight[h] for h in range(lo, hi)])
        for lo, hi in itertools.pairwise(edges)
    ]
    rho = stats.spearmanr([s.median for s in hour.segments], documented).statistic
    assert rho >= 0.9, rho


@pytest.mark.parametrize(
    ("by", "with_name", "without_name", "effect_key"),
    [("link", "with link", "no link", "link"), ("media", "with media", "no media", "media")],
)
def test_form_split_recovers_documented_effect(
    demo_workspace, link_split: SegmentResult, by: str, with_name: str, without_name: str, effect_key: str
) -> None:
    result = link_split if by == "link" else segment(demo_workspace, SegmentRequest(by=by))
    rep = result.split(by)
    yes, no = rep.segment(with_name), rep.segment(without_name)
    effect = EFFECTS[effect_key]  # documented log effect: link -0.35, media +0.2
    assert (yes.median < no.median) == (effect < 0)
    assert yes.p_holm < 1e-6
    assert np.sign(yes.rank_biserial) == np.sign(effect)
    # Two segments that split the posts: each one's r is the other's negated.
    assert yes.rank_biserial == pytest.approx(-no.rank_biserial)
    # The generator draws links and media independently of everything else,
    # so log(median with / median without) estimates the documented effect.
    # Tolerance: 4 standard errors of a difference of two medians, the
    # median's standard error taken as sqrt(pi/2) * sd / sqrt(n) (asymptotic
    # result for normal data; from memory).
    values = result.split(by).values
    sd = float(np.std(np.log(values)))
    se = math.sqrt(math.pi / 2) * sd * math.sqrt(1 / yes.n + 1 / no.n)
    measured = math.log(yes.median / no.median)
    assert abs(measured - effect) < 4 * se, (measured, effect, se)


def test_custom_hour_edges(demo_workspace) -> None:
    result = segment(demo_workspace, SegmentRequest(by="hour", hour_edges=[0, 12, 24], n_resamples=200))
    rep = result.split("hour")
    local = np.array(list(_local_hours_by_zoneinfo().values()))  # reference: zoneinfo
    assert [s.name for s in rep.segments] == ["00–12", "12–24"]
    assert [s.n for s in rep.segments] == [int(np.sum(local < 12)), int(np.sum(local >= 12))]


def test_young_posts_are_left_out(demo_workspace) -> None:
    raw = pd.read_csv(DEMO_CSV, usecols=["posted_at"])
    times = [datetime.fromisoformat(t) for t in raw["posted_at"]]  # ISO 8601 with offsets
    now = max(times) + timedelta(hours=1)
    hours = demo_workspace.settings.maturity_hours
    young = sum(t > now - timedelta(hours=hours) for t in times)
    assert young > 0
    result = segment(demo_workspace, SegmentRequest(by="media", n_resamples=200), now=now)
    assert result.left_out.still_gathering == young
    assert result.n_posts == len(times) - young
    assert any("younger than" in w for w in result.warnings)


# ------------------------------------------------------------------ bad input


@pytest.mark.parametrize(
    ("req", "message"),
    [
        (SegmentRequest(), "nothing to split"),
        (SegmentRequest(topics=["flowers", "  "]), "topic 2 is an empty phrase"),
        (SegmentRequest(topics=[" | "]), "empty phrase"),
        (SegmentRequest(topics=["Other |"]), "name of the posts no topic catches"),
        (SegmentRequest(topics=["other"]), "name of the posts no topic catches"),
        (SegmentRequest(by="hour", metric="reach"), "unknown metric 'reach'"),
        (SegmentRequest(by="colour"), "cannot split by 'colour'"),
        (SegmentRequest(by="hour", hour_edges=[0, 6, 25]), "must start at 0 and end at 24"),
        (SegmentRequest(by="hour", hour_edges=[0, 12, 12, 24]), "given twice"),
        (SegmentRequest(by="length", length_edges=[10, 80]), "one of them 0"),
        (SegmentRequest(topics=["flowers"], mode="closest"), "unknown mode"),
        (SegmentRequest(topics=["flowers"], threshold=1.5), "threshold"),
        (SegmentRequest(topics=["flowers"], mode="top-k", k=0), "k must be"),
    ],
)
def test_bad_input_is_refused_clearly(demo_workspace, req: SegmentRequest, message: str) -> None:
    with pytest.raises(InputError, match=message):
        segment(demo_workspace, req)


def test_a_split_the_history_cannot_make_is_not_ready_rather_than_bad_input(demo_workspace) -> None:
    # The same request splits a history of several accounts; this one has one.
    with pytest.raises(NotReady, match="every post falls in one account"):
        segment(demo_workspace, SegmentRequest(by="account", account="loomhaven"))


def test_unknown_account_is_not_found(demo_workspace) -> None:
    with pytest.raises(NotFound, match="unknown account 'nobody'"):
        segment(demo_workspace, SegmentRequest(by="hour", account="nobody"))


@pytest.fixture()
def small_workspace(make_workspace, tmp_path: Path):
    """30 demo posts, 18 of them without impressions: 12 have the metric."""
    rows = pd.read_csv(DEMO_CSV, nrows=30)
    rows.loc[12:, "impressions"] = np.nan
    path = tmp_path / "few.csv"
    rows.to_csv(path, index=False)
    ws = make_workspace("few")
    ws.import_csv(path, ImportOptions(new_accounts="UTC"))
    return ws


def test_too_few_posts_is_not_ready_library_and_http(small_workspace) -> None:
    with pytest.raises(NotReady, match="only 12 posts have impressions; segments need at least 20"):
        segment(small_workspace, SegmentRequest(by="link"))
    with TestClient(create_app(workspace=small_workspace)) as client:
        r = client.post("/v1/segments", json={"by": "link"})
    assert r.status_code == 409
    assert r.json()["error"]["code"] == "not_ready"


# ------------------------------------------------------------------ HTTP


@pytest.fixture(scope="module")
def client(demo_workspace):
    with TestClient(create_app(workspace=demo_workspace)) as c:
        yield c


_STATS = (
    "name",
    "n",
    "median",
    "q1",
    "q3",
    "ci_low",
    "ci_high",
    "u_statistic",
    "p_value",
    "p_holm",
    "rank_biserial",
    "too_small",
    "rest_median",
    "summary",
)


def test_http_returns_the_library_statistics(client, demo_workspace) -> None:
    body = {"topics": FIRST_PHRASES[:3], "by": "link"}
    r = client.post("/v1/segments", json=body)
    assert r.status_code == 200, r.text
    assert r.headers["content-type"].startswith("application/json")
    got = r.json()
    want = segment(demo_workspace, SegmentRequest(topics=FIRST_PHRASES[:3], by="link")).model_dump(
        mode="json"
    )
    assert [s["by"] for s in got["splits"]] == ["topic", "link"]
    for g, w in zip(got["splits"], want["splits"], strict=True):
        assert g["kruskal_p"] == pytest.approx(w["kruskal_p"])
        for gs, ws_ in zip(g["segments"], w["segments"], strict=True):
            assert {k: gs[k] for k in _STATS} == pytest.approx({k: ws_[k] for k in _STATS})
    assert got["two_way"]["cells"] == want["two_way"]["cells"]
    assert got["warnings"] == want["warnings"]
    ex = got["splits"][0]["segments"][0]["examples"][0]
    assert ex["text"] == want["splits"][0]["segments"][0]["examples"][0]["text"]


def test_http_answers_png_and_svg(client) -> None:
    r = client.post("/v1/segments", json={"by": "link", "format": "png"})
    assert r.status_code == 200
    assert r.headers["content-type"] == "image/png"
    assert r.content.startswith(PNG_SIGNATURE)
    r = client.post("/v1/segments", json={"by": "weekday", "format": "svg", "plot": "weekday"})
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("image/svg+xml")
    root = ElementTree.fromstring(r.content)  # well-formed XML
    assert root.tag == f"{SVG_NS}svg"
    # SVG text stays text: the weekday labels are in the file.
    assert all(day in r.text for day in ("Mon", "Sun"))
    spec = client.get("/openapi.json").json()
    content = spec["paths"]["/v1/segments"]["post"]["responses"]["200"]["content"]
    assert {"application/json", "image/png", "image/svg+xml"} <= set(content)


@pytest.mark.parametrize(
    ("body", "status", "where"),
    [
        ({}, 422, "nothing to split"),
        ({"topics": [""]}, 422, "at least 1 character"),
        ({"topics": ["  "]}, 422, "empty phrase"),
        ({"by": "hour", "metric": "reach"}, 422, "unknown metric"),
        ({"by": "colour"}, 422, "by"),
        ({"by": "hour", "hour_edges": [0, 6, 12]}, 422, "must start at 0 and end at 24"),
        ({"by": "hour", "hour_edges": [0, 6, 25]}, 422, "less than or equal to 24"),
        ({"by": "hour", "hour_edges": [0, 6, 6, 24]}, 422, "given twice"),
        ({"by": "hour", "format": "gif"}, 422, "format"),
        ({"by": "hour", "plot": "weekday"}, 422, "no 'weekday' split"),
        ({"by": "hour", "account": "nobody"}, 404, "unknown account"),
    ],
)
def test_http_bad_input(client, body: dict, status: int, where: str) -> None:
    r = client.post("/v1/segments", json=body)
    assert r.status_code == status, r.text
    assert where in r.json()["error"]["message"]


# ------------------------------------------------------------------ CLI and figure


def test_cli_json_table_and_plot(
    demo_home: Path, embedder, topic_hour: SegmentResult, tmp_path: Path
) -> None:
    use_embedder(embedder)
    runner = CliRunner()
    env = {"SOUNDING_HOME": str(demo_home)}
    topics = [a for p in FIRST_PHRASES for a in ("--topic", p)]
    r = runner.invoke(cli_app, ["segments", *topics, "--by", "hour", "--json"], env=env)
    assert r.exit_code == 0, r.output
    got = json.loads(r.stdout)  # stdout is JSON only; figure notes go to stderr
    want = topic_hour.model_dump(mode="json")
    for g, w in zip(got["splits"], want["splits"], strict=True):
        assert [{k: s[k] for k in _STATS} for s in g["segments"]] == [
            {k: s[k] for k in _STATS} for s in w["segments"]
        ]
    assert got["two_way"] == want["two_way"]
    assert got == want  # one shape: the CLI prints the answer the API sends

    fig = tmp_path / "seg.png"
    r = runner.invoke(
        cli_app, ["segments", "--topic", FIRST_PHRASES[1], "--by", "link", "--plot", str(fig)], env=env
    )
    assert r.exit_code == 0, r.output
    text = " ".join(r.stdout.split())  # the table may wrap at the runner's width
    assert "with link: lower than the rest: median" in text
    assert "clearly different from the rest" in text and "Holm p" not in text
    # --details names the statistics.
    r = runner.invoke(
        cli_app, ["segments", "--topic", FIRST_PHRASES[1], "--by", "link", "--details"], env=env
    )
    assert r.exit_code == 0, r.output
    assert "Holm p < 0.001" in " ".join(r.stdout.split())
    assert f"warning: topic '{FIRST_PHRASES[1]}' has only" in text
    assert fig.read_bytes().startswith(PNG_SIGNATURE)
    assert (tmp_path / "seg-link.png").read_bytes().startswith(PNG_SIGNATURE)

    for args, message in [
        ([], "nothing to split"),
        (["--by", "colour"], "cannot split by 'colour'"),
        (["--by", "hour", "--hour-edges", "0,6,x,24"], "--hour-edges must be whole numbers"),
        (["--by", "hour", "--metric", "reach"], "unknown metric 'reach'"),
        (["--by", "hour", "--plot", str(tmp_path / "x.gif")], "--plot must end in .png"),
    ]:
        r = runner.invoke(cli_app, ["segments", *args], env=env)
        assert r.exit_code == 1, (args, r.output)
        assert message in r.output and "Traceback" not in r.output


def test_demo_figure_renders(topic_hour: SegmentResult, artifacts: Path) -> None:
    png = render(topic_hour)  # the topic split
    assert png.startswith(PNG_SIGNATURE)
    (artifacts / "segments_topic.png").write_bytes(png)
    with pytest.raises(InputError, match="no 'weekday' split"):
        render(topic_hour, by="weekday")
