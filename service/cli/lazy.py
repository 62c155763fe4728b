"""Commands registered without importing their implementation.

``sounding --help`` used to import every command module, and through them
pandas, LightGBM, matplotlib and the web app, to print a list of names. Here
the list of commands, with their one-line help, is read from the command
modules' source (their ``@app.command`` decorators and docstrings) without
running it; a command's module is imported only when that command is looked
up, which click does only to run it or to print its own help.

The source is the one place a command is declared, so there is no second list
to keep in step; tests/test_cli_imports.py checks that what is read here is
what typer registers.
"""

from __future__ import annotations

import ast
import importlib
import inspect
from collections.abc import Iterator, MutableMapping
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer.main
from typer._click import Command, HelpFormatter
from typer._click.utils import make_default_short_help

from service.cli import warmup
from service.cli.base import ErrorsAsMessages, app, embedder_in_use, use_preload
from service.cli.metavars import name_values

if TYPE_CHECKING:
    from typer._click.core import Context as ClickContext

#: The command modules, in the order their commands appear in --help.
COMMAND_MODULES = (
    "history",
    "mappings",
    "forecast",
    "review",
    "segments",
    "analyst",
    "admin",
    "restore",
    "model_export",
    "track",
)


@dataclass(frozen=True, slots=True)
class Entry:
    """One top-level command (or command group) as its source declares it."""

    name: str
    module: str
    help: str
    hidden: bool = False


def _const(node: ast.expr | None) -> Any:
    return node.value if isinstance(node, ast.Constant) else None


def _kwargs(call: ast.Call) -> dict[str, Any]:
    return {k.arg: _const(k.value) for k in call.keywords if k.arg}


def _is_app_call(node: ast.expr, attr: str) -> bool:
    """``app.<attr>(...)``: a call on the root app (not on a sub-app)."""
    return (
        isinstance(node, ast.Call)
        and isinstance(node.func, ast.Attribute)
        and node.func.attr == attr
        and isinstance(node.func.value, ast.Name)
        and node.func.value.id == "app"
    )


def _entries(module: str) -> list[Entry]:
    source = (Path(__file__).parent / f"{module}.py").read_text(encoding="utf-8")
    tree = ast.parse(source)
    typers: dict[str, dict[str, Any]] = {}  # sub-app variable -> typer.Typer(...) keywords
    found: list[Entry] = []
    for node in tree.body:
        if isinstance(node, ast.Assign) and isinstance(node.value, ast.Call):
            func = node.value.func
            if isinstance(func, ast.Attribute) and func.attr == "Typer":
                for target in node.targets:
                    if isinstance(target, ast.Name):
                        typers[target.id] = _kwargs(node.value)
        elif isinstance(node, ast.Expr) and _is_app_call(node.value, "add_typer"):
            call = node.value
            assert isinstance(call, ast.Call)
            kw = _kwargs(call)
            sub = call.args[0].id if call.args and isinstance(call.args[0], ast.Name) else ""
            info = {**typers.get(sub, {}), **{k: v for k, v in kw.items() if v is not None}}
            found.append(
                Entry(kw["name"], module, inspect.cleandoc(info.get("help") or ""), bool(info.get("hidden")))
            )
        elif isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            for deco in node.decorator_list:
                if not _is_app_call(deco, "command"):
                    continue
                assert isinstance(deco, ast.Call)
                kw = _kwargs(deco)
                name = _const(deco.args[0]) if deco.args else kw.get("name")
                name = name or typer.main.get_command_name(node.name)
                doc = kw.get("help") or ast.get_docstring(node) or ""
                found.append(Entry(name, module, inspect.cleandoc(doc), bool(kw.get("hidden"))))
    return found


@cache
def catalogue() -> dict[str, Entry]:
    """Every top-level command by name, in --help order, read from source."""
    return {e.name: e for m in COMMAND_MODULES for e in _entries(m)}


def build(name: str) -> Command | None:
    """Import the module that declares ``name`` and build its click command."""
    entry = catalogue().get(name)
    if entry is None:
        return None
    importlib.import_module(f"{__package__}.{entry.module}")
    name_values(app)  # --account HANDLE, not --account <str>
    for info in app.registered_commands:
        assert info.callback is not None
        if (info.name or typer.main.get_command_name(info.callback.__name__)) == name:
            return typer.main.get_command_from_info(
                info,
                pretty_exceptions_short=app.pretty_exceptions_short,
                rich_markup_mode=app.rich_markup_mode,
            )
    for group in app.registered_groups:
        if group.name == name:
            return typer.main.get_group_from_info(
                group,
                pretty_exceptions_short=app.pretty_exceptions_short,
                rich_markup_mode=app.rich_markup_mode,
                suggest_commands=app.suggest_commands,
            )
    return None


class LazyCommands(MutableMapping[str, Command]):
    """The root group's commands: every name is known from the start, each
    command is built the first time it is looked up."""

    def __init__(self, built: MutableMapping[str, Command]) -> None:
        self._built: dict[str, Command] = dict(built)

    def _names(self) -> list[str]:
        names = list(catalogue())
        return names + [n for n in self._built if n not in catalogue()]

    def __getitem__(self, name: str) -> Command:
        if name not in self._built:
            cmd = build(name)
            if cmd is None:
                raise KeyError(name)
            self._built[name] = cmd
        return self._built[name]

    def __setitem__(self, name: str, cmd: Command) -> None:
        self._built[name] = cmd

    def __delitem__(self, name: str) -> None:
        del self._built[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._names())

    def __len__(self) -> int:
        return len(self._names())

    def __contains__(self, name: object) -> bool:
        return name in self._built or name in catalogue()


class LazyGroup(ErrorsAsMessages):
    """The root group: lists commands from the catalogue, builds one on use."""

    def __init__(self, **attrs: Any) -> None:
        super().__init__(**attrs)
        self.commands = LazyCommands(self.commands)

    def list_commands(self, ctx: ClickContext) -> list[str]:
        return list(self.commands)

    def invoke(self, ctx: ClickContext) -> Any:
        # Before the command's module is imported: see service/cli/warmup.py.
        # A process that already holds an embedder (the test suite's) keeps it.
        command = ctx._protected_args[:1]
        if command and not embedder_in_use() and warmup.wanted(command[0], ctx.args):
            home = ctx.params.get("home")
            loading = warmup.start(None if home is None else str(home))
            if loading is not None:
                use_preload(loading)
        return super().invoke(ctx)

    def format_commands(self, ctx: ClickContext, formatter: HelpFormatter) -> None:
        """The commands with their one-line help, from the catalogue: no
        command module is imported to print them."""
        listed = [e for e in catalogue().values() if not e.hidden]
        if not listed:
            return
        limit = formatter.width - 6 - max(len(e.name) for e in listed)
        rows = [(e.name, _short_help(e, limit)) for e in listed]
        with formatter.section("Commands"):
            formatter.write_dl(rows)


def _short_help(entry: Entry, limit: int) -> str:
    # The text click's own listing shows (Command.get_short_help_str).
    return make_default_short_help(entry.help, limit)
