"""Saved import mappings: a team's own way of reading one kind of export.

A mapping is the :class:`~service.ingest.importer.ImportOptions` of an import
(column names, account, zone, time layout, decimal comma), kept as a small
TOML file ``mappings/NAME.toml`` in the data directory, so the next export
of the same shape imports with ``--mapping NAME``. There are no built-in
mappings: each one is written by the team for its own exports. The file
looks like::

    account = "loomhaven"
    labels = ["Campaign"]

    [columns]
    text = "Post body"
    posted_at = "Published"

    [times]
    format = "%d/%m/%Y %H:%M"
    timezone = "Europe/London"

    [numbers]
    decimal_comma = false
"""

from __future__ import annotations

import os
import re
import tempfile
import tomllib
from dataclasses import replace
from pathlib import Path
from typing import Any

import tomli_w

from models.errors import InputError, NotFound
from service.ingest.options import ImportOptions

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
_KEYS = {"account", "columns", "times", "numbers", "labels"}
_TIME_KEYS = {"format", "date_order", "timezone"}
_NUMBER_KEYS = {"decimal_comma"}


def mappings_dir(home: Path) -> Path:
    return home / "mappings"


def check_name(name: str) -> str:
    if not _NAME.match(name) or name.endswith(".toml"):
        raise InputError(
            f"mapping name {name!r} must be letters, digits, '.', '_' or '-' (up to 64), "
            "starting with a letter or digit",
            field="name",
            value=name,
        )
    return name


def to_toml(options: ImportOptions) -> str:
    data: dict[str, Any] = {}
    if options.account:
        data["account"] = options.account
    if options.labels:
        data["labels"] = list(options.labels)
    data["columns"] = dict(options.mapping)
    times = {
        k: v
        for k, v in (
            ("format", options.time_format),
            ("date_order", options.date_order),
            ("timezone", options.timezone),
        )
        if v
    }
    if times:
        data["times"] = times
    data["numbers"] = {"decimal_comma": options.decimal_comma}
    return tomli_w.dumps(data)


def from_toml(text: str, *, where: str) -> ImportOptions:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"the mapping file is not valid TOML: {exc}", where=where) from None
    unknown = set(data) - _KEYS
    times, numbers, columns = data.get("times", {}), data.get("numbers", {}), data.get("columns", {})
    if not all(isinstance(t, dict) for t in (times, numbers, columns)):
        raise InputError("columns, times and numbers must be tables", where=where)
    unknown |= {f"times.{k}" for k in set(times) - _TIME_KEYS}
    unknown |= {f"numbers.{k}" for k in set(numbers) - _NUMBER_KEYS}
    if unknown:
        raise InputError(f"unknown keys in the mapping file: {', '.join(sorted(unknown))}", where=where)
    values = [
        data.get("account"),
        times.get("format"),
        times.get("date_order"),
        times.get("timezone"),
        *columns.values(),
    ]
    if not all(v is None or isinstance(v, str) for v in values) or not isinstance(
        numbers.get("decimal_comma", False), bool
    ):
        raise InputError("mapping values must be strings (decimal_comma true or false)", where=where)
    labels = data.get("labels", [])
    if not isinstance(labels, list) or not all(isinstance(v, str) for v in labels):
        raise InputError('labels must be a list of column names, e.g. labels = ["Campaign"]', where=where)
    return ImportOptions(
        mapping=dict(columns),
        account=data.get("account"),
        timezone=times.get("timezone"),
        time_format=times.get("format"),
        date_order=times.get("date_order"),
        decimal_comma=numbers.get("decimal_comma", False),
        labels=tuple(labels),
    ).check()


def save_mapping(home: Path, name: str, options: ImportOptions, *, replace: bool = False) -> Path:
    """Write ``options`` as mapping ``name``; the file appears whole or not at all."""
    check_name(name)
    options.check()
    folder = mappings_dir(home)
    path = folder / f"{name}.toml"
    if path.exists() and not replace:
        raise InputError(
            f"a mapping named {name!r} already exists",
            field="name",
            value=name,
            hint="give --replace to overwrite it",
        )
    folder.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".toml", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(f"# sounding import mapping {name!r}\n")
            f.write(to_toml(options))
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def load_mapping(home: Path, name: str) -> ImportOptions:
    check_name(name)
    path = mappings_dir(home) / f"{name}.toml"
    if not path.is_file():
        known = list_mappings(home)
        raise NotFound(
            f"no saved mapping {name!r}",
            field="mapping",
            value=name,
            hint=f"saved: {', '.join(known)}"
            if known
            else "save one with `sounding mapping save NAME --map ...`",
        )
    return from_toml(path.read_text(encoding="utf-8"), where=f"mapping {name}")


def mapping_text(home: Path, name: str) -> str:
    load_mapping(home, name)  # checks it exists and reads
    return (mappings_dir(home) / f"{name}.toml").read_text(encoding="utf-8")


def list_mappings(home: Path) -> list[str]:
    folder = mappings_dir(home)
    if not folder.is_dir():
        return []
    return sorted(p.stem for p in folder.glob("*.toml") if _NAME.match(p.stem))


def combine(saved: ImportOptions | None, given: ImportOptions) -> ImportOptions:
    """A saved mapping with the options given now on top: a column mapped now
    replaces the saved one, a value given now replaces the saved value."""
    if saved is None:
        return given.check()
    layout_given = given.time_format is not None or given.date_order is not None
    return replace(
        saved,
        mapping={**saved.mapping, **given.mapping},
        account=given.account or saved.account,
        timezone=given.timezone or saved.timezone,
        time_format=given.time_format if layout_given else saved.time_format,
        date_order=given.date_order if layout_given else saved.date_order,
        decimal_comma=given.decimal_comma or saved.decimal_comma,
        labels=tuple(dict.fromkeys((*saved.labels, *given.labels))),
    ).check()


def command_line(options: ImportOptions) -> list[str]:
    """The import options as command-line arguments."""
    args: list[str] = []
    for ours, theirs in options.mapping.items():
        args += ["--map", f"{ours}={theirs}"]
    if options.account:
        args += ["--account", options.account]
    if options.timezone:
        args += ["--timezone", options.timezone]
    if options.time_format:
        args += ["--time-format", options.time_format]
    if options.date_order:
        args.append(f"--{options.date_order}")
    if options.decimal_comma:
        args.append("--decimal-comma")
    for name in options.labels:
        args += ["--label", name]
    return args
