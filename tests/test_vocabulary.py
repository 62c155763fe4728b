"""One word for each idea: the words people see (CLI help, the page, the API's
field names and the caution sentence) never use a retired word."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest
from typer.testing import CliRunner

from service.api.app import create_app
from service.cli import app
from service.cli.base import out, use_embedder
from service.forecast.answer import CAUTION
from service.settings import Settings
from service.workspace import Workspace

STATIC = Path(__file__).resolve().parents[1] / "service" / "static"

# Retired words and the word that replaced each.
RETIRED = {
    r"\bmiddle\b(?! half of posts)": "median (one word for the middle estimate)",
    r"\bmiddles\b": "median",
    r"\byoung\b": "still gathering (metrics not final yet)",
    r"\bmature\b": "still gathering",
    r"like[ _]best": "tied with the best",
    r"share of posts": "fraction of posts (share reads as a metric)",
    r"\bsim\b": "similarity",
    r"\bqueue\b": "plan",
    r"--min-n\b": "--min-posts",
    r"(?<![-\w])--k\b": "--count / -k",
}


def cli_help() -> str:
    runner = CliRunner()
    top = runner.invoke(app, ["--help"]).output
    texts = [top]
    block = top.split("Commands:", 1)[1]
    for line in block.splitlines():
        if line.startswith("  ") and line.strip():
            name = line.split()[0]
            texts.append(runner.invoke(app, [name, "--help"]).output)
            sub = runner.invoke(app, [name, "--help"]).output
            if "Commands:" in sub:  # a command group: its commands too
                for s in sub.split("Commands:", 1)[1].splitlines():
                    if s.startswith("  ") and s.strip():
                        texts.append(runner.invoke(app, [name, s.split()[0], "--help"]).output)
    return "\n".join(texts)


def page_text() -> str:
    html = "\n".join(p.read_text() for p in STATIC.glob("*.html"))
    shown = re.sub(r"<[^>]+>", " ", html)  # text, not tags and attributes
    js = "\n".join(
        line for p in STATIC.glob("*.js") for line in p.read_text().splitlines() if "text-anchor" not in line
    )  # an SVG attribute value, not a word shown
    strings = re.findall(r'"([^"\n]*)"|`([^`]*)`', js)
    return shown + "\n" + "\n".join(a or b for a, b in strings)


def api_names(tmp_path: Path, embedder) -> str:
    ws = Workspace(settings=Settings(home=tmp_path / "home"), embedder=embedder)
    schema = create_app(workspace=ws).openapi()
    ws.close()
    names: list[str] = []
    for comp in schema["components"]["schemas"].values():
        names += list(comp.get("properties", {}))
    return "\n".join(names)


def test_no_retired_word_anywhere_people_look(tmp_path: Path, embedder) -> None:
    places = {
        "CLI help": cli_help(),
        "page": page_text(),
        "API field names": api_names(tmp_path, embedder),
        "caution": CAUTION,
    }
    found = []
    for where, text in places.items():
        for pattern, instead in RETIRED.items():
            for m in re.finditer(pattern, text, flags=re.IGNORECASE):
                found.append(f"{where}: {m.group(0)!r} (use {instead})")
    assert not found, "\n".join(sorted(set(found)))


def test_the_caution_names_no_field(tmp_path: Path, embedder) -> None:
    fields = set(api_names(tmp_path, embedder).split())
    named = [f for f in fields if "_" in f and f in CAUTION]
    assert not named, named
    assert "estimate" in CAUTION and "not a certainty" in CAUTION


# ---------------------------------------------------------------- default screens
#
# The statisticians' names, retired from every default screen: they stay in --json,
# --details, the page's expandable "statistics behind this" line and the README glossary.
STATISTICS = {
    r"\bMAE\b": "typical miss ×1.47",
    r"\bSpearman\b": "ranks posts in the right order (0–1)",
    r"\bfolds?\b": "past tries, in time order",
    r"\bnominal\b": "an N% interval",
    r"\bstated coverage\b": "an N% interval",
    r"\blive coverage\b": "held in N% of ...",
    r"cqr\+aci|\bcalibration: cqr": "(--details)",
    r"\balpha_t\b": "(--details)",
    r"pseudo-outcomes?": "older posts forecast as they would have been",
    r"\bHolm\b": "clearly different from the rest / could be chance",
    r"\br = |\br\s{2,}Holm": "clearly different from the rest / could be chance",
    r"Kruskal|\bH = ": "clearly different from each other / could be chance",
    r"central half": "middle half of posts",
    r"boosted trees": "precedents + timing",
    r"text model": "text alone",
    r"\bcosine\b": "how close in meaning",
    r"\bwordings?\b|\bvariants?\b|\bphrasings?\b": "compare / version",
    r"middle estimate": "median",
    r"before you publish": "before posting",
    r"\bmin_n\b": "--min-posts",
    r"\b1 (account|outcome|post|hour)s\b": "the singular",
}

DRAFT = "The magnolias along the Long Border are opening this week. Come for a slow walk."
SCREENS = [
    [],
    ["accounts"],
    ["precedents", DRAFT, "-k", "5"],
    ["check", DRAFT, "--account", "loomhaven", "--at", "2026-12-03T12:00"],
    ["hours", DRAFT, "--account", "loomhaven", "--day", "2026-12-03"],
    ["hours", DRAFT, "--account", "loomhaven_lab", "--day", "2026-12-03", "--week"],
    ["compare", "--account", "loomhaven", "--at", "2026-12-03T12:00", DRAFT, "Magnolia week: come and see"],
    ["segments", "--by", "link"],
    ["segments", "--topic", "flowers in bloom", "--topic", "volunteering", "--by", "hour"],
    ["track-record"],
    ["check", DRAFT, "--accounts", "all", "--at", "2026-12-03T12:00"],
    ["accounts", "--details"],
]


def _retired_in(text: str, words: dict[str, str]) -> list[str]:
    return sorted(
        {
            f"{m.group(0)!r} (use {instead})"
            for p, instead in words.items()
            for m in re.finditer(p, text, re.I)
        }
    )


@pytest.fixture()
def demo_screens(demo_home: Path, tmp_path: Path, embedder, monkeypatch: pytest.MonkeyPatch) -> Path:
    home = tmp_path / "home"
    shutil.copytree(demo_home, home)  # check records a forecast: a private copy
    monkeypatch.setenv("SOUNDING_HOME", str(home))
    monkeypatch.setenv("COLUMNS", "80")
    use_embedder(embedder)
    return home


def _screen(args: list[str]) -> str:
    res = CliRunner().invoke(app, args)
    assert res.exit_code == 0, (args, res.output)
    return res.output


def test_default_screens_use_plain_words(demo_screens: Path, embedder) -> None:
    found = []
    for args in SCREENS:
        found += [f"{' '.join(args[:1]) or 'sounding'}: {w}" for w in _retired_in(_screen(args), STATISTICS)]
    # backtest (and train) print the model's own backtest report.
    from io import StringIO

    from rich.console import Console

    from service.cli import forecast as forecast_cli

    ws = Workspace(settings=Settings(home=demo_screens), embedder=embedder)
    report = ws.forecaster.model("impressions").report["backtest"]
    ws.close()
    for details in (False, True):
        buf = StringIO()
        forecast_cli.out = Console(file=buf, width=80, soft_wrap=True)
        try:
            forecast_cli.print_backtest(report, "impressions", details=details)
        finally:
            forecast_cli.out = out
        text = buf.getvalue()
        if details:  # the names are there for those who ask
            assert "MAE (log)" in text and "Spearman" in text and "folds" in text
        else:
            found += [f"backtest: {w}" for w in _retired_in(text, STATISTICS)]
            assert "typical miss" in text and "ranks posts in the right order (0–1" in text
    assert not found, "\n".join(found)


def test_details_show_the_statistics_by_name(demo_screens: Path) -> None:
    seg = _screen(["segments", "--by", "link", "--details"])
    assert "Holm p" in seg and "Kruskal–Wallis H" in seg
    _screen(["check", DRAFT, "--account", "loomhaven", "--at", "2026-12-03T12:00"])
    assert "alpha_t" in _screen(
        ["check", DRAFT, "--account", "loomhaven", "--at", "2026-12-03T13:00", "--details"]
    )
    track = _screen(["track-record", "--details"])
    assert "stated" in track and "live" in track


def default_page_text() -> str:
    """What the page shows before anyone opens a "statistics behind this" line."""
    html = "\n".join(p.read_text() for p in STATIC.glob("*.html"))
    html = re.sub(r"<details.*?</details>", " ", html, flags=re.S)
    shown = re.sub(r"<[^>]+>", " ", html)
    js = "\n".join(
        re.sub(r"// statistics: begin.*?// statistics: end", " ", p.read_text(), flags=re.S)
        for p in STATIC.glob("*.js")
    )
    js = "\n".join(line for line in js.splitlines() if "text-anchor" not in line)
    strings = [a or b for a, b in re.findall(r'"([^"\n]*)"|`([^`]*)`', js)]
    ids = re.compile(r"[a-z0-9]+(-[a-z0-9]+)+")  # element ids such as "wordings-panel", not words shown
    return shown + "\n" + "\n".join(t for t in strings if not ids.fullmatch(t))


def test_the_page_uses_plain_words_until_asked() -> None:
    found = _retired_in(default_page_text(), STATISTICS)
    assert not found, "\n".join(found)
    # The statistics are still there, one click away.
    assert "Holm" in page_text() and "alpha_t" in page_text()
