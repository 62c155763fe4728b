"""The team's own labels kept at import (--label COLUMN): stored per post,
replaced on re-import, refused by name when the file lacks the column, and
nothing stored without --label. The files are written with Python's csv
module (an RFC 4180 writer), so a label holding a comma or a quote is read
back as that writer meant it."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest
from conftest import AUTH, TOKEN
from fastapi.testclient import TestClient
from sqlalchemy import func, select
from typer.testing import CliRunner

from models.embedding import Embedder
from models.errors import CSVFormatError, InputError
from service.api.app import create_app
from service.cli import app
from service.cli.base import use_embedder
from service.ingest.mappings import combine, load_mapping, save_mapping
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.storage.tables import PostLabel
from service.workspace import Workspace

pytestmark = pytest.mark.both_backends

HEADER = ["post_id", "account", "text", "posted_at", "impressions", "Campaign", "series"]
ROWS = [
    [
        "g1",
        "garden",
        "Tulips open in the walled garden",
        "2026-04-01T10:00:00Z",
        "1200",
        "spring, tulips",
        "a",
    ],
    ["g2", "garden", "Seed library volunteers wanted", "2026-04-02T10:00:00Z", "800", "", "b"],
    ["g3", "garden", 'The "night cactus" flowered', "2026-04-03T10:00:00Z", "1500", "glasshouse", ""],
]


def write_csv(path: Path, rows: list[list[str]], header: list[str] = HEADER) -> Path:
    buf = io.StringIO()
    w = csv.writer(buf)  # RFC 4180 quoting: commas and quotes inside fields
    w.writerow(header)
    w.writerows(rows)
    path.write_text(buf.getvalue(), encoding="utf-8")
    return path


def stored(ws: Workspace) -> dict[tuple[str, str], str]:
    """Every stored label, by (post id, label name)."""
    frame = ws.store.posts_frame()
    post_of = dict(zip(frame["pk"], frame["post_id"], strict=True))
    with ws.store.session() as s:
        rows = s.execute(select(PostLabel.post_pk, PostLabel.name, PostLabel.value)).all()
    return {(post_of[pk], name): value for pk, name, value in rows}


def label_rows(ws: Workspace) -> int:
    with ws.store.session() as s:
        return int(s.scalar(select(func.count()).select_from(PostLabel)) or 0)


def options(*labels: str) -> ImportOptions:
    return ImportOptions(new_accounts="UTC", labels=labels)


def test_named_columns_are_kept_and_an_empty_cell_is_no_label(workspace: Workspace, tmp_path: Path) -> None:
    s = workspace.import_csv(write_csv(tmp_path / "a.csv", ROWS), options("Campaign", "series"))
    assert (s.added, s.rejected) == (3, 0)
    assert stored(workspace) == {
        ("g1", "Campaign"): "spring, tulips",
        ("g1", "series"): "a",
        ("g2", "series"): "b",
        ("g3", "Campaign"): "glasshouse",
    }
    assert workspace.store.label_names() == {"Campaign": 2, "series": 2}
    assert workspace.store.labels_of("series") == {
        int(pk): v for pk, v in zip(workspace.store.posts_frame()["pk"].iloc[:2], ["a", "b"], strict=True)
    }


def test_without_label_nothing_new_is_stored(workspace: Workspace, tmp_path: Path) -> None:
    s = workspace.import_csv(write_csv(tmp_path / "a.csv", ROWS), options())
    assert s.added == 3
    assert label_rows(workspace) == 0 and workspace.store.label_names() == {}


def test_a_missing_label_column_is_named_and_loses_nothing(workspace: Workspace, tmp_path: Path) -> None:
    workspace.import_csv(write_csv(tmp_path / "a.csv", ROWS), options("Campaign"))
    before = (workspace.store.counts(), stored(workspace))
    changed = [[*r[:4], "9999", *r[5:]] for r in ROWS]
    with pytest.raises(CSVFormatError, match=r"label column 'Theme' is not in the file") as info:
        workspace.import_csv(write_csv(tmp_path / "b.csv", changed), options("Campaign", "Theme"))
    assert info.value.field == "label" and info.value.value == "Theme"
    assert "Campaign" in info.value.message  # the file's columns are listed
    assert (workspace.store.counts(), stored(workspace)) == before
    assert set(workspace.store.posts_frame()["impressions"]) == {1200.0, 800.0, 1500.0}
    # The dry run refuses it the same way.
    with pytest.raises(CSVFormatError, match="'Theme'"):
        workspace.preview_import(tmp_path / "b.csv", options("Theme"))


def test_reimport_replaces_the_labels_asked_for(workspace: Workspace, tmp_path: Path) -> None:
    workspace.import_csv(write_csv(tmp_path / "a.csv", ROWS), options("Campaign", "series"))
    again = [
        [*ROWS[0][:5], "summer", "a"],  # a new value
        [*ROWS[1][:5], "autumn", "b"],  # a label where there was none
        [*ROWS[2][:5], "", "z"],  # the cell emptied: no label any more
    ]
    s = workspace.import_csv(write_csv(tmp_path / "b.csv", again), options("Campaign"))
    assert (s.added, s.updated, s.unchanged) == (0, 3, 0)
    assert stored(workspace) == {
        ("g1", "Campaign"): "summer",
        ("g2", "Campaign"): "autumn",
        # series was not asked for this time: kept as it was, not read from the file.
        ("g1", "series"): "a",
        ("g2", "series"): "b",
    }
    s = workspace.import_csv(write_csv(tmp_path / "b.csv", again), options("Campaign"))
    assert (s.updated, s.unchanged) == (0, 3)  # the same labels: nothing changed
    s = workspace.import_csv(write_csv(tmp_path / "b.csv", again), options())
    assert s.unchanged == 3 and len(stored(workspace)) == 4  # without --label: labels untouched


def test_a_label_cell_too_long_rejects_only_its_row(workspace: Workspace, tmp_path: Path) -> None:
    rows = [ROWS[0], [*ROWS[1][:5], "x" * 201, "b"]]
    s = workspace.import_csv(write_csv(tmp_path / "a.csv", rows), options("Campaign"))
    assert (s.added, s.rejected) == (1, 1)
    assert (s.problems[0].line, s.problems[0].column) == (3, "Campaign")


def test_label_names_are_checked() -> None:
    with pytest.raises(InputError, match="named twice"):
        ImportOptions(labels=("Campaign", " Campaign ")).check()
    with pytest.raises(InputError, match="empty"):
        ImportOptions(labels=(" ",)).check()
    assert ImportOptions(labels=(" series ",)).check().labels == ("series",)


def test_a_saved_mapping_keeps_its_labels(tmp_path: Path) -> None:
    save_mapping(tmp_path, "garden", ImportOptions(account="garden", labels=("Campaign",)))
    saved = load_mapping(tmp_path, "garden")
    assert saved.labels == ("Campaign",)
    assert combine(saved, ImportOptions(labels=("series", "Campaign"))).labels == ("Campaign", "series")


def test_the_command_line_and_the_api_take_labels(
    tmp_path: Path, embedder: Embedder, monkeypatch: pytest.MonkeyPatch
) -> None:
    use_embedder(embedder)
    home = tmp_path / "cli-home"
    monkeypatch.setenv("SOUNDING_HOME", str(home))
    monkeypatch.delenv("SOUNDING_TOKEN", raising=False)
    path = write_csv(tmp_path / "a.csv", ROWS)
    run = CliRunner().invoke
    r = run(app, ["import", str(path), "--new-account", "--timezone", "UTC", "--label", "Theme"])
    assert r.exit_code == 1 and "label column 'Theme' is not in the file" in r.output
    r = run(app, ["import", str(path), "--new-account", "--timezone", "UTC", "--label", "series", "--json"])
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["added"] == 3
    # A saved mapping keeps --label; importing with it adds that label to the posts.
    r = run(app, ["mapping", "save", "garden", "--label", "Campaign"])
    assert r.exit_code == 0, r.output
    r = run(app, ["mapping", "show", "garden", "--json"])
    assert json.loads(r.stdout)["labels"] == ["Campaign"]
    r = run(app, ["import", str(path), "--mapping", "garden", "--json"])
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["updated"] == 2  # g1 and g3 gain a campaign; g2's cell is empty
    cli_ws = Workspace(settings=Settings(home=home), embedder=embedder)
    try:
        assert cli_ws.store.label_names() == {"Campaign": 2, "series": 2}
    finally:
        cli_ws.close()

    api_ws = Workspace(settings=Settings(home=tmp_path / "api-home", token=TOKEN), embedder=embedder)
    try:
        with TestClient(create_app(workspace=api_ws)) as client:
            r = client.post(
                "/v1/imports",
                headers=AUTH,
                files={"file": ("a.csv", path.read_bytes(), "text/csv")},
                data={"new_account": "true", "timezone": "UTC", "labels": ["Campaign", "series"]},
            )
            assert r.status_code == 200, r.text
            assert api_ws.store.label_names() == {"Campaign": 2, "series": 2}
            r = client.post(
                "/v1/imports",
                headers=AUTH,
                files={"file": ("a.csv", path.read_bytes(), "text/csv")},
                data={"labels": ["Theme"]},
            )
            assert r.status_code == 422 and "'Theme'" in r.json()["error"]["message"]
    finally:
        api_ws.close()
