"""Drift given as differences of projected coordinates becomes ground metres.

The reference is outside obsprep: the ground displacement is laid out on the WGS 84 ellipsoid
with ``pyproj.Geod.fwd`` (GeographicLib geodesics), projected with PROJ, and the differences of
projected coordinates are what a product on its own polar stereographic grid would store.
"""

from __future__ import annotations

import numpy as np
import pyproj
import pytest
from sample_files import projected_drift_file, read_checked

from obsprep.exceptions import ConfigError
from obsprep.geo.rotation import map_displacement_to_east_north, projection_scale_factor

# polar stereographic, south, true scale at 70 S (EPSG:3976, the NSIDC southern sea-ice grid)
CRS = pyproj.CRS("EPSG:3976")
LATITUDES = np.array([-55.0, -60.0, -65.0, -70.0, -75.0, -80.0, -85.0, -89.0])
LONGITUDES = np.array([-170.0, -100.0, -45.0, 0.0, 30.0, 75.0, 120.0, 179.0])
AZIMUTHS = np.array([0.0, 45.0, 90.0, 135.0, 180.0, 225.0, 300.0, 350.0])
GROUND_M = np.array([40e3, 25e3, 10e3, 30e3, 5e3, 50e3, 20e3, 15e3])


def _map_differences(lon, lat, azimuth, ground_m):
    """(dx, dy) in map metres of a ground displacement laid out with pyproj.Geod."""
    end_lon, end_lat, _ = CRS.get_geod().fwd(lon, lat, azimuth, ground_m)
    to_map = pyproj.Transformer.from_crs(CRS.geodetic_crs, CRS, always_xy=True)
    x0, y0 = to_map.transform(lon, lat)
    x1, y1 = to_map.transform(end_lon, end_lat)
    return x0, y0, x1 - x0, y1 - y0


def test_scale_factor_is_proj_s_and_as_large_as_the_issue_says():
    # PROJ's own factors (pyproj.Proj.get_factors); polar stereographic true at 70 S is about
    # +6.6 % at 55 S and -3 % at the pole ([Snyder1987], from memory)
    k = projection_scale_factor(CRS, np.array([0.0, 0.0, 0.0]), np.array([-55.0, -70.0, -89.99]))
    expected = pyproj.Proj(CRS).get_factors(np.zeros(3), np.array([-55.0, -70.0, -89.99]))
    # PROJ's scales are numerical derivatives: meridional and parallel agree to ~3e-11
    np.testing.assert_allclose(k, expected.parallel_scale, rtol=1e-9)
    assert k[0] == pytest.approx(1.066, abs=0.002)
    assert k[1] == pytest.approx(1.0, abs=1e-9)
    assert k[2] == pytest.approx(0.970, abs=0.002)


def test_map_differences_become_the_ground_displacement_at_every_latitude(tmp_path):
    x0, y0, dx, dy = _map_differences(LONGITUDES, LATITUDES, AZIMUTHS, GROUND_M)
    path = projected_drift_file(tmp_path / "drift.nc", x0, y0, dx / 1e3, dy / 1e3, crs="EPSG:3976")
    table = read_checked(path)                      # default: map differences
    east = table[table["quantity"] == "sea_ice_drift_east"]["value"].to_numpy()
    north = table[table["quantity"] == "sea_ice_drift_north"]["value"].to_numpy()
    # the issue's bound is 0.5 %; the end position on the ellipsoid is exact to float rounding
    np.testing.assert_allclose(np.hypot(east, north), GROUND_M, rtol=1e-6)
    assert np.all(np.abs(np.hypot(east, north) / GROUND_M - 1.0) < 0.005)
    azimuth = np.degrees(np.arctan2(east, north)) % 360.0
    np.testing.assert_allclose(azimuth, AZIMUTHS, atol=1e-6)
    # without the scale factor the same file would be off by k: up to +6.6 % at 55 S
    naive = np.hypot(dx, dy) / GROUND_M - 1.0
    assert naive[0] > 0.06 and naive[-1] < -0.025


def test_ground_option_keeps_the_components_as_ground_distances(tmp_path):
    x0, y0, dx, dy = _map_differences(LONGITUDES, LATITUDES, AZIMUTHS, GROUND_M)
    path = projected_drift_file(tmp_path / "drift.nc", x0, y0, dx / 1e3, dy / 1e3, crs="EPSG:3976")
    table = read_checked(path, axis_displacements="ground")
    east = table[table["quantity"] == "sea_ice_drift_east"]["value"].to_numpy()
    north = table[table["quantity"] == "sea_ice_drift_north"]["value"].to_numpy()
    # a rotation keeps the map length, which is k times the ground one
    np.testing.assert_allclose(np.hypot(east, north), np.hypot(dx, dy), rtol=1e-9)


def test_map_errors_are_divided_by_the_scale_factor(tmp_path):
    x0, y0, dx, dy = _map_differences(LONGITUDES, LATITUDES, AZIMUTHS, GROUND_M)
    sigma_km = np.full(LATITUDES.size, 2.0)
    path = projected_drift_file(tmp_path / "drift.nc", x0, y0, dx / 1e3, dy / 1e3,
                                crs="EPSG:3976", sigma_km=sigma_km)
    table = read_checked(path)
    k = pyproj.Proj(CRS).get_factors(LONGITUDES, LATITUDES).parallel_scale
    for quantity in ("sea_ice_drift_east", "sea_ice_drift_north"):
        error = table[table["quantity"] == quantity]["error"].to_numpy()
        # equal component errors on a conformal map: a rotation of an isotropic error
        np.testing.assert_allclose(error, 2e3 / k, rtol=1e-6)


def test_missing_components_stay_missing():
    east, north = map_displacement_to_east_north(
        CRS, np.array([0.0, 10.0]), np.array([-70.0, -75.0]),
        np.array([np.nan, 1e3]), np.array([1e3, np.nan]))
    assert np.isnan(east).all() and np.isnan(north).all()


def test_unknown_measure_is_a_config_error_naming_the_option(tmp_path):
    x0, y0, dx, dy = _map_differences(LONGITUDES[:1], LATITUDES[:1], AZIMUTHS[:1], GROUND_M[:1])
    path = projected_drift_file(tmp_path / "drift.nc", x0, y0, dx / 1e3, dy / 1e3, crs="EPSG:3976")
    with pytest.raises((ConfigError, ValueError), match="axis_displacements"):
        read_checked(path, kind="ice_drift", axis_displacements="projected")
