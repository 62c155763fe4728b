"""Words, not Python types, for the values options take in --help.

Typer writes an option's value as its annotation (``<str>``, ``<list[str]>``,
``<int range>``). People read ``--account HANDLE`` and ``--at TIME`` more
easily, so every option and argument left without a metavar gets a word:
by its name where the name says what goes in, else by its type.
"""

from __future__ import annotations

import inspect
import typing
from pathlib import Path
from typing import Any

import typer
from typer.core import TyperCommand
from typer.models import ArgumentInfo, OptionInfo

if typing.TYPE_CHECKING:
    from typer._click.core import Context as ClickContext
    from typer._click.formatting import HelpFormatter

#: By the parameter's name: what the value is.
BY_NAME = {
    "account": "HANDLE",
    "handle": "HANDLE",
    "at": "TIME",
    "since": "TIME",
    "until": "TIME",
    "day": "DAY",
    "metric": "METRIC",
    "topic": "PHRASE",
    "timezone": "ZONE",
    "text": "TEXT",
    "texts": "TEXT...",
    "name": "NAME",
    "host": "HOST",
    "port": "PORT",
    "url": "URL",
    "mode": "MODE",
    "by": "SPLIT",
    "home": "DIR",
    "time_format": "PATTERN",
    "hour_edges": "EDGES",
    "length_edges": "EDGES",
}

#: Else by the annotation.
BY_TYPE: dict[Any, str] = {str: "TEXT", int: "N", float: "N", Path: "FILE"}


def _word(name: str, annotation: Any) -> str | None:
    if name in BY_NAME:
        return BY_NAME[name]
    args = [a for a in typing.get_args(annotation) if a is not type(None)]
    if typing.get_origin(annotation) is list and args:
        inner = BY_TYPE.get(args[0])
        return None if inner is None else inner
    if args and typing.get_origin(annotation) is not list:  # X | None
        annotation = args[0]
        if typing.get_origin(annotation) is list:
            inner_args = typing.get_args(annotation)
            return BY_TYPE.get(inner_args[0]) if inner_args else None
    return BY_TYPE.get(annotation)


class WordCommand(TyperCommand):
    """A command whose --help names each argument by its word alone (typer
    appends the argument's Python type to its name, e.g. ``TEXT <str>``)."""

    def format_options(self, ctx: ClickContext, formatter: HelpFormatter) -> None:
        args, opts = [], []
        for param in self.get_params(ctx):
            record = param.get_help_record(ctx)
            if record is None:
                continue
            if param.param_type_name == "argument":
                args.append((param.metavar or record[0], record[1]))
            elif param.param_type_name == "option":
                opts.append(record)
        if args:
            with formatter.section("Arguments"):
                formatter.write_dl(args)
        if opts:
            with formatter.section("Options"):
                formatter.write_dl(opts)


def name_values(app: typer.Typer) -> None:
    """Give every option and argument of ``app`` (and its groups) a word
    metavar where it has none. Flags (bool) take no value and are left alone."""
    commands = [c.callback for c in app.registered_commands]
    if app.registered_callback is not None:  # the root's own options (--home)
        commands.append(app.registered_callback.callback)
    for c in app.registered_commands:
        if c.cls in (None, TyperCommand):
            c.cls = WordCommand
    for group in app.registered_groups:
        if group.typer_instance is not None:
            name_values(group.typer_instance)
    for callback in commands:
        if callback is None:
            continue
        hints = typing.get_type_hints(callback)
        for name, param in inspect.signature(callback).parameters.items():
            info = param.default
            if not isinstance(info, (OptionInfo, ArgumentInfo)) or info.metavar is not None:
                continue
            annotation = hints.get(name)
            if annotation is bool or annotation == (bool | None):
                continue
            word = _word(name, annotation)
            if word is not None:
                info.metavar = word
