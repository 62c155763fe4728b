"""An artefact's config is written whole or not at all."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from models import configfile
from models.configfile import write_config


def test_a_failed_write_keeps_the_old_config_and_leaves_no_temporary_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    write_config(tmp_path, {"version": 1})

    def full(*_a: object, **_k: object) -> None:
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(configfile.os, "replace", full)
    with pytest.raises(OSError, match="No space"):
        write_config(tmp_path, {"version": 2})
    assert json.loads((tmp_path / "config.json").read_text()) == {"version": 1}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["config.json"]
