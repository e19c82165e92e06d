"""Load-time checks: a config mistake exits 2 through the CLI, naming the key, before any read."""

import tomllib
from pathlib import Path

import numpy as np
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


# --- configuration that stays in its lane ------------------------------------------------------

def _one_error_line(result, key):
    """The CLI printed one error line naming ``key`` and no traceback."""
    lines = [line for line in result.output.splitlines() if line.startswith("Error:")]
    assert len(lines) == 1 and key in lines[0], result.output
    assert "Traceback" not in result.output


OUTPUT_NAME = 'name = "superobs_regular_{date:%Y%m%d}.nc"'


@pytest.mark.parametrize("name", [
    "ABSOLUTE",              # an absolute path outside output.directory
    "../x.nc",               # climbs out of output.directory
    "a/b.nc",                # would make a directory
    "..",
    ".hidden_{date:%Y}.nc",  # hidden, and the writers' temporaries start with a dot
    "",
    "so_{date:%D}.nc",       # strftime %D is %m/%d/%y: separators only once expanded (C99 strftime)
    "a\\\\b.nc",             # a Windows separator
])
def test_output_name_must_be_a_plain_file_name(tmp_path, monkeypatch, name):
    escape = tmp_path / "elsewhere" / "escape.nc"
    if name == "ABSOLUTE":
        name = str(escape)
    result = _build_fails_before_reading(tmp_path, monkeypatch, (OUTPUT_NAME, f'name = "{name}"'))
    assert result.exit_code == 2, result.output
    _one_error_line(result, "output.name")
    assert not escape.parent.exists()


def test_output_name_with_placeholders_still_loads():
    raw = tomllib.loads(EXAMPLE.read_text())
    raw["output"]["name"] = "so_{date:%Y-%m-%d}_v1.nc"
    cfg = load_config(raw, "2026-11-20")
    assert cfg.output_path("/tmp/o").name == "so_2026-11-20_v1.nc"


@pytest.mark.parametrize("edit, key", [
    (("start_hours = -72.0", "start_hours = -1.0e6"), "window.start_hours"),
    (("end_hours = 0.0", "end_hours = 1.0e300"), "window.end_hours"),
    (("slot_hours = 24.0", "slot_hours = 1.0e-9"), "window.slot_hours"),
    (('analysis_time = "{date}T00:00:00"', 'analysis_time = "9999-01-01T00:00:00"'),
     "window.analysis_time"),
    (('analysis_time = "{date}T00:00:00"', 'analysis_time = "1500-01-01T00:00:00"'),
     "window.analysis_time"),
])
def test_window_values_are_bounded(tmp_path, monkeypatch, edit, key):
    # datetime64[ns] covers 1677-09-21 .. 2262-04-11 (numpy datetime64 documentation, from
    # memory); numpy wraps silently beyond it, so 9999 and 1500 must be refused, not parsed
    result = _build_fails_before_reading(tmp_path, monkeypatch, edit)
    assert result.exit_code == 2, result.output
    _one_error_line(result, key)


def test_window_longer_than_the_limit_names_end_hours():
    from obsprep.settings.config import MAX_WINDOW_HOURS

    raw = tomllib.loads(EXAMPLE.read_text())
    # start and end each within the limit of the analysis time, the window twice as long
    raw["window"].update(start_hours=-0.9 * MAX_WINDOW_HOURS, end_hours=0.9 * MAX_WINDOW_HOURS)
    with pytest.raises(ConfigError, match="longer than") as err:
        load_config(raw)
    assert err.value.key == "window.end_hours"
    raw["window"].update(start_hours=-0.9 * MAX_WINDOW_HOURS, end_hours=0.0)
    assert load_config(raw).window.n_slots == int(np.ceil(0.9 * MAX_WINDOW_HOURS / 24.0))


#: 1001 layers, one more than the limit
TOO_MANY_LAYERS = ("layer_interfaces = [0.0, 10.0, 20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0]",
                   f"layer_interfaces = [{', '.join(str(float(k)) for k in range(1002))}]")


@pytest.mark.parametrize("edit, key, says", [
    (("nlon = 320\nnlat = 230", "nlon = 100000\nnlat = 100000"), "grid.nlon", "50000000 cells"),
    (("dlon = 0.25", "dlon = nan"), "grid.dlon", "finite"),
    (("dlat = 0.1", "dlat = inf"), "grid.dlat", "finite"),
    (TOO_MANY_LAYERS, "grid.layer_interfaces", "1000 layers"),
])
def test_grid_sizes_and_spacings_checked_before_any_allocation(tmp_path, monkeypatch, edit, key,
                                                               says):
    import tracemalloc

    tracemalloc.start()  # numpy reports its allocations to tracemalloc (numpy >= 1.13)
    try:
        result = _build_fails_before_reading(tmp_path, monkeypatch, edit)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert result.exit_code == 2, result.output
    _one_error_line(result, key)
    assert says in result.output
    assert peak < 200e6  # 100 000 x 100 000 cells would be 80 GB for one float64 field


def test_limits_stated_in_the_readme():
    from obsprep.geo.grid import MAX_GRID_CELLS, MAX_LAYERS
    from obsprep.settings.config import MAX_TIME_SLOTS, MAX_WINDOW_HOURS

    text = (Path(__file__).parents[2] / "README.md").read_text()
    limits = text.split("Limits, checked when the configuration is loaded", 1)[1].split("\n\n")[0]
    for stated in (f"{MAX_WINDOW_HOURS:g} h", f"{MAX_WINDOW_HOURS / 24:g} days",
                   f"{MAX_TIME_SLOTS} time slots", f"{MAX_GRID_CELLS} cells",
                   f"{MAX_LAYERS} layers"):
        assert stated in " ".join(limits.split()), stated


def _mask_file(path, standard_names: bool):
    """A mask file on the example's 230 x 320 grid, with or without CF standard names."""
    import xarray as xr

    sea = np.ones((230, 320), np.int8)
    sea[:20] = 0  # the southern rows are land
    mask_attrs = {"standard_name": "sea_binary_mask"} if standard_names else {"long_name": "mask"}
    depth_attrs = {"units": "m", **({"standard_name": "sea_floor_depth_below_geoid"}
                                    if standard_names else {})}
    path.parent.mkdir(parents=True, exist_ok=True)
    xr.Dataset({"tmask": (("y", "x"), sea, mask_attrs),
                "hdepth": (("y", "x"), np.full((230, 320), 3000.0), depth_attrs)}).to_netcdf(path)


def test_mask_file_without_standard_names_is_a_configuration_error(tmp_path, monkeypatch):
    # Before: the mask was ignored and every cell counted as sea, exit 0.
    mask = tmp_path / "grid" / "regular_grid_mask.nc"
    _mask_file(mask, standard_names=False)
    result = _build_fails_before_reading(tmp_path, monkeypatch, ("type = ", "type = "))
    assert result.exit_code == 2, result.output
    _one_error_line(result, "grid.mask_file")
    assert str(mask) in result.output and "no land/sea mask" in result.output


def test_mask_and_bathymetry_by_variable_name(tmp_path):
    from obsprep.geo.grid import grid_from_config

    _mask_file(tmp_path / "grid" / "regular_grid_mask.nc", standard_names=False)
    config = _write(tmp_path, ('mask_file = "grid/regular_grid_mask.nc"',
                               'mask_file = "grid/regular_grid_mask.nc"\n'
                               'mask_variable = "tmask"\nbathymetry_variable = "hdepth"'))
    cfg = load_config(config)
    grid = grid_from_config(cfg.grid, cfg.base_dir)
    assert grid.sea_mask.sum() == 210 * 320 and not grid.sea_mask[:20].any()
    assert np.all(grid.bathymetry == 3000.0)
    # the variable names need a file to read them from
    raw = tomllib.loads(config.read_text())
    del raw["grid"]["mask_file"]
    with pytest.raises(ConfigError, match="grid.mask_file") as err:
        load_config(raw)
    assert err.value.key == "grid.mask_variable"
