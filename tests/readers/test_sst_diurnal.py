"""The diurnal-warming guard on a CF (non-GDS) skin SST grid read by the ``sst_grid`` reader.

Day or night: the sun's hour angle at 12:00 UTC is 0 at longitude 0 (local noon) and 180
degrees at longitude 180 (local midnight), on the equator near the equinox (spherical
astronomy; [NOAASolar])."""

from __future__ import annotations

import netCDF4
import numpy as np

from obsprep.readers import read


def _grid(tmp_path, standard_name, wind=None):
    path = tmp_path / f"{standard_name}.nc"
    with netCDF4.Dataset(path, "w") as nc:
        for name, size in (("time", 1), ("lat", 1), ("lon", 4)):
            nc.createDimension(name, size)
        t = nc.createVariable("time", "f8", ("time",))
        t.setncatts({"standard_name": "time", "units": "hours since 2026-03-20 00:00:00"})
        t[:] = [12.0]
        lat = nc.createVariable("lat", "f4", ("lat",))
        lat.setncatts({"standard_name": "latitude", "units": "degrees_north"})
        lat[:] = [0.0]
        lon = nc.createVariable("lon", "f4", ("lon",))
        lon.setncatts({"standard_name": "longitude", "units": "degrees_east"})
        lon[:] = [0.0, 10.0, 180.0, -170.0]
        v = nc.createVariable("sst", "f4", ("time", "lat", "lon"))
        v.setncatts({"standard_name": standard_name, "units": "K"})
        v[:] = np.full((1, 1, 4), 300.0)
        if wind is not None:
            w = nc.createVariable("wind", "f4", ("time", "lat", "lon"))
            w.setncatts({"standard_name": "wind_speed", "units": "m s-1"})
            w[:] = np.asarray(wind, dtype=np.float32).reshape(1, 1, 4)
    return str(path)


def reasons(table):
    return [None if isinstance(r, float) else r for r in table["rejected"].astype(object)]


def test_cf_skin_sst_grid_by_day_is_rejected_by_the_guard_with_wind_keeping_windy_days(tmp_path):
    path = _grid(tmp_path, "sea_surface_skin_temperature", wind=[8.0, 2.0, 0.0, 0.0])
    assert reasons(read(path, kind="sst_grid")) == [None] * 4
    assert reasons(read(path, kind="sst_grid", diurnal_guard="night")) == [
        "diurnal_warming", "diurnal_warming", None, None]
    table = read(path, kind="sst_grid", diurnal_guard="night_or_windy")
    assert reasons(table) == [None, "diurnal_warming", None, None]
    assert "wind" in table.attrs["variables"]


def test_cf_foundation_sst_grid_is_left_alone(tmp_path):
    path = _grid(tmp_path, "sea_surface_foundation_temperature")
    table = read(path, kind="sst_grid", diurnal_guard="night")
    assert reasons(table) == [None] * 4
    assert set(table["quantity"].astype(str)) == {"sea_surface_foundation_temperature"}
