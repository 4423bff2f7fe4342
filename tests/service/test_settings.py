"""Settings: defaults, TOML file, environment variables, overrides."""

from __future__ import annotations

from pathlib import Path

import pytest

from service.settings import Settings, SettingsError, load_settings


def test_defaults_match_the_documented_ones() -> None:
    s = load_settings({})
    assert (s.host, s.port, s.data_dir, s.api_keys) == ("127.0.0.1", 8000, Path("data"), ())


def test_file_then_environment_then_overrides(tmp_path: Path) -> None:
    file = tmp_path / "rutwise.toml"
    file.write_text('port = 9001\napi_keys = ["k1", "k2"]\ndata_dir = "/srv/ruts"\n'
                    'cors_origins = ["https://maps.example"]\nworkers = 3\n')
    env = {"RUTWISE_SETTINGS": str(file), "RUTWISE_WORKERS": "5"}
    s = load_settings(env, port=None, host="0.0.0.0")
    assert s.port == 9001 and s.workers == 5 and s.host == "0.0.0.0"
    assert s.api_keys == ("k1", "k2") and s.data_dir == Path("/srv/ruts")
    assert s.cors_origins == ("https://maps.example",)


def test_comma_lists_from_the_environment() -> None:
    s = load_settings({"RUTWISE_API_KEYS": " a , b,, ", "RUTWISE_MAX_UPLOAD_MB": "0.5"})
    assert s.api_keys == ("a", "b")
    assert s.max_upload_bytes == 512 * 1024


@pytest.mark.parametrize("env", [{"RUTWISE_PORT": "eighty"}, {"RUTWISE_WORKERS": "0"},
                                 {"RUTWISE_PORT": "70000"}])
def test_bad_values_are_refused_with_the_setting_named(env: dict[str, str]) -> None:
    with pytest.raises(SettingsError, match="port|workers"):
        load_settings(env)


def test_unknown_keys_in_the_file_are_refused(tmp_path: Path) -> None:
    file = tmp_path / "s.toml"
    file.write_text("prot = 1\n")
    with pytest.raises(SettingsError, match="prot"):
        load_settings({"RUTWISE_SETTINGS": str(file)})


def test_settings_are_frozen() -> None:
    s = Settings()
    with pytest.raises(AttributeError):
        s.port = 1  # type: ignore[misc]
