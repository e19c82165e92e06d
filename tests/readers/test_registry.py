"""The reader seam: a reader declared in one module is found by every part that needs it
(option checks at load, ``obsprep inspect --kinds``, guessing, reading), with nothing else to
edit.  The reader here is a stand-in written by the test, registered for the test only."""

from __future__ import annotations

import dataclasses

import netCDF4
import numpy as np
import pytest
from click.testing import CliRunner

from obsprep.cli.main import cli
from obsprep.exceptions import ConfigError
from obsprep.readers import cf, read, registry


@dataclasses.dataclass(frozen=True)
class _StandInOptions(cf.CfOptions):
    offset_m: float = cf.option(0.0, "added to every value, m", lambda name, v: float(v))


class _StandInReader(registry.Reader):
    kind = "stand_in_sla"
    description = "stand-in along-track sea level (test only)"
    Options = _StandInOptions
    priority = 100  # asked first, so guessing finds it

    def guess_can_open(self, ds) -> bool:
        return ds.attrs.get("title") == "stand-in"

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        from obsprep.model.quantities import get_quantity

        decoded = cf.decode_data_variable(ds, "sla", get_quantity("sea_level_anomaly"), path)
        decoded = dataclasses.replace(decoded, values=decoded.values + options.offset_m)
        lon, lat = cf.horizontal_position(ds, "sla", path, reading_part=reading_part)
        time = cf.observation_time(ds, "sla", path)
        return cf.observation_table(path, options, decoded, lon=lon, lat=lat, time=time,
                                    leave_out_rejected=leave_out_rejected)


@pytest.fixture
def stand_in(monkeypatch):
    monkeypatch.setitem(registry._REGISTRY, _StandInReader.kind, _StandInReader())
    return _StandInReader


def _write(path):
    with netCDF4.Dataset(path, "w") as nc:  # CF 1.10 point series [CF]
        nc.title = "stand-in"
        nc.createDimension("obs", 3)
        for name, std, units, values in (
                ("time", "time", "seconds since 2026-11-19 00:00:00", [0.0, 60.0, 120.0]),
                ("lat", "latitude", "degrees_north", [-60.0, -60.1, -60.2]),
                ("lon", "longitude", "degrees_east", [10.0, 10.1, 10.2])):
            v = nc.createVariable(name, "f8", ("obs",))
            v.standard_name, v.units, v[:] = std, units, values
        sla = nc.createVariable("sla", "f8", ("obs",))
        sla.standard_name, sla.units = "sea_surface_height_above_sea_level", "cm"
        sla.coordinates = "time lat lon"
        sla[:] = [1.0, 2.0, 3.0]


def test_a_registered_reader_is_used_by_guessing_reading_and_its_options(stand_in, tmp_path):
    path = tmp_path / "a.nc"
    _write(path)
    table = read(path, offset_m=0.5)
    assert table.attrs["kind"] == stand_in.kind
    # 1 cm = 0.01 m (udunits); plus the declared option
    np.testing.assert_allclose(table["value"], [0.51, 0.52, 0.53], rtol=1e-12)


def test_its_options_are_checked_at_load_and_listed(stand_in):
    registry.validate_options(stand_in.kind, {"offset_m": 1.0}, "sources[0].options")
    with pytest.raises(ConfigError, match=r"sources\[0\]\.options\.offset_mm.*did you mean 'offset_m'"):
        registry.validate_options(stand_in.kind, {"offset_mm": 1.0}, "sources[0].options")
    listing = CliRunner().invoke(cli, ["inspect", "--kinds"]).output
    assert f"{stand_in.kind}: {stand_in.description}" in listing
    assert "option offset_m: added to every value, m" in listing


@pytest.mark.parametrize("kind, options, named", [
    ("alongtrack", {"sensor": "a", "pass_gap_seconds": -1}, "pass_gap_seconds"),
    ("auto", {"min_quality_level": "x"}, "min_quality_level"),
    ("argo", {"platform": "p", "sensor": 3}, "sensor"),
])
def test_an_ill_typed_option_is_named_at_load(kind, options, named):
    # the options each reader declares (GDS 2.0 quality levels 0-5 [GDS2]; a gap is a
    # positive number of seconds; a sensor name is text)
    with pytest.raises(ConfigError, match=rf"sources\[0\]\.options\.{named}'"):
        registry.validate_options(kind, options, "sources[0].options")
