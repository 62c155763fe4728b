"""One word for each idea: the words people see (CLI help, the page, the API's
field names and the caution sentence) never use a retired word."""

from __future__ import annotations

import re
from pathlib import Path

from typer.testing import CliRunner

from service.api.app import create_app
from service.cli import app
from service.forecast.answer import CAUTION
from service.settings import Settings
from service.workspace import Workspace

STATIC = Path(__file__).resolve().parents[1] / "service" / "static"

# Retired words and the word that replaced each.
RETIRED = {
    r"\bmiddle\b": "median (one word for the middle estimate)",
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
