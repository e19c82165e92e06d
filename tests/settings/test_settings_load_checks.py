"""Load-time checks: a config mistake exits 2 through the CLI, naming the key, before any read."""

import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner

from obsprep.cli.main import cli
from obsprep.exceptions import ConfigError
from obsprep.settings.config import load_config

EXAMPLE = Path(__file__).parents[2] / "examples" / "regular_grid.toml"


def _write(tmp_path, edit):
    """The example config with one textual replacement ``edit = (old, new)``, checked to apply."""
    old, new = edit
    text = EXAMPLE.read_text()
    assert old in text
    path = tmp_path / "config.toml"
    path.write_text(text.replace(old, new, 1))
    return path


def _build_fails_before_reading(tmp_path, monkeypatch, edit):
    import obsprep.readers as readers
    import obsprep.readers.cf as cf

    def no_read(*args, **kwargs):
        raise AssertionError("a file was opened although the configuration is invalid")

    monkeypatch.setattr(readers, "read", no_read)
    monkeypatch.setattr(cf, "open_dataset", no_read)
    result = CliRunner().invoke(cli, ["build", str(_write(tmp_path, edit)), "--out", str(tmp_path / "out")])
    assert not (tmp_path / "out").exists()
    return result


def test_misspelled_reader_option_exits_2_naming_it(tmp_path, monkeypatch):
    edit = ('good_flag_meanings = ["good"]', 'good_flag_meaning = ["good"]')
    result = _build_fails_before_reading(tmp_path, monkeypatch, edit)
    assert result.exit_code == 2, result.output
    assert "sources[2].options.good_flag_meaning" in result.output
    assert "did you mean 'good_flag_meanings'" in result.output


@pytest.mark.parametrize("pattern", ["obs_{dat:%Y%m%d}.nc", "obs_{date:%Y.nc", "obs_}date.nc", "obs_{date.year}.nc"])
def test_placeholder_typo_in_paths_exits_2_naming_the_path(tmp_path, monkeypatch, pattern):
    edit = ('paths = ["obs/altimetry/alt_b_{date:%Y%m%d}.nc"]',
            f'paths = ["obs/altimetry/alt_b_{{date:%Y%m%d}}.nc", "{pattern}"]')
    result = _build_fails_before_reading(tmp_path, monkeypatch, edit)
    assert result.exit_code == 2, result.output
    assert "sources[1].paths[1]" in result.output


def test_placeholder_typo_in_output_name_and_analysis_time(tmp_path, monkeypatch):
    result = _build_fails_before_reading(
        tmp_path, monkeypatch, ('name = "superobs_regular_{date:%Y%m%d}.nc"', 'name = "so_{day}.nc"'))
    assert result.exit_code == 2 and "output.name" in result.output, result.output
    result = _build_fails_before_reading(
        tmp_path, monkeypatch, ('analysis_time = "{date}T00:00:00"', 'analysis_time = "{date:%Y}T00:00:00"'))
    assert result.exit_code == 2 and "window.analysis_time" in result.output, result.output


@pytest.mark.parametrize("key, value", [("start_hours", float("nan")), ("end_hours", float("inf"))])
def test_non_finite_window_hours_are_named(key, value):
    raw = tomllib.loads(EXAMPLE.read_text())
    raw["window"][key] = value
    with pytest.raises(ConfigError, match=rf"window\.{key}.*finite"):
        load_config(raw)


def test_good_patterns_still_expand_as_strftime():
    from obsprep.settings.placeholders import check_path_pattern, expand_path

    # str.format on a datetime applies strftime to the spec (Python datetime docs)
    check_path_pattern("a_{date:%Y%m%d}_{{literal}}.nc", "k")
    assert expand_path("a_{date:%Y%m%d}.nc", __import__("datetime").datetime(2026, 11, 20)) == "a_20261120.nc"
