"""Reader profiles: per-source overrides of variable names, attributes and fill values, for
products that bend the CF conventions, applied once in the shared CF layer.

References: CF conventions 1.10 (from memory) for packing (unpacked = stored * scale_factor +
add_offset, fill compared on the stored value), standard_name modifiers and flag_values /
flag_meanings; netCDF4's own unpacking as the reference implementation.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest
from sample_files import write_gds2

from obsprep.exceptions import ConfigError, InputFileError
from obsprep.readers import read
from obsprep.run.build import build
from obsprep.settings.config import load_config

RAW = np.array([[[2685, 2690, -999], [2700, 2710, 2720]]], dtype=np.int16)  # stored int16


def bent_product(path):
    """A gridded SST that bends the conventions: no standard names, unusable units on the SST,
    a fill value without _FillValue, odd flag meanings, coordinates without units."""
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("t", 1)
        nc.createDimension("y", 2)
        nc.createDimension("x", 3)
        t = nc.createVariable("t", "f8", ("t",))
        t.units = "seconds since 1981-01-01 00:00:00"
        t[:] = [1.3e9]
        for name, dim, values in (("nav_lat", "y", [-61.0, -60.0]),
                                  ("nav_lon", "x", [-30.0, -29.0, -28.0])):
            v = nc.createVariable(name, "f4", (dim,))
            v[:] = values
        v = nc.createVariable("sst_foo", "i2", ("t", "y", "x"))
        v.set_auto_maskandscale(False)
        v.setncatts({"scale_factor": 0.01, "add_offset": 273.15, "units": "Kelvin degrees x 100",
                     "long_name": "sea surface temperature (L3 product, our own layout)"})
        v[:] = RAW
        e = nc.createVariable("sst_err", "f4", ("t", "y", "x"))
        e.units = "K"
        e[:] = np.full((1, 2, 3), 0.3)
        q = nc.createVariable("qc", "i1", ("t", "y", "x"))
        q.setncatts({"flag_values": np.array([0, 1], np.int8), "flag_meanings": "0 1"})
        q[:] = np.array([[[0, 1, 0], [0, 0, 1]]], dtype=np.int8)
    return str(path)


PROFILE = {
    "variables": {"sea_surface_temperature": "sst_foo", "latitude": "nav_lat",
                  "longitude": "nav_lon", "time": "t",
                  "sea_surface_temperature_error": "sst_err",
                  "sea_surface_temperature_flag": "qc"},
    "attributes": {"sst_foo": {"units": "K"}, "qc": {"flag_meanings": "good bad"}},
    "fill_value": {"sst_foo": -999},
}


def reasons(table):
    return [None if isinstance(r, float) else r for r in table["rejected"].astype(object)]


def test_profile_makes_a_bent_product_readable(tmp_path):
    path = bent_product(tmp_path / "bent.nc")
    with pytest.raises(InputFileError):
        read(path)   # no reader recognises it as it is
    table = read(path, kind="sst_grid", reader_profile=PROFILE)
    # CF packing: unpacked = stored * scale_factor + add_offset; K -> degC (SI Brochure, from
    # memory: t/degC = T/K - 273.15); -999 stored is the fill
    expected = np.where(RAW == -999, np.nan, RAW * 0.01 + 273.15).ravel() - 273.15
    np.testing.assert_allclose(table["value"], expected, atol=1e-9)
    assert reasons(table) == [None, "provider_flag", "missing_value", None, None,
                              "provider_flag"]
    np.testing.assert_allclose(table["error"], 0.3, rtol=1e-6)
    np.testing.assert_allclose(table["lat"], [-61.0] * 3 + [-60.0] * 3)
    assert table.attrs["variables"]["sst_foo"] == "K"
    assert read(path, reader_profile=PROFILE).attrs["kind"] == "sst_grid"  # now auto-detected


def test_fill_value_false_and_attribute_removal(tmp_path):
    path = bent_product(tmp_path / "bent.nc")
    profile = {**PROFILE, "fill_value": {"sst_foo": False},
               "attributes": {**PROFILE["attributes"], "sst_err": {"units": False}}}
    table = read(path, kind="sst_grid", reader_profile=profile)
    # without a fill value the stored -999 is a value: -999 * 0.01 + 273.15 K = -9.99 degC
    assert table["value"].iloc[2] == pytest.approx(-9.99, abs=1e-9)
    # the error without units takes the data's units (K): unchanged as a difference
    np.testing.assert_allclose(table["error"], 0.3, rtol=1e-6)


def test_good_flag_meanings_in_the_profile(tmp_path):
    path = bent_product(tmp_path / "bent.nc")
    table = read(path, kind="sst_grid",
                 reader_profile={**PROFILE, "good_flag_meanings": ["good", "bad"]})
    assert "provider_flag" not in reasons(table)


def test_renaming_role_for_a_format_specific_variable(tmp_path):
    quality = np.array([[5, 2], [4, 3]])
    path = write_gds2(tmp_path / "l2p.nc", np.full((2, 2), 290.0), quality=quality)
    with netCDF4.Dataset(path, "a") as nc:
        nc.renameVariable("quality_level", "ql")
    assert "quality_level" not in reasons(read(path))
    table = read(path, reader_profile={"variables": {"quality_level": "ql"}})
    assert reasons(table) == [None, "quality_level", None, "quality_level"]


def test_profile_naming_an_absent_variable_is_a_one_line_error(tmp_path):
    path = bent_product(tmp_path / "bent.nc")
    with pytest.raises(InputFileError) as info:
        read(path, reader_profile={"variables": {"latitude": "lat_nope"}})
    message = str(info.value)
    assert path in message and "'lat_nope'" in message and "\n" not in message
    with pytest.raises(InputFileError, match="unknown reader profile key"):
        read(path, reader_profile={"variable": {}})


def test_profile_in_a_build_config(tmp_path):
    bent_product(tmp_path / "bent_20261119.nc")
    cfg = {
        "window": {"analysis_time": "2022-03-14T00:00:00", "start_hours": -48.0},
        "grid": {"type": "regular", "lon_min": -31.0, "lat_min": -62.0, "dlon": 1.0,
                 "dlat": 1.0, "nlon": 5, "nlat": 4},
        "sources": [{"sensor": "bent_sst", "paths": [str(tmp_path / "bent_*.nc")],
                     "error": {"rule": "file"}, "reader": PROFILE}],
        "output": {"directory": str(tmp_path / "out")},
    }
    result = build(cfg)
    entry = result.ledger.entries[0]
    assert entry.status == "ok" and entry.kind == "sst_grid"
    assert (entry.read, entry.kept) == (6, 3), entry.rejected
    assert entry.rejected == {"provider_flag": 2, "missing_value": 1}
    cfg["sources"][0]["reader"] = {"variabels": {}}
    with pytest.raises(ConfigError, match=r"sources\[0\]\.reader\.variabels.*variables"):
        load_config(cfg)


def test_inspect_with_a_source_of_a_config(tmp_path):
    from click.testing import CliRunner
    from sample_files import to_toml as _to_toml

    from obsprep.cli.main import cli

    path = bent_product(tmp_path / "bent.nc")
    cfg = {
        "window": {"analysis_time": "2026-11-20T00:00:00"},
        "grid": {"type": "regular", "lon_min": -31.0, "lat_min": -62.0, "dlon": 1.0,
                 "dlat": 1.0, "nlon": 5, "nlat": 4},
        "sources": [{"sensor": "bent_sst", "paths": ["bent*.nc"], "kind": "sst_grid",
                     "error": {"rule": "file"}, "reader": PROFILE}],
    }
    toml = tmp_path / "c.toml"
    toml.write_text(_to_toml(cfg))
    out = CliRunner().invoke(cli, ["inspect", path, "--config", str(toml), "--source",
                                   "bent_sst"])
    assert out.exit_code == 0, out.output
    assert "kind: sst_grid" in out.output and "sst_foo [K]" in out.output
    assert "valid 3, rejected provider_flag 2, missing_value 1" in out.output
    bad = CliRunner().invoke(cli, ["inspect", path, "--config", str(toml), "--source", "nope"])
    assert bad.exit_code == 2 and "bent_sst" in bad.output
    plain = CliRunner().invoke(cli, ["inspect", path])
    assert plain.exit_code == 1 and "no reader recognises" in plain.output
    # obsprep read with the same source writes the table the Python reader gives
    import pandas as pd

    csv = tmp_path / "table.csv"
    out = CliRunner().invoke(cli, ["read", path, "-o", str(csv), "--config", str(toml),
                                   "--source", "bent_sst"])
    assert out.exit_code == 0, out.output
    written = pd.read_csv(csv)
    expected = read(path, kind="sst_grid", reader_profile=PROFILE)
    np.testing.assert_allclose(written["value"], expected["value"], atol=1e-9)
    assert set(written["sensor"]) == {"bent_sst"}
