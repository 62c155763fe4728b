"""DEVELOPERS.md's layout matches the tree: every path the block names exists,
and every module of service/ and models/ is named in it."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
NAME = re.compile(r"^[\w.-]+(/|\.\w+)$")


def layout_paths() -> set[Path]:
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    block = text.split("## Layout", 1)[1].split("```", 2)[1]
    stack: list[tuple[int, str]] = []  # (indent, folder)
    named: set[Path] = set()
    for line in block.splitlines():
        if not line.strip():
            continue
        indent = len(line) - len(line.lstrip(" "))
        words = re.split(r"\s{2,}", line.strip())
        tokens = line.split()
        if all(NAME.match(t) for t in tokens) and len(tokens) > 1:
            names = tokens  # a row of files in one folder
        elif NAME.match(words[0]):
            names = [words[0]]
        else:
            continue  # a description's second line
        while stack and stack[-1][0] >= indent:
            stack.pop()
        base = Path(*[f for _, f in stack]) if stack else Path()
        for name in names:
            named.add(base / name.rstrip("/"))
        if len(names) == 1 and names[0].endswith("/"):
            stack.append((indent, names[0].rstrip("/")))
    return named


def test_every_path_named_exists() -> None:
    missing = sorted(str(p) for p in layout_paths() if not (ROOT / p).exists())
    assert not missing, f"DEVELOPERS.md names paths that do not exist: {missing}"


def test_every_module_is_named() -> None:
    named = layout_paths()
    modules = {
        p.relative_to(ROOT)
        for top in ("service", "models")
        for p in (ROOT / top).rglob("*.py")
        if p.name != "__init__.py" or p.parent.name == "cli"
    }
    unnamed = sorted(str(p) for p in modules - named)
    assert not unnamed, f"modules missing from DEVELOPERS.md's layout: {unnamed}"


def test_the_walk_reads_nesting() -> None:
    # The parser itself: a nested file, a row of files, and a folder are all found.
    named = layout_paths()
    assert Path("service/api/routers/forecasts.py") in named
    assert Path("service/static/check.js") in named
    assert Path("service/storage") in named
