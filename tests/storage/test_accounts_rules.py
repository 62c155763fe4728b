"""Accounts are never made by a typo: unknown handles are refused with the
closest known ones, new ones are made on purpose, and a handle follows one
stated pattern (folded to lower case)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from models.errors import InputError, NotFound
from service.api.app import create_app
from service.cli import app
from service.cli.base import use_embedder
from service.ingest.options import ImportOptions
from service.storage.handles import check_handle, closest, fold_handle, handle_problem
from service.workspace import Workspace

HEADER = "post_id,account,text,posted_at,impressions\n"
runner = CliRunner()


def _csv(path: Path, rows: list[str]) -> Path:
    path.write_text(HEADER + "".join(r + "\n" for r in rows), encoding="utf-8")
    return path


@pytest.fixture()
def library(workspace: Workspace, tmp_path: Path) -> Workspace:
    """A store with one account and one post."""
    workspace.store.set_account("brakenford_lib", timezone="Europe/London")
    s = workspace.import_csv(
        _csv(tmp_path / "base.csv", ["b1,brakenford_lib,Story hour,2026-03-01T10:00,50"])
    )
    assert s.added == 1
    return workspace


def test_typo_in_account_option_is_refused_and_stores_nothing(library: Workspace, tmp_path: Path) -> None:
    before = library.store.counts()
    f = tmp_path / "no_account.csv"
    f.write_text("post_id,text,posted_at,impressions\nn1,New books,2026-03-02T10:00,60\n")
    with pytest.raises(NotFound) as exc:
        library.import_csv(f, ImportOptions(account="brakenfordlib"))
    # One letter off: the closest handle is named, and the deliberate way in.
    assert "did you mean brakenford_lib?" in exc.value.message
    assert "--new-account" in (exc.value.hint or "") and "--timezone" in (exc.value.hint or "")
    assert library.store.counts() == before
    assert [a.handle for a in library.store.accounts()] == ["brakenford_lib"]


def test_unknown_handles_in_the_column_are_named_with_their_lines(library: Workspace, tmp_path: Path) -> None:
    before = library.store.counts()
    f = _csv(
        tmp_path / "mixed.csv",
        [
            "m1,brakenford_lib,Fine row,2026-03-02T10:00,1",
            "m2,brakenfordlib,Typo row,2026-03-02T11:00,2",
            "m3,brakenfordlib,Typo again,2026-03-02T12:00,3",
            "m4,zeppelin_club,Elsewhere,2026-03-02T13:00,4",
        ],
    )
    with pytest.raises(NotFound) as exc:
        library.import_csv(f)
    msg = exc.value.message
    assert "'brakenfordlib' on line 3 and 1 more rows (did you mean brakenford_lib?)" in msg
    assert "'zeppelin_club' on line 5" in msg and "nothing was stored" in msg
    # Refused as a whole: not even the row of the known account is stored.
    assert library.store.counts() == before


def test_new_accounts_are_made_on_purpose_in_their_zone(library: Workspace, tmp_path: Path) -> None:
    f = _csv(tmp_path / "new.csv", ["z1,zeppelin_club,Hangar open,2026-03-02T13:00,4"])
    s = library.import_csv(f, ImportOptions(timezone="America/New_York", new_accounts="America/New_York"))
    assert s.added == 1
    acc = library.store.account("zeppelin_club")
    assert acc.timezone == "America/New_York" and acc.posts == 1
    # 13:00 in New York on 2 March 2026 is 18:00 UTC (EST, UTC-5; IANA zone rules).
    post = library.store.posts_frame(account="zeppelin_club").iloc[0]
    assert post.posted_at.hour == 18


def test_a_preview_with_new_accounts_creates_none(library: Workspace, tmp_path: Path) -> None:
    f = _csv(tmp_path / "new.csv", ["z1,zeppelin_club,Hangar open,2026-03-02T13:00,4"])
    p = library.preview_import(f, ImportOptions(timezone="UTC", new_accounts="UTC"))
    assert p.would_import == 1
    assert [a.handle for a in library.store.accounts()] == ["brakenford_lib"]


@pytest.mark.parametrize(
    ("handle", "shown"),
    [
        ("../../etc", "'/'"),
        ("a/b", "'/'"),
        ("a\\b", "'\\\\'"),
        ("loom\u200bhaven", "U+200B (ZERO WIDTH SPACE)"),
        ("\u202eloomhaven", "U+202E (RIGHT-TO-LEFT OVERRIDE)"),
        ("loom\u200fhaven", "U+200F (RIGHT-TO-LEFT MARK)"),
        ("bell\x07", "U+0007"),
        ("two words", "U+0020"),
        (".hidden", "begins with '.'"),
        ("１２３", "U+FF11"),  # fullwidth digits are not 0-9
    ],
)
def test_handles_outside_the_pattern_are_refused_by_line(
    handle: str, shown: str, library: Workspace, tmp_path: Path
) -> None:
    import csv

    path = tmp_path / "bad.csv"
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
        w.writerow(["ok1", "brakenford_lib", "Fine", "2026-03-02T10:00", "1"])
        w.writerow(["bad1", handle, "Odd handle", "2026-03-02T11:00", "2"])
    s = library.import_csv(path)
    assert (s.added, s.rejected) == (1, 1)
    (p,) = s.problems
    assert (p.line, p.column) == (3, "account") and shown in p.reason
    with pytest.raises(InputError):
        library.store.set_account(handle)
    assert [a.handle for a in library.store.accounts()] == ["brakenford_lib"]


def test_handles_are_folded_to_lower_case(library: Workspace, tmp_path: Path) -> None:
    f = _csv(tmp_path / "case.csv", ["c1,Brakenford_LIB,Upper case,2026-03-02T10:00,7"])
    assert library.import_csv(f).added == 1
    assert [(a.handle, a.posts) for a in library.store.accounts()] == [("brakenford_lib", 2)]
    assert library.store.set_account("BRAKENFORD_lib").handle == "brakenford_lib"
    # NFC: a composed and a decomposed e-acute are one letter (Unicode UAX #15).
    assert fold_handle("Caf\u0065\u0301") == fold_handle("caf\u00e9") == "caf\u00e9"
    assert check_handle("Jardín-botánico.2") == "jardín-botánico.2"
    assert handle_problem("loomhaven_lab") is None


def test_closest_ranks_by_difflib_ratio() -> None:
    # Ratios by hand (2*matches/total, difflib's SequenceMatcher definition):
    # 'loomhavn' vs 'loomhaven' = 2*8/17 = 0.94; vs 'loomhaven_lab' = 2*8/21 = 0.76;
    # vs 'zeppelin' = 2*2/16 = 0.25, below the 0.6 cutoff.
    assert closest("loomhavn", ["zeppelin", "loomhaven_lab", "loomhaven"]) == ["loomhaven", "loomhaven_lab"]
    assert closest("LOOMHAVEN", ["loomhaven"]) == ["loomhaven"]


def test_lookups_suggest_close_handles(demo_workspace: Workspace) -> None:
    with pytest.raises(NotFound, match="unknown account 'loomhavn'; did you mean loomhaven"):
        demo_workspace.store.account("loomhavn")
    with pytest.raises(NotFound, match="did you mean loomhaven_lab"):
        demo_workspace.store.pks_where(account="loomhaven_lb")


def test_api_unknown_account_suggests(demo_workspace: Workspace) -> None:
    client = TestClient(create_app(workspace=demo_workspace))
    r = client.post("/v1/forecasts", json={"text": "Tulips", "account": "loomhaven_evnts", "record": False})
    assert r.status_code == 404
    assert "did you mean loomhaven_events" in r.json()["error"]["message"]


def test_cli_typo_and_new_account(embedder, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    use_embedder(embedder)
    home = tmp_path / "home"
    monkeypatch.setenv("SOUNDING_HOME", str(home))
    monkeypatch.delenv("SOUNDING_TOKEN", raising=False)
    assert runner.invoke(app, ["account", "brakenford_lib", "--timezone", "Europe/London"]).exit_code == 0
    f = tmp_path / "n.csv"
    f.write_text("post_id,text,posted_at,impressions\nn1,New books,2026-03-02T10:00,60\n")
    r = runner.invoke(app, ["import", str(f), "--account", "brakenfordlib"])
    assert r.exit_code == 1
    assert "did you mean brakenford_lib?" in r.stderr and "--new-account" in r.stderr
    r = runner.invoke(app, ["import", str(f), "--account", "brakenfordlib", "--new-account"])
    assert r.exit_code == 1 and "--new-account needs --timezone" in r.stderr
    r = runner.invoke(
        app, ["import", str(f), "--account", "Reading_Room", "--new-account", "--timezone", "Europe/Dublin"]
    )
    assert r.exit_code == 0, r.stderr
    r = runner.invoke(app, ["accounts", "--json"])
    assert {(a["handle"], a["timezone"]) for a in json.loads(r.stdout)} == {
        ("brakenford_lib", "Europe/London"),
        ("reading_room", "Europe/Dublin"),
    }
    r = runner.invoke(app, ["hours", "x", "--account", "reading_rom"])
    assert r.exit_code == 1 and "did you mean reading_room?" in r.stderr


def test_a_read_with_a_mistyped_home_creates_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("SOUNDING_DATABASE_URL", raising=False)
    typo = tmp_path / "hoem"
    monkeypatch.setenv("SOUNDING_HOME", str(typo))  # --home sets it; restored after the test
    for args in (["accounts"], ["precedents", "tulips"], ["track-record"]):
        r = runner.invoke(app, ["--home", str(typo), *args])
        assert r.exit_code == 1 and "there is no data directory at" in r.stderr
    assert not typo.exists()
