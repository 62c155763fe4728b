"""Commands for saved import mappings: ``sounding mapping save|list|show``.

The options that say how an export is written are declared here once and
shared with ``sounding import``.
"""

from __future__ import annotations

import shlex

import typer

from models.errors import InputError
from service.cli.base import app, out, print_json
from service.cli.render import Column, print_table
from service.ingest.mappings import command_line, list_mappings, load_mapping, mapping_text, save_mapping
from service.ingest.options import ImportOptions, parse_mapping
from service.ingest.timestamps import DateOrder
from service.settings import get_settings

ACCOUNT = typer.Option(None, "--account", help="Account for rows without an account column.")
MAP = typer.Option([], "--map", help="Read our column from theirs: ours=theirs (repeatable).")
TIMEZONE = typer.Option(
    None, "--timezone", help="IANA zone of times without an offset (default: the account's)."
)
TIME_FORMAT = typer.Option(
    None,
    "--time-format",
    help="How times are written: a strptime pattern such as '%d/%m/%Y %H:%M', or epoch / "
    "epoch_ms for Unix times. Default: ISO 8601 and common layouts.",
)
DAY_FIRST = typer.Option(False, "--day-first", help="Numeric dates put the day first (03/11 is 3 November).")
MONTH_FIRST = typer.Option(
    False, "--month-first", help="Numeric dates put the month first (03/11 is 11 March)."
)
DECIMAL_COMMA = typer.Option(
    False, "--decimal-comma", help="Numbers use a decimal comma (1.234 is a thousand and more)."
)
LABEL = typer.Option(
    [],
    "--label",
    metavar="COLUMN",
    help="Keep this extra column of the file (a campaign, a series) as each post's label, "
    "for segments --by label:COLUMN (repeatable).",
)

mapping_app = typer.Typer(
    help="Saved import mappings: how the team's exports are read.", no_args_is_help=True
)
app.add_typer(mapping_app, name="mapping")


def given_options(
    *,
    mapping: list[str],
    account: str | None,
    timezone: str | None,
    time_format: str | None,
    day_first: bool,
    month_first: bool,
    decimal_comma: bool,
    labels: list[str] | None = None,
) -> ImportOptions:
    """The options given on the command line, checked."""
    if day_first and month_first:
        raise InputError("give --day-first or --month-first, not both")
    order: DateOrder | None = "day-first" if day_first else "month-first" if month_first else None
    return ImportOptions(
        mapping=parse_mapping(mapping),
        account=account,
        timezone=timezone,
        time_format=time_format,
        date_order=order,
        decimal_comma=decimal_comma,
        labels=tuple(labels or ()),
    ).check()


@mapping_app.command("save")
def save_cmd(
    name: str = typer.Argument(..., help="The mapping's name, e.g. monthly-export."),
    mapping: list[str] = MAP,
    account: str | None = ACCOUNT,
    timezone: str | None = TIMEZONE,
    time_format: str | None = TIME_FORMAT,
    day_first: bool = DAY_FIRST,
    month_first: bool = MONTH_FIRST,
    decimal_comma: bool = DECIMAL_COMMA,
    label: list[str] = LABEL,
    replace: bool = typer.Option(False, "--replace", help="Overwrite a mapping of that name."),
) -> None:
    """Save how one kind of export is read, for `sounding import FILE --mapping NAME`."""
    options = given_options(
        mapping=mapping,
        account=account,
        timezone=timezone,
        time_format=time_format,
        day_first=day_first,
        month_first=month_first,
        decimal_comma=decimal_comma,
        labels=label,
    )
    path = save_mapping(get_settings().resolved_home, name, options, replace=replace)
    out.print(f"saved mapping {name} ({path})", highlight=False)


@mapping_app.command("list")
def list_cmd(as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """List the saved mappings."""
    home = get_settings().resolved_home
    names = list_mappings(home)
    if as_json:
        print_json([{"name": n, "arguments": command_line(load_mapping(home, n))} for n in names])
        return
    if not names:
        out.print("no saved mappings (save one with `sounding mapping save NAME --map ...`)")
        return
    print_table(
        out,
        [Column(header="name"), Column(header="import options", free=True)],
        [[n, " ".join(shlex.quote(a) for a in command_line(load_mapping(home, n)))] for n in names],
        wide=True,  # the options are read to be copied: never cut them
    )


@mapping_app.command("show")
def show_cmd(
    name: str = typer.Argument(..., help="The mapping's name."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
) -> None:
    """Show a saved mapping: its file and the import options it stands for."""
    home = get_settings().resolved_home
    options = load_mapping(home, name)
    if as_json:
        print_json(
            {
                "name": name,
                "columns": options.mapping,
                "account": options.account,
                "timezone": options.timezone,
                "time_format": options.time_format,
                "date_order": options.date_order,
                "decimal_comma": options.decimal_comma,
                "labels": list(options.labels),
            }
        )
        return
    out.print(mapping_text(home, name), end="", highlight=False, markup=False)
    out.print(
        "\nthe same as: sounding import FILE " + " ".join(shlex.quote(a) for a in command_line(options)),
        highlight=False,
        markup=False,
    )
