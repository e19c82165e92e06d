"""Model equivalents of super-observations from model files on the model grid: bilinear in the
grid (scipy's RegularGridInterpolator as reference implementation), linear in depth (numpy.interp
as reference), nearest output time, ensemble mean and variance (numpy, ddof = 1), units (pint),
member files against one file with a member dimension, and clear errors for bad files."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy.interpolate import RegularGridInterpolator

from obsprep.audit.ensemble import fractional_indices, model_equivalents
from obsprep.exceptions import InputFileError
from obsprep.geo.grid import CurvilinearGrid, ProjectedGrid, RegularGrid

TIMES = np.array(["2026-11-19T00", "2026-11-19T12", "2026-11-20T00"], dtype="datetime64[ns]")


def regular_grid():
    # 8 columns of 1 degree from 0 E, 6 rows of 1 degree from 40 N: centres at 0.5, 1.5, ...
    return RegularGrid(0.0, 40.0, 1.0, 1.0, 8, 6, layer_interfaces=[0, 10, 30, 100])


def superobs_at(grid, quantity, lon, lat, depth=None, time=None):
    i, j = grid.locate(lon, lat)
    n = len(lon)
    return pd.DataFrame({"quantity": quantity, "lon": lon, "lat": lat,
                         "depth": np.zeros(n) if depth is None else depth,
                         "time": np.full(n, TIMES[0]) if time is None else time, "i": i, "j": j,
                         "time_end": np.datetime64("NaT", "ns")})


def write_model(path, data, dims, coords=None, name="sst", standard_name="sea_surface_temperature",
                units="degC"):
    ds = xr.Dataset({name: (dims, data, {"standard_name": standard_name, "units": units})},
                    coords=coords or {})
    ds.to_netcdf(path)
    return path


def test_bilinear_on_a_regular_grid_equals_scipy(tmp_path):
    grid = regular_grid()
    rng = np.random.default_rng(0)
    field = rng.normal(5.0, 1.0, grid.shape)
    path = write_model(tmp_path / "m.nc", field, ("lat", "lon"))
    lon = rng.uniform(0.5, 7.5, 200)
    lat = rng.uniform(40.5, 45.5, 200)
    eq = model_equivalents([path], superobs_at(grid, "sea_surface_temperature", lon, lat), grid)
    reference = RegularGridInterpolator((40.5 + np.arange(6), 0.5 + np.arange(8)), field)
    np.testing.assert_allclose(eq["sea_surface_temperature"].mean, reference(np.c_[lat, lon]),
                               rtol=1e-12)
    assert eq["sea_surface_temperature"].members == 1
    assert np.isnan(eq["sea_surface_temperature"].variance).all()   # one state: no spread


def test_bilinear_on_a_projected_grid_is_exact_for_a_plane(tmp_path):
    grid = ProjectedGrid("EPSG:3031", -2600000.0, 600000.0, 10000.0, 10000.0, 30, 20)
    x = -2600000.0 + (np.arange(30) + 0.5) * 10000.0
    y = 600000.0 + (np.arange(20) + 0.5) * 10000.0
    plane = lambda xx, yy: 1.0 + 2e-6 * xx - 3e-6 * yy            # noqa: E731
    path = write_model(tmp_path / "m.nc", plane(*np.meshgrid(x, y)), ("y", "x"),
                       name="sla", standard_name="sea_surface_height_above_sea_level", units="m")
    rng = np.random.default_rng(1)
    px = rng.uniform(x[0], x[-1], 100)
    py = rng.uniform(y[0], y[-1], 100)
    lon, lat = grid.xy_to_lonlat(px, py)               # PROJ through pyproj
    eq = model_equivalents([path], superobs_at(grid, "sea_level_anomaly", lon, lat), grid)
    np.testing.assert_allclose(eq["sea_level_anomaly"].mean, plane(px, py), rtol=0, atol=1e-9)


def test_curvilinear_fractional_indices_at_centres_and_midpoints():
    lon, lat = np.meshgrid(0.5 + np.arange(8) * 0.2, 60.5 + np.arange(6) * 0.1)
    grid = CurvilinearGrid(lon, lat)
    j, i = np.array([2, 3]), np.array([4, 1])
    fi, fj = fractional_indices(grid, lon[j, i], lat[j, i], i, j)
    np.testing.assert_allclose(np.c_[fi, fj], np.c_[i, j], atol=1e-9)
    # half-way in longitude between two centres: half a cell along i (to the curvature of the
    # sphere over 0.1 degree: a few 1e-3 of a cell)
    mid_lon = 0.5 * (lon[j, i] + lon[j, i + 1])
    fi, fj = fractional_indices(grid, mid_lon, lat[j, i], i, j)
    np.testing.assert_allclose(fi, i + 0.5, atol=0.01)
    np.testing.assert_allclose(fj, j, atol=0.01)


def test_depth_time_members_and_units(tmp_path):
    grid = regular_grid()
    depth_levels = np.array([0.0, 10.0, 30.0, 100.0])
    rng = np.random.default_rng(2)
    members = rng.normal(0.0, 1.0, (5, 3, 4) + grid.shape) + depth_levels[None, None, :, None, None] / 50
    kelvin = members + 273.15
    coords = {"time": TIMES, "depth": ("depth", depth_levels, {"positive": "down", "units": "m"})}
    one = write_model(tmp_path / "all.nc", kelvin, ("member", "time", "depth", "lat", "lon"),
                      coords, name="temp", standard_name="sea_water_temperature", units="K")
    files = [write_model(tmp_path / f"m{m}.nc", kelvin[m], ("time", "depth", "lat", "lon"), coords,
                         name="temp", standard_name="sea_water_temperature", units="K")
             for m in range(5)]
    # points at cell centres (no horizontal weights), depths between levels, times near outputs
    j, i = np.array([1, 2, 4, 5]), np.array([0, 3, 6, 7])
    depth = np.array([5.0, 12.5, 64.0, 100.0])
    times = TIMES[[0, 1, 1, 2]] + np.array([5, -5, 5, -1], dtype="timedelta64[h]")
    rows = superobs_at(grid, "sea_water_temperature", 0.5 + i, 40.5 + j, depth, times)
    a = model_equivalents([one], rows, grid)["sea_water_temperature"]
    b = model_equivalents(files, rows, grid)["sea_water_temperature"]
    np.testing.assert_allclose(a.mean, b.mean, rtol=1e-12)
    np.testing.assert_allclose(a.variance, b.variance, rtol=1e-10)
    assert a.members == b.members == 5
    nearest = np.array([0, 1, 1, 2])           # by hand: 05 h -> 00 h, 07 h -> 12 h, ...
    np.testing.assert_allclose(a.time_gap, [5 * 3600, 5 * 3600, 5 * 3600, 3600])
    # reference: numpy.interp in depth of each member, K -> degC (SI definition), then numpy
    # mean and variance (ddof = 1) over the members
    values = np.array([[np.interp(depth[p], depth_levels, members[m, nearest[p], :, j[p], i[p]])
                        for p in range(4)] for m in range(5)])
    np.testing.assert_allclose(a.mean, values.mean(axis=0), atol=1e-9)
    np.testing.assert_allclose(a.variance, values.var(axis=0, ddof=1), rtol=1e-8)


def test_land_corners_are_left_out(tmp_path):
    grid = regular_grid()
    field = np.arange(48, dtype=float).reshape(grid.shape)
    field[2, 3] = np.nan
    path = write_model(tmp_path / "m.nc", field, ("lat", "lon"))
    # a quarter of the way from centre (2, 2) towards (3, 3): weights 9/16, 3/16, 3/16, 1/16 for
    # (2,2), (2,3), (3,2), (3,3); (2,3) is land, so the rest are renormalised by 13/16 (by hand)
    eq = model_equivalents([path], superobs_at(grid, "sea_surface_temperature",
                                               np.array([2.75]), np.array([42.75])), grid)
    expected = (9 * field[2, 2] + 3 * field[3, 2] + 1 * field[3, 3]) / 13
    np.testing.assert_allclose(eq["sea_surface_temperature"].mean, [expected], rtol=1e-12)


def test_bad_model_files_are_named(tmp_path):
    grid = regular_grid()
    rows = superobs_at(grid, "sea_surface_temperature", np.array([1.0]), np.array([41.0]))
    wrong = write_model(tmp_path / "wrong.nc", np.zeros((5, 8)), ("lat", "lon"))
    with pytest.raises(InputFileError, match=r"wrong\.nc, variable 'sst': expected the last two"):
        model_equivalents([wrong], rows, grid)
    odd = write_model(tmp_path / "odd.nc", np.zeros((2, 6, 8)), ("band", "lat", "lon"))
    with pytest.raises(InputFileError, match="dimension 'band'"):
        model_equivalents([odd], rows, grid)
    units = write_model(tmp_path / "units.nc", np.zeros(grid.shape), ("lat", "lon"), units="m")
    with pytest.raises(InputFileError, match="units 'm' cannot be converted to 'degC'"):
        model_equivalents([units], rows, grid)
