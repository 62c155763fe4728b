"""Exports in other layouts: times, numbers, rates, saved mappings, dry runs, exit status.

The fixture exports in tests/fixtures/exports/ are written from one canonical
file by make_exports.py with the standard library only (csv, strftime and
zoneinfo for Europe/London wall-clock times). Each must import, with the
right options, into exactly what the canonical file imports into.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import tomllib
from datetime import UTC, datetime
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pytest
from typer.testing import CliRunner

from models.embedding import Embedder
from models.errors import CSVFormatError, InputError
from service.cli import app, base
from service.cli.base import use_embedder
from service.ingest.options import ImportOptions
from service.workspace import Workspace

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures" / "exports"
LONDON = "Europe/London"
MAP = {
    "post_id": "Post ID",
    "text": "Message",
    "posted_at": "Published",
    "impressions": "Views",
    "engagements": "Interactions",
    "likes": "Likes",
    "has_media": "Media",
}
RATE = {"engagement_rate": "Engagement rate"}
FIELDS = ("account", "text", "posted_at", "impressions", "engagements", "likes", "has_media")

LAYOUTS: list[tuple[str, dict[str, Any]]] = [
    ("day_first", {"date_order": "day-first"}),
    ("month_first_12h", {"date_order": "month-first"}),
    ("epoch", {"time_format": "epoch"}),
    ("epoch_ms", {"time_format": "epoch_ms"}),
    ("decimal_comma", {"date_order": "day-first", "decimal_comma": True, "rate": True}),
    ("percent", {"rate": True}),
    ("abbreviated", {}),
    ("messy", {"date_order": "day-first", "rate": True}),
]


def _generator():
    spec = importlib.util.spec_from_file_location("make_exports", FIXTURES / "make_exports.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def stored(ws: Workspace) -> dict[str, dict[str, Any]]:
    df = ws.store.posts_frame()
    by_pk = ws.store.posts_by_pk(df["pk"].tolist())
    rough = ws.store.approximate_metrics(df["pk"].tolist())
    out = {}
    for pk, p in by_pk.items():
        out[p["post_id"]] = {
            "account": p["account"],
            "text": p["text"],
            "posted_at": p["posted_at"],
            **p["metrics"],
            "has_media": p["has_media"],
            "approximate": rough.get(pk, frozenset()),
        }
    return out


def london_workspace(make_workspace, name: str) -> Workspace:
    ws = make_workspace(name)
    ws.store.set_account("loomhaven", timezone=LONDON)
    return ws


@pytest.fixture()
def canonical(make_workspace) -> dict[str, dict[str, Any]]:
    ws = london_workspace(make_workspace, "canonical")
    s = ws.import_csv(FIXTURES / "canonical.csv", ImportOptions(new_accounts="UTC"))
    assert (s.added, s.rejected) == (13, 0)
    return stored(ws)


def test_fixture_files_are_what_the_generator_writes() -> None:
    gen = _generator()
    for name, (header, body) in gen.layouts().items():
        want = gen.render(header, body).encode("utf-8")
        assert (FIXTURES / f"{name}.csv").read_bytes() == want, name


@pytest.mark.parametrize(("name", "opts"), LAYOUTS, ids=[n for n, _ in LAYOUTS])
def test_each_layout_imports_as_the_canonical_file(
    make_workspace, canonical: dict[str, dict[str, Any]], name: str, opts: dict[str, Any]
) -> None:
    opts = dict(opts)
    mapping = {**MAP, **(RATE if opts.pop("rate", False) else {})}
    ws = london_workspace(make_workspace, name)
    s = ws.import_csv(
        FIXTURES / f"{name}.csv",
        ImportOptions(account="loomhaven", mapping=mapping, **opts, new_accounts="UTC"),
    )
    assert (s.added, s.rejected) == (13, 0), s.problems
    got = stored(ws)
    assert set(got) == set(canonical)
    shortened = name in ("abbreviated", "messy")
    for pid, want in canonical.items():
        for f in FIELDS:
            if (shortened and f == "impressions") or (
                name == "abbreviated" and f in ("engagements", "likes")
            ):
                continue
            assert got[pid][f] == want[f], (pid, f)
        assert want["approximate"] == frozenset()
    if shortened:
        # 1.2K stands for 1,150-1,250: within half a unit of the last shown digit
        # of the true count (common practice, no source), and flagged approximate.
        cols = ("impressions", "engagements", "likes") if name == "abbreviated" else ("impressions",)
        for pid, want in canonical.items():
            for f in cols:
                true, read = want[f], got[pid][f]
                if true < 1000:
                    assert read == true and f not in got[pid]["approximate"]
                    continue
                unit = 100_000 if true >= 1_000_000 else 100
                assert abs(read - true) <= unit / 2, (pid, f, read, true)
                assert f in got[pid]["approximate"], (pid, f)
        assert s.approximate == sum(1 for w in canonical.values() if w["impressions"] >= 1000)


def test_times_at_the_dst_changes_follow_the_iana_rules(canonical) -> None:
    # Expected UTC instants from the Europe/London rules (zoneinfo): on 2026-03-29
    # 01:00 GMT becomes 02:00 BST, so local 02:30 is 01:30Z; on 2026-10-25 02:00 BST
    # becomes 01:00 GMT, and local 01:30 is read as its first occurrence (BST, fold=0).
    z = ZoneInfo(LONDON)
    assert canonical["lh-104"]["posted_at"] == datetime(2026, 3, 29, 2, 30, tzinfo=z).astimezone(UTC)
    assert canonical["lh-104"]["posted_at"] == datetime(2026, 3, 29, 1, 30, tzinfo=UTC)
    first = datetime(2026, 10, 25, 1, 30, fold=0, tzinfo=z)
    assert (
        canonical["lh-109"]["posted_at"] == first.astimezone(UTC) == datetime(2026, 10, 25, 0, 30, tzinfo=UTC)
    )


@pytest.mark.parametrize(
    ("name", "first"), [("day_first", "07/01/2026 18:45"), ("month_first_12h", "01/07/2026 06:45 PM")]
)
def test_ambiguous_dates_are_refused_without_an_order(make_workspace, name: str, first: str) -> None:
    ws = london_workspace(make_workspace, name)
    with pytest.raises(CSVFormatError) as e:
        ws.import_csv(
            FIXTURES / f"{name}.csv", ImportOptions(account="loomhaven", mapping=MAP, new_accounts="UTC")
        )
    msg = str(e.value)
    assert f"{first!r} on line 2" in msg and "--day-first or --month-first" in msg
    assert ws.store.counts()["posts"] == 0  # refused before anything was written


def test_rows_in_the_other_order_are_rejected(make_workspace) -> None:
    # Read month-first, a day-first date with a day above 12 cannot be a date
    # (there is no month 13): those rows, and only those, are rejected.
    ws = london_workspace(make_workspace, "wrong")
    s = ws.import_csv(
        FIXTURES / "day_first.csv",
        ImportOptions(account="loomhaven", mapping=MAP, date_order="month-first", new_accounts="UTC"),
    )
    gen = _generator()
    days = [datetime.fromisoformat(r["posted_at"]).astimezone(ZoneInfo(LONDON)).day for r in gen.canonical()]
    assert [p.line for p in s.problems] == [i + 2 for i, d in enumerate(days) if d > 12]
    assert all(p.column == "posted_at" and "month-first" in p.reason for p in s.problems)


@pytest.mark.parametrize(
    ("value", "good", "opts"),
    [
        ("2026-03-29 01:30", "2026-03-29 12:00", {}),  # ISO 8601 without offset
        ("29/03/2026 01:30", "29/03/2026 12:00", {"date_order": "day-first"}),
        ("03/29/2026 01:30 AM", "03/29/2026 12:00 PM", {"date_order": "month-first"}),
        ("29 Mar 2026 01:30", "29 Mar 2026 12:00", {}),
        ("2026.03.29 1:30", "2026.03.29 12:00", {"time_format": "%Y.%m.%d %H:%M"}),
    ],
)
def test_a_skipped_local_time_is_refused_in_every_layout(
    make_workspace, tmp_path: Path, value: str, good: str, opts: dict[str, Any]
) -> None:
    # IANA rules (zoneinfo): 01:30 on 2026-03-29 does not exist in Europe/London;
    # a wall time that does not exist fails the round trip through UTC.
    z = ZoneInfo(LONDON)
    wall = datetime(2026, 3, 29, 1, 30)
    assert wall.replace(tzinfo=z).astimezone(UTC).astimezone(z).replace(tzinfo=None) != wall
    ws = london_workspace(make_workspace, "dst")
    f = tmp_path / "dst.csv"
    f.write_text(f"post_id,text,posted_at,impressions\nd1,Early start,{value},5\nd2,Later,{good},6\n")
    s = ws.import_csv(f, ImportOptions(account="loomhaven", **opts, new_accounts="UTC"))
    assert s.added == 1 and [(p.line, p.column) for p in s.problems] == [(2, "posted_at")]
    assert "does not exist in Europe/London" in s.problems[0].reason


# Numbers and values at the door ---------------------------------------------------------


def test_counts_above_2_53_are_refused_per_row(workspace: Workspace, tmp_path: Path) -> None:
    # 2**53 is the last integer a float64 holds exactly (IEEE 754, 53-bit significand);
    # 2**63 overflows SQLite's signed 64-bit INTEGER (SQLite docs, datatypes).
    rows = [
        ("n1", 2**53),
        ("n2", 2**53 + 1),
        ("n3", 2**63),
        ("n4", 2**64 + 7),
        ("n5", 12),
        ("n6", 13),
        ("n7", 14),
        ("n8", 15),
        ("n9", 16),
    ]
    body = "post_id,account,text,posted_at,impressions\n" + "".join(
        f"{pid},garden,Count {pid},2026-05-01T10:00:00Z,{n}\n" for pid, n in rows
    )
    f = tmp_path / "big.csv"
    f.write_text(body)
    s = workspace.import_csv(f, ImportOptions(new_accounts="UTC"))
    assert [(p.line, p.column, p.post_id) for p in s.problems] == [
        (3, "impressions", "n2"),
        (4, "impressions", "n3"),
        (5, "impressions", "n4"),
    ]
    assert all("2^53" in p.reason for p in s.problems)
    got = stored(workspace)
    assert set(got) == {"n1", "n5", "n6", "n7", "n8", "n9"}
    assert got["n1"]["impressions"] == 9_007_199_254_740_992  # exact, not rounded


@pytest.mark.parametrize(
    "when",
    [
        "9999-12-31T23:59:00Z",
        "0001-01-01T00:00:00+00:00",
        "1600-01-01T00:00:00Z",
        "1989-12-31T23:59:59Z",
        "2200-01-01T00:00:00Z",
    ],
)
def test_times_outside_the_range_are_refused_with_row_column_and_range(
    workspace: Workspace, tmp_path: Path, when: str
) -> None:
    f = tmp_path / "when.csv"
    f.write_text(
        "post_id,account,text,posted_at,impressions\n"
        "t1,garden,Fine,2026-05-01T10:00:00Z,5\n"
        f"t2,garden,Out of range,{when},5\n"
    )
    s = workspace.import_csv(f, ImportOptions(new_accounts="UTC"))
    assert s.added == 1 and [(p.line, p.column) for p in s.problems] == [(3, "posted_at")]
    assert "outside the accepted range, the years 1990 to 2199" in s.problems[0].reason


def test_the_range_edges_are_accepted(workspace: Workspace, tmp_path: Path) -> None:
    f = tmp_path / "edge.csv"
    f.write_text(
        "post_id,account,text,posted_at,impressions\n"
        "e1,garden,First day,1990-01-01T00:00:00Z,5\n"
        "e2,garden,Last day,2199-12-31T23:59:59Z,5\n"
    )
    assert workspace.import_csv(f, ImportOptions(new_accounts="UTC")).added == 2


def test_a_rate_that_does_not_match_is_rejected_and_a_missing_count_derived(
    workspace: Workspace, tmp_path: Path
) -> None:
    f = tmp_path / "rate.csv"
    f.write_text(
        "post_id,account,text,posted_at,impressions,engagements,engagement_rate\n"
        "r1,garden,Matches,2026-05-01T10:00:00Z,2000,90,4.5%\n"  # 90/2000 = 4.5%
        "r2,garden,Does not,2026-05-01T11:00:00Z,2000,90,9%\n"  # 4.5% != 9%
        "r3,garden,Fraction,2026-05-01T12:00:00Z,2000,90,0.045\n"  # the same as a fraction
        "r4,garden,Derived,2026-05-01T13:00:00Z,2000,,3.5%\n"  # 3.5% of 2000 = 70
        "r5,garden,Alone,2026-05-01T14:00:00Z,,,3.5%\n"
    )
    s = workspace.import_csv(f, ImportOptions(new_accounts="UTC"))
    assert [(p.line, p.column) for p in s.problems] == [(3, "engagement_rate"), (6, "engagement_rate")]
    assert "does not match engagements / impressions" in s.problems[0].reason
    got = stored(workspace)
    assert got["r4"]["engagements"] == 70 and got["r4"]["approximate"] == {"engagements"}
    assert got["r1"]["approximate"] == frozenset()


def test_number_hints_name_the_decimal_comma(workspace: Workspace, tmp_path: Path) -> None:
    f = tmp_path / "dc.csv"
    f.write_text(
        "post_id,account,text,posted_at,impressions\n"
        "d1,garden,Dots,2026-05-01T10:00:00Z,1.234.567\n"
        "d2,garden,Percent,2026-05-01T10:00:00Z,45%\n"
    )
    s = workspace.import_csv(f, ImportOptions(new_accounts="UTC"))
    assert "--decimal-comma" in (s.problems[0].hint or "")
    assert "percentage" in s.problems[1].reason


def test_an_exact_count_replacing_an_abbreviated_one_clears_the_flag(
    workspace: Workspace, tmp_path: Path
) -> None:
    head = "post_id,account,text,posted_at,impressions,likes\n"
    (tmp_path / "a.csv").write_text(head + "a1,garden,Shortened,2026-05-01T10:00:00Z,3M,1.5K\n")
    (tmp_path / "b.csv").write_text(head + "a1,garden,Shortened,2026-05-01T10:00:00Z,3000000,\n")
    workspace.import_csv(tmp_path / "a.csv", ImportOptions(new_accounts="UTC"))
    assert stored(workspace)["a1"]["approximate"] == {"impressions", "likes"}
    s = workspace.import_csv(tmp_path / "b.csv", ImportOptions(new_accounts="UTC"))
    assert s.updated == 1  # same numbers, but now known exactly: a new snapshot
    got = stored(workspace)["a1"]
    # likes carried over from the earlier snapshot keep their flag.
    assert got["approximate"] == {"likes"} and got["likes"] == 1500


# A bad record costs only that record (RFC 4180) -----------------------------------------


GOOD_ROWS = [
    "m1,garden,First post,2026-05-01T10:00:00Z,11",
    "m3,garden,Third post,2026-05-01T12:00:00Z,33",
    'm4,garden,"Fourth, with a comma",2026-05-01T13:00:00Z,44',
    "m5,garden,Fifth post,2026-05-01T14:00:00Z,55",
]


@pytest.mark.parametrize(
    "bad",
    [
        'm2,garden,"She said "hello" at the gate",2026-05-01T11:00:00Z,22',  # quote not doubled
        'm2,garden,"A quote that never closes,2026-05-01T11:00:00Z,22',  # unclosed quote
        'm2,garden,"Closed" too early,2026-05-01T11:00:00Z,22',  # text after the quote
    ],
)
def test_a_malformed_quote_in_row_2_of_5_costs_only_that_row(
    workspace: Workspace, tmp_path: Path, bad: str
) -> None:
    # RFC 4180 section 2, rules 5-7: a field with quotes is enclosed in quotes and its
    # own quotes are doubled; any other quote makes the record unreadable.
    f = tmp_path / "quote.csv"
    f.write_text(
        "\n".join(["post_id,account,text,posted_at,impressions", GOOD_ROWS[0], bad, *GOOD_ROWS[1:]]) + "\n"
    )
    s = workspace.import_csv(f, ImportOptions(new_accounts="UTC"))
    assert [(p.line, p.column) for p in s.problems] == [(3, None)]
    assert s.added == 4 and s.skipped_lines == 0
    assert set(stored(workspace)) == {"m1", "m3", "m4", "m5"}


def test_a_field_over_the_csv_size_limit_costs_only_its_row(workspace: Workspace, tmp_path: Path) -> None:
    import csv

    limit = csv.field_size_limit()  # the csv module's limit in force (Python docs)
    f = tmp_path / "long.csv"
    with f.open("w", encoding="utf-8") as h:
        h.write("post_id,account,text,posted_at,impressions\n" + GOOD_ROWS[0] + "\n")
        h.write('m2,garden,"' + "x" * (limit + 10) + '\nstill the same field",2026-05-01T11:00:00Z,22\n')
        h.write("\n".join(GOOD_ROWS[1:]) + "\n")
    s = workspace.import_csv(f, ImportOptions(new_accounts="UTC"))
    assert [(p.line, p.column) for p in s.problems] == [(3, None)]
    assert f"limit of {limit:,} characters" in s.problems[0].reason
    assert set(stored(workspace)) == {"m1", "m3", "m4", "m5"}


def test_a_file_whose_rest_is_not_csv_says_how_much_was_skipped(workspace: Workspace, tmp_path: Path) -> None:
    from service.ingest.csvread import MAX_BAD_IN_A_ROW

    junk = ['x,"a"b' for _ in range(MAX_BAD_IN_A_ROW + 30)]
    f = tmp_path / "junk.csv"
    f.write_text(
        "\n".join(["post_id,account,text,posted_at,impressions", GOOD_ROWS[0], *junk, *GOOD_ROWS[1:]]) + "\n"
    )
    s = workspace.import_csv(f, ImportOptions(new_accounts="UTC"))
    assert s.added == 1 and s.rejected == MAX_BAD_IN_A_ROW - 1
    # 49 bad records are reported; reading stops at the 50th, and its line, the junk
    # after it and the three good rows at the end are counted as not read.
    assert s.skipped_lines == len(junk) - (MAX_BAD_IN_A_ROW - 1) + 3
    assert s.stopped and "lines were not read" in s.stopped


@pytest.mark.parametrize("width", [10_000, 100_000])
def test_wide_headers_are_checked_for_repeats(workspace: Workspace, tmp_path: Path, width: int) -> None:
    names = [f"c{i}" for i in range(width)]
    head = ["post_id", "account", "text", "posted_at", "impressions", *names]
    row = ["w1", "garden", "Wide", "2026-05-01T10:00:00Z", "5", *["0"] * width]
    f = tmp_path / "wide.csv"
    f.write_text(",".join(head) + "\n" + ",".join(row) + "\n")
    assert workspace.import_csv(f, ImportOptions(new_accounts="UTC")).added == 1
    head[-1] = head[7]  # one repeat, far from the start
    f.write_text(",".join(head) + "\n" + ",".join(row) + "\n")
    with pytest.raises(CSVFormatError, match=f"names {head[7]} more than once"):
        workspace.import_csv(f, ImportOptions(new_accounts="UTC"))


# Options -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("opts", "fragment"),
    [
        ({"time_format": "%d/%m/%Y"}, "no time of day"),
        ({"time_format": "%Q %H"}, "not a usable strptime pattern"),
        ({"time_format": "epoch", "date_order": "day-first"}, "not both"),
        ({"date_order": "sideways"}, "day-first or month-first"),
    ],
)
def test_bad_layout_options_are_refused(workspace: Workspace, opts: dict, fragment: str) -> None:
    with pytest.raises(InputError, match=fragment):
        workspace.import_csv(FIXTURES / "canonical.csv", ImportOptions(**opts, new_accounts="UTC"))


# CLI: saved mappings, dry run, exit status ---------------------------------------------

runner = CliRunner()


@pytest.fixture()
def cli_home(embedder: Embedder, monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> Path:
    use_embedder(embedder)
    home = tmp_path / "home"
    monkeypatch.setenv("SOUNDING_HOME", str(home))
    monkeypatch.delenv("SOUNDING_TOKEN", raising=False)
    assert runner.invoke(app, ["account", "loomhaven", "--timezone", LONDON]).exit_code == 0
    return home


def run(*args: str):
    return runner.invoke(app, list(args))


MESSY_ARGS = [a for k, v in {**MAP, **RATE}.items() for a in ("--map", f"{k}={v}")]


def test_saved_mapping_reads_the_messy_export(cli_home: Path) -> None:
    assert run("mapping", "list").stdout.startswith("no saved mappings")  # no built-in presets
    r = run(
        "mapping",
        "save",
        "garden-export",
        *MESSY_ARGS,
        "--day-first",
        "--account",
        "loomhaven",
        "--timezone",
        LONDON,
    )
    assert r.exit_code == 0, r.output
    saved = tomllib.loads((cli_home / "mappings" / "garden-export.toml").read_text())
    assert saved["columns"] == {**MAP, **RATE} and saved["account"] == "loomhaven"
    assert saved["times"] == {"date_order": "day-first", "timezone": LONDON}
    assert "garden-export" in run("mapping", "list").stdout
    shown = run("mapping", "show", "garden-export")
    assert "--day-first" in shown.stdout and "Post ID" in shown.stdout
    assert run("mapping", "save", "garden-export").exit_code == 1  # exists: --replace needed
    r = run("import", str(FIXTURES / "messy.csv"), "--mapping", "garden-export", "--json")
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["added"] == 13
    r = run("precedents", "Snowdrops on the woodland walk", "-k", "1", "--json")
    assert json.loads(r.stdout)["precedents"][0]["post_id"] == "lh-101"
    assert run("mapping", "show", "nope").exit_code == 1


def close_cli_workspace() -> None:
    if base._workspace is not None:
        base._workspace.close()
        base.use_embedder(base._embedder)  # forgets the workspace, keeps the model


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_dry_run_stores_nothing_and_shows_utc_and_local_times(cli_home: Path) -> None:
    assert run("import", str(FIXTURES / "canonical.csv")).exit_code == 0
    close_cli_workspace()  # SQLite folds its write-ahead log into the file on close
    db = cli_home / "sounding.db"
    before = _digest(db)
    r = run(
        "import",
        str(FIXTURES / "month_first_12h.csv"),
        *MESSY_ARGS[:14],
        "--month-first",
        "--account",
        "loomhaven",
        "--dry-run",
        "--json",
    )
    assert r.exit_code == 0, r.output
    close_cli_workspace()
    assert _digest(db) == before  # byte for byte
    out = json.loads(r.stdout)
    assert out["dry_run"] and out["would_import"] == 13 and out["rejected"] == 0
    cols = {c["ours"]: c["theirs"] for c in out["columns"]}
    assert cols["posted_at"] == "Published" and cols["likes"] == "Likes"
    first = out["rows"][0]
    # lh-101 is 18:45Z on 7 January: GMT, so 18:45 local too (IANA rules via zoneinfo).
    assert first["posted_at"] == "2026-01-07T18:45:00+00:00"
    assert first["local_time"] == "2026-01-07T18:45:00+00:00" and first["zone"] == LONDON
    # lh-103 at 00:30Z on 29 March is 00:30 GMT; lh-104 at 01:30Z is 02:30 BST.
    assert out["rows"][3]["local_time"] == "2026-03-29T02:30:00+01:00"
    text = run(
        "import",
        str(FIXTURES / "month_first_12h.csv"),
        *MESSY_ARGS[:14],
        "--month-first",
        "--account",
        "loomhaven",
        "--dry-run",
    )
    assert "dry run: nothing is stored" in text.stdout and "2026-03-29 02:30" in text.stdout


def test_rejected_rows_exit_3_unless_allowed_and_are_listed(cli_home: Path) -> None:
    args = [
        "import",
        str(FIXTURES / "day_first.csv"),
        *MESSY_ARGS[:14],
        "--month-first",
        "--account",
        "loomhaven",
    ]
    r = run(*args, "--json")
    assert r.exit_code == 3
    summary = json.loads(r.stdout)
    assert summary["rejected"] == len(summary["problems"]) > 0
    assert {p["post_id"] for p in summary["problems"]} >= {"lh-102", "lh-112"}
    assert run(*args, "--allow-rejects").exit_code == 0
    dry = run(*args, "--dry-run")
    assert dry.exit_code == 3 and "to try:" in dry.stderr
    # An ambiguous file is one clear line naming the value and the options.
    r = run("import", str(FIXTURES / "day_first.csv"), *MESSY_ARGS[:14], "--account", "loomhaven")
    assert r.exit_code == 1 and "'07/01/2026 18:45' on line 2" in r.stderr


def test_api_dry_run_stores_nothing(make_workspace) -> None:
    from fastapi.testclient import TestClient

    from service.api.app import create_app

    token = "t" * 40
    workspace = make_workspace(token=token)
    workspace.import_csv(FIXTURES / "canonical.csv", ImportOptions(new_accounts="UTC"))
    before = workspace.store.counts()
    data = {
        "map": [f"{k}={v}" for k, v in {**MAP, **RATE}.items()],
        "account": "loomhaven",
        "date_order": "day-first",
    }
    files = {"file": ("messy.csv", (FIXTURES / "messy.csv").read_bytes(), "text/csv")}
    with TestClient(create_app(workspace=workspace)) as c:
        r = c.post(
            "/v1/imports",
            params={"dry_run": "true"},
            data=data,
            files=files,
            headers={"Authorization": f"Bearer {token}"},
        )
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["dry_run"] is True and body["would_import"] == 13 and body["approximate"] == 11
    assert "Campaign" in body["unused_columns"]
    assert workspace.store.counts() == before


def test_an_unreadable_rest_exits_3_even_with_allow_rejects(cli_home: Path, tmp_path: Path) -> None:
    from service.ingest.csvread import MAX_BAD_IN_A_ROW

    f = tmp_path / "junk.csv"
    f.write_text(
        "\n".join(
            ["post_id,account,text,posted_at,impressions", GOOD_ROWS[0], *['x,"a"b'] * (MAX_BAD_IN_A_ROW + 5)]
        )
        + "\n"
    )
    r = run("import", str(f), "--allow-rejects", "--new-account", "--timezone", "UTC")
    assert r.exit_code == 3
    assert "added 1" in r.stdout and "6 lines were not read" in r.stderr
