"""Settings come from ``SOUNDING_*`` variables: code over environment over defaults."""

from __future__ import annotations

from pathlib import Path

import pytest

from models.errors import InputError
from service.settings import Settings, get_settings


def test_environment_fills_settings_and_code_wins(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SOUNDING_NEIGHBOURS", "35")
    monkeypatch.setenv("SOUNDING_EMBED_PRELOAD", "false")
    monkeypatch.setenv("SOUNDING_HOME", "/tmp/from-env")
    s = Settings(home=Path("/tmp/from-code"))
    assert s.neighbours == 35
    assert s.embed_preload is False
    assert s.home == Path("/tmp/from-code")
    assert Settings().home == Path("/tmp/from-env")


def test_names_are_read_in_any_case_and_strangers_are_ignored(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("sounding_max_k", "7")
    monkeypatch.setenv("SOUNDING_NOT_A_SETTING", "x")
    s = Settings()
    assert s.max_k == 7
    assert not hasattr(s, "not_a_setting")


def test_a_list_is_written_as_json(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SOUNDING_ALLOWED_HOSTS", '["a.example", "b.example"]')
    assert Settings().allowed_hosts == ["a.example", "b.example"]
    monkeypatch.setenv("SOUNDING_ALLOWED_HOSTS", "a.example")
    with pytest.raises(InputError, match=r"SOUNDING_ALLOWED_HOSTS='a\.example'.*valid list"):
        get_settings()


def test_a_declared_bound_holds_for_the_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SOUNDING_NEIGHBOURS", "201")  # le=200 in the field
    with pytest.raises(InputError, match="SOUNDING_NEIGHBOURS='201'"):
        get_settings()
    monkeypatch.delenv("SOUNDING_NEIGHBOURS")
    assert get_settings().neighbours == Settings.model_fields["neighbours"].default
