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


def test_empty_save_token_is_refused_loudly(monkeypatch: pytest.MonkeyPatch) -> None:
    from pydantic import ValidationError

    monkeypatch.setenv("EXOMAP_SAVE_TOKEN", "")
    with pytest.raises(ValidationError, match="save_token") as info:
        Settings()
    assert "unset it" in str(info.value)


@pytest.mark.parametrize("token", ["pässwort", "two words", "tab\there"])
def test_token_a_header_cannot_carry_is_refused(token: str) -> None:
    from pydantic import ValidationError

    with pytest.raises(ValidationError, match="printable ASCII"):
        Settings(save_token=token)


def test_plain_string_cors_origins_are_split_on_commas(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("EXOMAP_CORS_ORIGINS", "http://127.0.0.1:9000, https://plant.example")
    assert Settings().cors_origins == ["http://127.0.0.1:9000", "https://plant.example"]
    monkeypatch.setenv("EXOMAP_CORS_ORIGINS", "")
    assert Settings().cors_origins == []


def test_cors_origin_that_is_not_an_origin_is_a_clear_error(monkeypatch: pytest.MonkeyPatch) -> None:
    from pydantic import ValidationError

    monkeypatch.setenv("EXOMAP_CORS_ORIGINS", "plant.example")
    with pytest.raises(ValidationError, match="is not an origin"):
        Settings()


def test_serve_prints_one_line_per_bad_setting(monkeypatch: pytest.MonkeyPatch, capsys) -> None:
    import argparse

    from exomap.cli import serve

    monkeypatch.setenv("EXOMAP_SAVE_TOKEN", "")
    monkeypatch.setenv("EXOMAP_CORS_ORIGINS", "[not json")
    parser = argparse.ArgumentParser()
    serve.add_parser(parser.add_subparsers())
    assert serve.run(parser.parse_args(["serve"])) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert "EXOMAP_SAVE_TOKEN" in err and "EXOMAP_CORS_ORIGINS" in err


def test_every_setting_is_documented_in_the_readme() -> None:
    """README's settings table has one row per field: the variable, its default and its description."""
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    rows = {}
    for line in readme.splitlines():
        if line.startswith("| `EXOMAP_"):
            cells = [c.strip() for c in line.strip("|").split("|")]
            rows[cells[0].strip("`")] = cells
    for name, info in Settings.model_fields.items():
        variable = f"EXOMAP_{name.upper()}"
        assert variable in rows, f"{variable} is missing from README's settings table"
        assert rows[variable][2] == info.description, f"README's description of {variable} differs from settings.py"
