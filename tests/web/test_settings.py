"""Settings: one pydantic-settings class, every field defaulted and described, EXOMAP_ environment prefix."""

from __future__ import annotations

from pathlib import Path

import pytest
from exomap.web.settings import Settings


def test_every_field_has_a_default_and_a_description() -> None:
    assert Settings.model_fields, "Settings has no fields"
    for name, info in Settings.model_fields.items():
        assert info.description and len(info.description) > 10, f"{name} is not described"
        assert not info.is_required(), f"{name} has no default"


def test_limits_defaults() -> None:
    s = Settings()
    # the documented defaults: a 500 x 500 map, 7 days, 200 events, 1 MB bodies, 30 s budget
    assert s.max_map_cells == 500 * 500
    assert s.max_duration_s == pytest.approx(7 * 24 * 3600.0, rel=0, abs=0)
    assert s.max_events == 200
    assert s.max_body_bytes == 1_000_000
    assert s.request_time_budget_s == 30.0
    assert s.save_token is None
    assert s.cors_origins == []
    assert s.host == "127.0.0.1"


def test_environment_prefix(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("EXOMAP_DATA_DIR", str(tmp_path / "store"))
    monkeypatch.setenv("EXOMAP_PORT", "8123")
    monkeypatch.setenv("EXOMAP_CORS_ORIGINS", '["http://127.0.0.1:9000"]')
    monkeypatch.setenv("EXOMAP_SAVE_TOKEN", "s3cret")
    s = Settings()
    assert s.data_dir == tmp_path / "store"
    assert s.port == 8123
    assert s.cors_origins == ["http://127.0.0.1:9000"]
    assert s.save_token == "s3cret"


def test_bad_setting_is_refused_naming_it() -> None:
    from pydantic import ValidationError

    with pytest.raises(ValidationError, match="max_map_cells"):
        Settings(max_map_cells=0)
