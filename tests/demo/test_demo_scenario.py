"""Tests of the "weddell-spring" demo scenario (obsprep.demo).

The demo files are checked with tools from outside the project: netCDF4's CF unpacking and
xarray's decoding, PROJ through pyproj (grid cell centres, CRS from CF grid mappings, meridian
convergence), pyproj.Geod (geodesics, [Karney2013], J. Geodesy 87), TEOS-10 through gsw
(pressure to depth, freezing point) and pint through cf_xarray (units).

Statistical tolerances: the residuals (value - truth) are Gaussian with a known covariance C:
the raw error sigma_i with a pairwise correlation rho inside an error group (pass, granule,
file; obsprep.demo.noise) plus the sub-cell variability s^2, shared by the values of one
sub-cell unit (a pixel, a point, a profile's model layer).  The sample mean then has variance
sum_ij C_ij / n^2 and the mean square about zero, m2 = sum r_i^2 / n, has expectation
sum_i C_ii / n and variance 2 sum_ij C_ij^2 / n^2 (Isserlis' theorem for Gaussian fourth
moments; from memory).  Checks allow 5 standard errors, so a correct generator fails with
probability below 1e-6 per check, while a sigma wrong by a few % or a bias of sigma/10 fails.
"""

from __future__ import annotations

import glob
import json
import time
import tomllib
from pathlib import Path

import gsw
import netCDF4
import numpy as np
import pandas as pd
import pyproj
import pytest
import xarray as xr

from obsprep.demo import truth as demo_truth
from obsprep.demo import truth_value, write_demo
from obsprep.demo.noise import ERROR_CORRELATION, FOOTPRINT_KM2, SUBCELL_SIGMA
from obsprep.demo.scenario import (
    CTD_STATIONS,
    FLOAT_COUNT,
    LAYER_INTERFACES_M,
    SWATH_COLUMNS,
    SWATH_GRANULES_PER_DAY,
    SWATH_ROWS,
)
from obsprep.exceptions import ConfigError
from obsprep.model.quantities import QUANTITIES

SCALE = 0.05               # ~5 % of the full swath / gridded-SST volume: the tests take seconds
STANDARD_ERRORS = 5.0
KELVIN_OFFSET = 273.15     # degC = K - 273.15 (SI definition of the Celsius scale)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return write_demo(tmp_path_factory.mktemp("weddell"), scale=SCALE)


@pytest.fixture(scope="module")
def manifest(demo):
    return json.loads(Path(demo["manifest"]).read_text())


@pytest.fixture(scope="module")
def config(demo):
    with open(demo["config"], "rb") as f:
        return tomllib.load(f)


def all_netcdf_files(demo):
    return [demo["grid"], demo["truth"], demo["ensemble"]] + [
        p for paths in demo["files"].values() for p in paths]


def decoded(path, name):
    """Variable ``name`` unpacked by netCDF4 (CF scale_factor/add_offset/_FillValue), fill
    as NaN: the reference decoding."""
    with netCDF4.Dataset(path) as ds:
        values = ds[name][...]
    return np.ma.filled(np.ma.asarray(values).astype(np.float64), np.nan)


def decoded_time(path, name):
    """CF time variable ``name`` decoded by xarray/cftime to datetime64[ns]."""
    with xr.open_dataset(path) as ds:
        return ds[name].values.astype("datetime64[ns]")


def _block_sums(weights, *labels):
    """sum over blocks of equal labels of (sum of weights in the block)^2."""
    frame = pd.DataFrame({f"l{k}": np.asarray(v).ravel() for k, v in enumerate(labels)})
    return float((pd.Series(weights).groupby([frame[c] for c in frame]).sum() ** 2).sum())


def assert_gaussian(residual, sigma, label, *, groups=None, correlation=0.0, subcell=0.0,
                    subcell_units=None):
    """Residuals with covariance C_ij = sigma_i^2 (i = j) + rho sigma_i sigma_j (same error
    group, i != j) + s^2 (same sub-cell unit): the sample mean within 5 standard errors of 0 and
    the mean square within 5 standard errors of its expectation (see the module docstring).

    ``groups``: error-group label per value (None: independent errors); ``correlation``: rho;
    ``subcell``: s; ``subcell_units``: sub-cell unit label per value (None: one per value).
    """
    r = np.asarray(residual, dtype=np.float64).ravel()
    n = r.size
    assert n > 100, f"{label}: only {n} values"
    sd = np.broadcast_to(np.asarray(sigma, dtype=np.float64), r.shape).ravel()
    index = np.arange(n)
    g = index if groups is None else np.asarray(groups).ravel()
    h = index if subcell_units is None else np.asarray(subcell_units).ravel()
    rho, s2 = correlation, subcell ** 2
    diagonal = (1.0 - rho) * sd ** 2                    # C = diag(d) + rho (sd sd^T o G) + s2 H
    sum_c = diagonal.sum() + rho * _block_sums(sd, g) + s2 * _block_sums(np.ones(n), h)
    sum_c2 = (np.sum(diagonal ** 2) + rho ** 2 * _block_sums(sd ** 2, g)
              + s2 ** 2 * _block_sums(np.ones(n), h)
              + 2.0 * rho * np.sum(diagonal * sd ** 2) + 2.0 * s2 * diagonal.sum()
              + 2.0 * rho * s2 * _block_sums(sd, g, h))
    mean, mean_square = r.mean(), np.mean(r ** 2)
    expected_square = np.mean(sd ** 2) + s2
    mean_tolerance = STANDARD_ERRORS * np.sqrt(sum_c) / n
    square_tolerance = STANDARD_ERRORS * np.sqrt(2.0 * sum_c2) / n
    assert abs(mean) < mean_tolerance, f"{label}: mean {mean:.3g}, tolerance {mean_tolerance:.3g}"
    assert abs(mean_square - expected_square) < square_tolerance, (
        f"{label}: rms {np.sqrt(mean_square):.4g} vs {np.sqrt(expected_square):.4g}, mean-square "
        f"tolerance {square_tolerance:.3g} (n = {n})")



def flag_value(path, name, meaning):
    with netCDF4.Dataset(path) as ds:
        var = ds[name]
        meanings = var.flag_meanings.split()
        return int(np.atleast_1d(var.flag_values)[meanings.index(meaning)])


def crs_of(path, variable):
    """The CRS of ``variable``'s CF grid_mapping, through pyproj.CRS.from_cf (PROJ)."""
    with netCDF4.Dataset(path) as ds:
        mapping = ds[ds[variable].grid_mapping]
        return pyproj.CRS.from_cf({k: mapping.getncattr(k) for k in mapping.ncattrs()})


# --- files are CF netCDF ----------------------------------------------------------------------

def test_every_file_opens_with_xarray_and_references_resolve(demo):
    """Each file opens with xarray in one call; every variable named in coordinates,
    ancillary_variables, grid_mapping and bounds exists (CF-1.10 sections 2.6, 3.4, 5, 7.1);
    grid mappings build a CRS with PROJ; dimensional data variables have units."""
    files = all_netcdf_files(demo)
    # 9: three altimeters, three days; the infrared pass of each day in granule files
    assert len(files) == 3 + 9 + 3 * SWATH_GRANULES_PER_DAY + 3 + 3 + 3 + 2 + 1
    for path in files:
        with xr.open_dataset(path) as ds:
            assert ds.attrs["Conventions"] == "CF-1.10", path
            assert len(ds.variables) > 0
        with netCDF4.Dataset(path) as ds:
            for name, var in ds.variables.items():
                attrs = {k: var.getncattr(k) for k in var.ncattrs()}
                for key in ("coordinates", "ancillary_variables"):
                    for ref in attrs.get(key, "").split():
                        assert ref in ds.variables, f"{path}: {name}.{key} names missing {ref}"
                for key in ("grid_mapping", "bounds"):
                    if key in attrs:
                        assert attrs[key] in ds.variables, f"{path}: {name}.{key} missing"
                if "grid_mapping_name" in attrs:
                    pyproj.CRS.from_cf(attrs)          # raises when PROJ cannot build it
                standard_name = attrs.get("standard_name", "")
                is_flag = standard_name.endswith("status_flag") or standard_name.endswith(
                    "binary_mask")
                if standard_name and not is_flag:
                    assert "units" in attrs, f"{path}: {name} ({standard_name}) has no units"


def test_profile_file_is_a_dsg_profile_collection(demo):
    """CF-1.10 chapter 9: featureType 'profile' with a cf_role profile_id variable."""
    (path,) = demo["files"]["ts_profiles"]
    with netCDF4.Dataset(path) as ds:
        assert ds.featureType == "profile"
        roles = [v.getncattr("cf_role") for v in ds.variables.values() if "cf_role" in v.ncattrs()]
        assert roles == ["profile_id"]


# --- model grid -------------------------------------------------------------------------------

def test_model_grid_cell_centres_match_proj(demo, config):
    """The 2-D lat/lon of the grid file are the PROJ inverse of the x/y cell centres
    x_min + (i + 0.5) dx of the config (reference: pyproj Transformer)."""
    path = demo["grid"]
    grid = config["grid"]
    x, y = decoded(path, "x"), decoded(path, "y")
    np.testing.assert_allclose(x, grid["x_min"] + (np.arange(grid["nx"]) + 0.5) * grid["dx"])
    np.testing.assert_allclose(y, grid["y_min"] + (np.arange(grid["ny"]) + 0.5) * grid["dy"])
    crs = crs_of(path, "sea_mask")
    assert crs == pyproj.CRS(grid["crs"])
    xx, yy = np.meshgrid(x, y)
    to_lonlat = pyproj.Transformer.from_crs(grid["crs"], "EPSG:4326", always_xy=True)
    lon, lat = to_lonlat.transform(xx, yy)
    np.testing.assert_allclose(decoded(path, "lon"), lon, rtol=0, atol=1e-9)
    np.testing.assert_allclose(decoded(path, "lat"), lat, rtol=0, atol=1e-9)


def test_model_grid_angle_is_minus_proj_meridian_convergence(demo):
    """For a conformal projection the +x axis points at azimuth gamma + 90 deg, gamma being
    PROJ's meridian convergence; counterclockwise from east that is -gamma."""
    path = demo["grid"]
    lon, lat = decoded(path, "lon")[::7, ::7], decoded(path, "lat")[::7, ::7]
    gamma = pyproj.Proj("EPSG:3031").get_factors(lon, lat).meridian_convergence
    np.testing.assert_allclose(decoded(path, "angle")[::7, ::7], -np.asarray(gamma), atol=1e-7)


def test_model_grid_mask_and_bathymetry_are_plausible(demo):
    """Mask 0/1 with land and sea; bathymetry positive down on sea, fill on land; a shelf of
    400-600 m and an abyssal plain near 4500 m as the scenario describes (common practice
    magnitudes for the Weddell Sea, from memory)."""
    path = demo["grid"]
    mask = decoded(demo["grid"], "sea_mask")
    depth = decoded(path, "bathymetry")
    assert set(np.unique(mask)) == {0.0, 1.0}
    sea = mask == 1
    assert 0.15 < 1 - sea.mean() < 0.5, "land fraction"
    assert np.all(np.isfinite(depth[sea])) and np.all(depth[sea] > 0)
    assert np.all(np.isnan(depth[~sea]))
    shelf = depth[sea & (depth < 1000.0)]
    assert 0.1 < shelf.size / sea.sum() < 0.5
    assert 400.0 < np.median(shelf) < 600.0
    assert 4300.0 < np.median(depth[sea & (depth > 3000.0)]) < 4800.0


# --- altimetry --------------------------------------------------------------------------------

@pytest.mark.parametrize("sensor", ["altimeter_a", "altimeter_b", "altimeter_c"])
def test_altimetry_residuals_have_the_sensor_sigma(demo, manifest, sensor):
    sigma = manifest["sensors"][sensor]["error"]["sigma"]
    residuals, groups = [], []
    for path in demo["files"][sensor]:
        sla = decoded(path, "sla")
        passes = decoded(path, "pass_number")
        lon, lat = decoded(path, "lon"), decoded(path, "lat")
        times = decoded_time(path, "time")
        good = np.isfinite(sla)
        assert 0.95 < good.mean() < 1.0          # a few dropouts, written as fill
        residuals.append(sla[good] - truth_value("sea_level_anomaly", lon[good], lat[good],
                                                 None, times[good]))
        groups.append([f"{Path(path).name}/{p:.0f}" for p in passes[good]])
    assert_gaussian(np.concatenate(residuals), sigma, sensor, groups=np.concatenate(groups),
                    correlation=ERROR_CORRELATION[sensor],
                    subcell=SUBCELL_SIGMA["sea_level_anomaly"])


def test_altimetry_passes_are_1hz_tracks_of_6_to_7_km(demo):
    """Within a pass, time increases by 1 s and consecutive points are 6-7 km apart on the
    WGS 84 ellipsoid (pyproj.Geod); passes cross the domain."""
    geod = pyproj.Geod(ellps="WGS84")
    for path in [p for s in ("altimeter_a", "altimeter_b", "altimeter_c") for p in demo["files"][s]]:
        lon, lat = decoded(path, "lon"), decoded(path, "lat")
        times = decoded_time(path, "time")
        passes = decoded(path, "pass_number")
        same = passes[1:] == passes[:-1]
        step = np.diff(times)[same] / np.timedelta64(1, "ms")
        consecutive = same.copy()
        consecutive[same] = step == 1000.0
        assert np.all(np.diff(times) > np.timedelta64(0, "s"))
        assert consecutive.mean() > 0.95
        _, _, distance = geod.inv(lon[:-1][consecutive], lat[:-1][consecutive],
                                  lon[1:][consecutive], lat[1:][consecutive])
        assert 6000.0 < np.min(distance) and np.max(distance) < 7000.0
        assert np.unique(passes).size >= 5


def test_some_altimetry_points_fall_on_model_land(demo):
    """Realistic tracks cross land; they must be rejected later by the grid check."""
    mask = decoded(demo["grid"], "sea_mask")
    x_axis, y_axis = decoded(demo["grid"], "x"), decoded(demo["grid"], "y")
    dx = x_axis[1] - x_axis[0]
    to_map = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:3031", always_xy=True)
    on_land = inside = 0
    for path in demo["files"]["altimeter_a"]:
        x, y = to_map.transform(decoded(path, "lon"), decoded(path, "lat"))
        i = np.floor((x - x_axis[0] + dx / 2) / dx).astype(int)
        j = np.floor((y - y_axis[0] + dx / 2) / dx).astype(int)
        ok = (i >= 0) & (i < x_axis.size) & (j >= 0) & (j < y_axis.size)
        inside += ok.sum()
        on_land += np.count_nonzero(mask[j[ok], i[ok]] == 0)
    assert 0.05 < on_land / inside < 0.7


# --- SST swath --------------------------------------------------------------------------------

def test_sst_swath_packing_decodes_alike_in_xarray_and_netcdf4(demo):
    for path in demo["files"]["sst_swath_ir"]:
        with netCDF4.Dataset(path) as ds:
            var = ds["sea_surface_temperature"]
            assert var.dtype == np.int16
            assert var.units == "K" and var.scale_factor == 0.01 and var.add_offset == 273.15
        with xr.open_dataset(path) as ds:
            from_xarray = ds["sea_surface_temperature"].values.astype(np.float64)
        np.testing.assert_allclose(from_xarray, decoded(path, "sea_surface_temperature"),
                                   rtol=0, atol=1e-9, equal_nan=True)


def test_sst_swath_good_pixels_have_the_file_sigma(demo):
    """SST - 273.15 - truth of the good pixels has the file's uncertainty (correlated within the
    granule) plus the sub-cell variability; the truth is taken at the decoded pixel position and
    pixel time."""
    residuals, sigmas, groups = [], [], []
    for path in demo["files"]["sst_swath_ir"]:
        sst = decoded(path, "sea_surface_temperature") - KELVIN_OFFSET
        sigma = decoded(path, "sst_uncertainty")
        status = decoded(path, "sst_status")
        good = status == flag_value(path, "sst_status", "good")
        assert np.all(np.isfinite(sst[good])) and np.all(np.isfinite(sigma[good]))
        lon, lat = decoded(path, "lon"), decoded(path, "lat")
        times = decoded_time(path, "pixel_time")
        expected = truth_value("sea_surface_temperature", lon[good], lat[good], None, times[good])
        residuals.append(sst[good] - expected)
        sigmas.append(sigma[good])
        groups.append(np.full(good.sum(), Path(path).name))
    sigmas = np.concatenate(sigmas)
    assert 0.30 - 1e-9 <= sigmas.min() and sigmas.max() <= 0.45 + 1e-9
    assert_gaussian(np.concatenate(residuals), sigmas, "sst swath", groups=np.concatenate(groups),
                    correlation=ERROR_CORRELATION["sst_swath_ir"],
                    subcell=SUBCELL_SIGMA["sea_surface_temperature"])


def test_sst_swath_flagged_pixels_are_wrong(demo):
    """A few % of the pixels (all granules together: a granule over the pack has fewer, since
    only open-water pixels can be cloud_suspected) carry a cold gross error, so honouring the
    flag matters; cloudy pixels are fill."""
    suspected_count = pixel_count = 0
    errors = []
    for path in demo["files"]["sst_swath_ir"]:
        sst = decoded(path, "sea_surface_temperature") - KELVIN_OFFSET
        status = decoded(path, "sst_status")
        suspected = status == flag_value(path, "sst_status", "cloud_suspected")
        cloudy = status == flag_value(path, "sst_status", "cloudy")
        suspected_count += suspected.sum()
        pixel_count += suspected.size
        assert np.all(np.isnan(sst[cloudy])) and np.all(np.isfinite(sst[~cloudy]))
        lon, lat = decoded(path, "lon"), decoded(path, "lat")
        times = decoded_time(path, "pixel_time")
        errors.append(sst[suspected] - truth_value("sea_surface_temperature", lon[suspected],
                                                   lat[suspected], None, times[suspected]))
    assert 0.01 < suspected_count / pixel_count < 0.10
    assert np.mean(np.concatenate(errors)) < -1.0


# --- gridded SST ------------------------------------------------------------------------------

def test_sst_grid_open_water_has_the_sensor_sigma(demo, manifest):
    sigma = manifest["sensors"]["sst_grid"]["error"]["sigma"]
    residuals, groups = [], []
    for path in demo["files"]["sst_grid"]:
        sst = decoded(path, "analysed_sst")[0] - KELVIN_OFFSET
        mask = decoded(path, "surface_mask")[0].astype(int)
        lon, lat = np.meshgrid(decoded(path, "lon"), decoded(path, "lat"))
        (time_,) = decoded_time(path, "time")
        land_bit, ice_bit = 1, 2           # flag_masks, in the order of flag_meanings
        with netCDF4.Dataset(path) as ds:
            assert ds["surface_mask"].flag_meanings.split() == ["land", "sea_ice"]
            assert list(ds["surface_mask"].flag_masks) == [land_bit, ice_bit]
        assert np.array_equal(np.isnan(sst), (mask & land_bit) != 0)
        ice = (mask & ice_bit) != 0
        concentration = truth_value("sea_ice_concentration", lon, lat, None, time_)
        open_sea = (mask & land_bit) == 0
        assert np.all(concentration[ice] >= 0.15) and np.all(concentration[open_sea & ~ice] < 0.15)
        water = mask == 0
        residuals.append(sst[water] - truth_value("sea_surface_temperature", lon[water],
                                                  lat[water], None, time_))
        groups.append(np.full(water.sum(), Path(path).name))
    assert_gaussian(np.concatenate(residuals), sigma, "sst grid", groups=np.concatenate(groups),
                    correlation=ERROR_CORRELATION.get("sst_grid", 0.0),
                    subcell=SUBCELL_SIGMA["sea_surface_temperature"])


# --- ice concentration ------------------------------------------------------------------------

def test_ice_concentration_in_percent_without_lat_lon(demo):
    for path in demo["files"]["ice_concentration"]:
        with xr.open_dataset(path) as ds:
            names = [v.attrs.get("standard_name") for v in ds.variables.values()]
            assert "latitude" not in names and "longitude" not in names
            assert {"projection_x_coordinate", "projection_y_coordinate"} <= set(names)
            assert ds["ice_conc"].attrs["units"] == "%"


def test_ice_concentration_residuals_are_unclipped_gaussian(demo):
    """Decoded %, converted to a fraction with the CF/udunits pint registry of cf_xarray;
    cell centres from x/y and the grid mapping through PROJ.  (obs - truth) / sigma is N(0, 1);
    observations are not clipped (some below 0 and above 1) yet stay inside -0.2..1.2."""
    from cf_xarray.units import units

    normalised = []
    for path in demo["files"]["ice_concentration"]:
        percent = decoded(path, "ice_conc")[0]
        sigma_percent = decoded(path, "ice_conc_uncertainty")[0]
        fraction = units.Quantity(percent, "%").to("1").magnitude
        sigma = units.Quantity(sigma_percent, "%").to("1").magnitude
        crs = crs_of(path, "ice_conc")
        xx, yy = np.meshgrid(decoded(path, "x"), decoded(path, "y"))
        to_lonlat = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
        lon, lat = to_lonlat.transform(xx, yy)
        (time_,) = decoded_time(path, "time")
        valid = np.isfinite(fraction)
        assert np.array_equal(~valid, demo_truth.is_land(lon, lat))
        expected = truth_value("sea_ice_concentration", lon[valid], lat[valid], None, time_)
        observed = fraction[valid]
        assert np.all((observed > -0.2) & (observed < 1.2))
        assert np.any(observed < 0.0) and np.any(observed > 1.0)
        assert np.any(expected == 0.0)
        normalised.append((observed - expected) / sigma[valid])
    assert_gaussian(np.concatenate(normalised), 1.0, "ice concentration (normalised)")


# --- ice drift --------------------------------------------------------------------------------

def test_ice_drift_along_projection_axes_matches_truth_rotated_by_proj(demo, manifest):
    """The truth east/north displacement rotated onto the product's projection axes with
    PROJ's meridian convergence gamma (angle from true north to grid north, clockwise; for a
    conformal projection x = e cos g - n sin g, y = e sin g + n cos g) matches the file's
    x/y displacement (km) within the sensor sigma."""
    sigma = manifest["sensors"]["ice_drift"]["error"]["sigma"]
    residuals = []
    for path in demo["files"]["ice_drift"]:
        crs = crs_of(path, "dx")
        with netCDF4.Dataset(path) as ds:
            assert ds["dx"].units == "km" and ds["dy"].units == "km"
            assert ds["dx"].standard_name == "sea_ice_x_displacement"
            bounds_name = ds["time"].bounds
        with xr.open_dataset(path) as ds:
            start, end = ds[bounds_name].values[0].astype("datetime64[ns]")
        assert end - start == np.timedelta64(48, "h")
        dx, dy = decoded(path, "dx")[0] * 1000.0, decoded(path, "dy")[0] * 1000.0
        lon, lat = decoded(path, "lon"), decoded(path, "lat")
        valid = np.isfinite(dx)
        assert np.array_equal(valid, np.isfinite(dy)) and valid.sum() > 300
        lon, lat = lon[valid], lat[valid]
        assert np.all(truth_value("sea_ice_concentration", lon, lat, None, start) >= 0.15)
        east = truth_value("sea_ice_drift_east", lon, lat, None, start, end)
        north = truth_value("sea_ice_drift_north", lon, lat, None, start, end)
        gamma = np.radians(pyproj.Proj(crs).get_factors(lon, lat).meridian_convergence)
        x_ref = east * np.cos(gamma) - north * np.sin(gamma)
        y_ref = east * np.sin(gamma) + north * np.cos(gamma)
        residuals += [dx[valid] - x_ref, dy[valid] - y_ref]
        # rotation between file and reference vectors: angle = sum(cross) / sum(|ref|^2), whose
        # standard error from noise of sigma per component is sigma / sqrt(sum(|ref|^2))
        cross = dx[valid] * y_ref - dy[valid] * x_ref
        reference_power = np.sum(x_ref**2 + y_ref**2)
        angle = np.sum(cross) / reference_power
        assert abs(angle) < STANDARD_ERRORS * sigma / np.sqrt(reference_power), (
            f"{path}: vectors rotated by {np.degrees(angle):.2f} deg")
    assert_gaussian(np.concatenate(residuals), sigma, "ice drift")


# --- profiles ---------------------------------------------------------------------------------

def test_profiles_residuals_and_flags(demo, manifest):
    """Depth from pressure with TEOS-10 gsw.z_from_p; good and probably_good values have the
    sensor sigma; values flagged bad are gross errors; pressure increases down each profile;
    no profile reaches below the sea floor."""
    (path,) = demo["files"]["ts_profiles"]
    sigmas = manifest["sensors"]["ts_profiles"]["error"]["sigma"]
    pressure = decoded(path, "pressure")
    lon, lat = decoded(path, "lon"), decoded(path, "lat")
    times = decoded_time(path, "time")
    assert pressure.shape[0] == len(CTD_STATIONS) + FLOAT_COUNT
    depth = -gsw.z_from_p(pressure, lat[:, None])
    for k in range(pressure.shape[0]):
        levels = np.isfinite(pressure[k])
        assert np.all(np.diff(pressure[k][levels]) > 0)
        assert np.max(depth[k][levels]) < demo_truth.sea_floor_depth(lon[k], lat[k])
    present = np.isfinite(pressure)
    lon2, lat2, time2 = (np.broadcast_to(v[:, None], pressure.shape) for v in (lon, lat, times))
    for name, quantity in (("temperature", "sea_water_temperature"),
                           ("salinity", "sea_water_salinity")):
        values = decoded(path, name)
        flags = decoded(path, f"{name}_qc")
        expected = truth_value(quantity, lon2[present], lat2[present], depth[present],
                               time2[present])
        residual = values[present] - expected
        flag = flags[present]
        good = np.isin(flag, [flag_value(path, f"{name}_qc", "good"),
                              flag_value(path, f"{name}_qc", "probably_good")])
        bad = flag == flag_value(path, f"{name}_qc", "bad")
        assert 1 <= bad.sum() <= 10 and good.sum() + bad.sum() == flag.size
        assert np.all(np.abs(residual[bad]) > 0.3)
        # sub-cell variability: one value per profile and model layer
        profile = np.broadcast_to(np.arange(pressure.shape[0])[:, None], pressure.shape)
        layer = np.searchsorted(np.asarray(LAYER_INTERFACES_M), depth, side="right")
        units = (profile * 100 + layer)[present]
        assert_gaussian(residual[good], sigmas[quantity], f"profiles {name}",
                        subcell=SUBCELL_SIGMA[quantity], subcell_units=units[good])


# --- the truth itself -------------------------------------------------------------------------

def test_truth_value_covers_every_quantity():
    lon, lat = np.array([-40.0, -20.0, -55.0]), np.array([-68.0, -64.0, -62.0])
    start = np.datetime64("2026-11-18T00:00")
    end = start + np.timedelta64(48, "h")
    for name in QUANTITIES:
        value = truth_value(name, lon, lat, 100.0, start, end)
        assert value.shape == lon.shape and np.all(np.isfinite(value)), name
    with pytest.raises(ValueError, match="time_end"):
        truth_value("sea_ice_drift_east", lon, lat, None, start)
    with pytest.raises(KeyError, match="known quantities"):
        truth_value("sea_ice_thickness", lon, lat, None, start)


def test_truth_drift_axes_match_proj_meridian_convergence():
    """truth's x/y (EPSG:3031 axes) and east/north components are related by PROJ's
    meridian convergence of EPSG:3031."""
    rng = np.random.default_rng(5)
    lon, lat = rng.uniform(-70, 20, 500), rng.uniform(-75, -58, 500)
    start = np.datetime64("2026-11-17T06:00")
    end = start + np.timedelta64(48, "h")
    east, north, x, y = (truth_value(q, lon, lat, None, start, end) for q in (
        "sea_ice_drift_east", "sea_ice_drift_north", "sea_ice_drift_x", "sea_ice_drift_y"))
    gamma = np.radians(pyproj.Proj("EPSG:3031").get_factors(lon, lat).meridian_convergence)
    np.testing.assert_allclose(x, east * np.cos(gamma) - north * np.sin(gamma), atol=1e-6)
    np.testing.assert_allclose(y, east * np.sin(gamma) + north * np.cos(gamma), atol=1e-6)


def test_truth_ranges_on_the_model_grid(demo, manifest):
    """The magnitudes the scenario promises, on the sea cells at the analysis time; the water
    column never goes below the TEOS-10 freezing point (gsw.t_freezing, saturation 0)."""
    lon, lat = decoded(demo["grid"], "lon"), decoded(demo["grid"], "lat")
    sea = decoded(demo["grid"], "sea_mask") == 1
    lon, lat = lon[sea], lat[sea]
    when = np.datetime64(manifest["analysis_time"])
    sla = truth_value("sea_level_anomaly", lon, lat, None, when)
    assert -0.3 <= sla.min() and sla.max() <= 0.3 and np.ptp(sla) > 0.2
    sst = truth_value("sea_surface_temperature", lon, lat, None, when)
    assert -1.8 <= sst.min() < -1.7 and 1.5 < sst.max() < 2.5
    concentration = truth_value("sea_ice_concentration", lon, lat, None, when)
    assert concentration.min() == 0.0 and 0.9 < concentration.max() < 1.0
    drift = np.hypot(*(truth_value(q, lon, lat, None, when - np.timedelta64(48, "h"), when)
                       for q in ("sea_ice_drift_east", "sea_ice_drift_north")))
    drift_km = drift[concentration > 0.15] / 1000.0
    assert 5.0 < np.median(drift_km) < 30.0 and np.percentile(drift_km, 95) < 35.0
    sample = slice(None, None, 97)
    np.testing.assert_allclose(truth_value("sea_water_temperature", lon, lat, 0.0, when), sst)
    for depth_m in (0.0, 50.0, 150.0, 300.0, 1000.0, 3000.0):
        t = truth_value("sea_water_temperature", lon[sample], lat[sample], depth_m, when)
        s = truth_value("sea_water_salinity", lon[sample], lat[sample], depth_m, when)
        p = gsw.p_from_z(-depth_m, lat[sample])
        absolute = gsw.SA_from_SP(s, p, lon[sample], lat[sample])
        assert np.all(t > gsw.t_freezing(absolute, p, 0.0))
        assert np.all((33.9 < s) & (s < 34.75))
    # the warm deep layer, at the 500 m layer interface
    t500 = truth_value("sea_water_temperature", lon, lat, 500.0, when)
    assert 0.2 < t500.min() and t500.max() < 0.8
    s1000 = truth_value("sea_water_salinity", lon, lat, 1000.0, when)
    assert np.all(np.abs(s1000 - 34.68) < 0.03)


def test_truth_file_matches_truth_value(demo, manifest):
    path = demo["truth"]
    lon, lat = decoded(path, "lon"), decoded(path, "lat")
    sea = decoded(demo["grid"], "sea_mask") == 1
    when = np.datetime64(manifest["analysis_time"])
    start = when - np.timedelta64(int(manifest["truth"]["drift_interval_hours"]), "h")
    for name in ("sea_level_anomaly", "sea_surface_temperature", "sea_ice_concentration",
                 "sea_ice_drift_x", "sea_ice_drift_y", "sea_ice_drift_east", "sea_ice_drift_north"):
        stored = decoded(path, name)
        if QUANTITIES[name].vector:
            expected = truth_value(name, lon, lat, None, start, when)
        else:
            expected = truth_value(name, lon, lat, None, when)
        assert np.all(np.isnan(stored[~sea]))
        np.testing.assert_allclose(stored[sea], expected[sea], rtol=1e-12, atol=1e-12)


# --- config and manifest ----------------------------------------------------------------------

def test_config_follows_the_draft_format_and_finds_the_files(demo, manifest, config):
    window = config["window"]
    assert window["date"] == "2026-11-20" and window["analysis_time"] == "{date}T00:00:00"
    assert (window["start_hours"], window["end_hours"], window["slot_hours"]) == (-72.0, 0.0, 24.0)
    grid = config["grid"]
    assert grid["type"] == "projected" and grid["crs"] == "EPSG:3031"
    assert (Path(demo["config"]).parent / grid["mask_file"]).samefile(demo["grid"])
    assert grid["layer_interfaces"] == sorted(grid["layer_interfaces"])
    sensors = [s["sensor"] for s in config["sources"]]
    assert sorted(sensors) == sorted(manifest["sensors"]) and len(set(sensors)) == len(sensors)
    base = Path(demo["config"]).parent
    days = [np.datetime64("2026-11-17") + k for k in range(3)]
    smallest_sigma = {}
    for source in config["sources"]:
        record = manifest["sensors"][source["sensor"]]
        error = source["error"]
        # the correlation the noise is drawn with (obsprep.demo.noise)
        assert source["correlation"] == ERROR_CORRELATION.get(source["sensor"], 0.0)
        assert error["factor"] == 1.0
        assert error["rule"] == record["error"]["rule"]
        if error["rule"] == "constant":
            assert error["value"] == record["error"]["sigma"]
        found = set()
        for pattern in source["paths"]:
            for day in days:
                expanded = pattern.replace("{date:%Y%m%d}", f"{day.astype(object):%Y%m%d}")
                found |= {Path(p).resolve() for p in glob.glob(str(base / expanded))}
        written = {Path(p).resolve() for p in demo["files"][source["sensor"]]}
        assert found == written, source["sensor"]
        sigma = record["error"].get("sigma") or record["error"]["sigma_range"][0]
        for quantity in source["quantities"]:
            value = sigma[quantity] if isinstance(sigma, dict) else sigma
            smallest_sigma[quantity] = min(value, smallest_sigma.get(quantity, np.inf))
    superobs = config["superobs"]
    # the sampling model with the sub-cell sigmas and footprints the demo draws with
    assert superobs["representation_model"] == "sampling" and superobs["layer_value"] == "fit"
    assert superobs["representation_error"] == {q: SUBCELL_SIGMA.get(q, 0.0)
                                                for q in superobs["representation_error"]}
    assert set(SUBCELL_SIGMA) <= set(superobs["representation_error"])
    assert superobs["footprint_km2"] == FOOTPRINT_KM2
    for quantity, floor in superobs["error_floor"].items():
        assert quantity in QUANTITIES
        if quantity in smallest_sigma:        # well below sigma / sqrt(n) (n up to ~100)
            assert 0 < floor <= smallest_sigma[quantity] / 10.0, quantity
    assert config["output"]["directory"] == "out" and config["output"]["parquet"] is True


#: noise standard deviations of the scenario specification (the brief of the demo)
SPECIFIED_SIGMA = {"altimeter_a": 0.03, "altimeter_b": 0.04, "altimeter_c": 0.035, "sst_grid": 0.5, "sst_microwave": 0.6,
                   "ice_drift": 2000.0,
                   "ts_profiles": {"sea_water_temperature": 0.01, "sea_water_salinity": 0.01}}


def test_manifest_sigmas_are_the_specified_ones(manifest):
    for sensor, sigma in SPECIFIED_SIGMA.items():
        assert manifest["sensors"][sensor]["error"]["sigma"] == sigma, sensor
    assert manifest["sensors"]["sst_swath_ir"]["error"]["sigma_range"] == [0.30, 0.45]


def test_manifest_lists_every_written_file(demo, manifest):
    base = Path(demo["manifest"]).parent
    assert manifest["scenario"] == "weddell-spring"
    assert manifest["analysis_time"] == "2026-11-20T00:00:00"
    listed = {base / f for s in manifest["sensors"].values() for f in s["files"]}
    written = {Path(p) for paths in demo["files"].values() for p in paths}
    assert listed == written and all(p.exists() for p in written)
    assert (base / manifest["truth"]["file"]).exists()
    assert (base / manifest["grid"]["file"]).exists()


# --- determinism, arguments, size -------------------------------------------------------------

def all_values(result):
    values = {}
    for path in all_netcdf_files(result):
        relative = Path(path).relative_to(result["directory"]).as_posix()
        with netCDF4.Dataset(path) as ds:
            ds.set_auto_maskandscale(False)
            for name, var in ds.variables.items():
                values[relative, name] = var[...]
    return values


def test_same_seed_writes_identical_values_and_another_seed_differs(demo, tmp_path):
    again = all_values(write_demo(tmp_path / "again", scale=SCALE))
    first = all_values(demo)
    assert again.keys() == first.keys()
    for key, value in first.items():
        assert np.array_equal(np.asarray(value), np.asarray(again[key]),
                              equal_nan=value.dtype.kind == "f"), key
    config_name = Path(demo["config"]).name
    assert Path(demo["config"]).read_text() == (tmp_path / "again" / config_name).read_text()
    other = all_values(write_demo(tmp_path / "other", scale=SCALE, seed=7))
    key = next(k for k in first if k[1] == "sla")
    assert not np.array_equal(first[key], other[key])
    mask_key = ("grid/model_grid.nc", "sea_mask")
    assert np.array_equal(first[mask_key], other[mask_key])


@pytest.mark.parametrize("arguments, key", [
    ({"date": "2026-13-01"}, "date"), ({"date": "20261120"}, "date"),
    ({"scale": 0.0}, "scale"), ({"scale": 1.5}, "scale"), ({"seed": -1}, "seed"),
])
def test_bad_arguments_raise_config_error(tmp_path, arguments, key):
    with pytest.raises(ConfigError, match=f"key '{key}'"):
        write_demo(tmp_path, **arguments)


def test_full_size_demo_is_fast_and_small(tmp_path):
    """Full size: under 30 s of writing and tens of MB at most (the brief's budget)."""
    started = time.perf_counter()
    result = write_demo(tmp_path / "full")
    elapsed = time.perf_counter() - started
    size = sum(p.stat().st_size for p in Path(result["directory"]).rglob("*") if p.is_file())
    assert elapsed < 30.0
    assert size < 50e6
    with netCDF4.Dataset(result["files"]["sst_swath_ir"][0]) as ds:
        # one granule of the day's 1000-row pass
        assert ds.dimensions["nj"].size == SWATH_ROWS // SWATH_GRANULES_PER_DAY
        assert ds.dimensions["ni"].size == SWATH_COLUMNS


def test_thermocline_is_curved_inside_a_model_layer():
    """The layer mean of the T/S truth differs from the truth at the layer's mid-depth by more
    than the profile noise (0.01) in the layers where the clines curve (T: 200-500 m below the
    thermocline, S: 50-100 m above the halocline); the mean is the trapezoidal rule on 1 m
    steps (numpy)."""
    when = np.datetime64("2026-11-19T12:00:00")
    for quantity, (top, bottom) in (("sea_water_temperature", (200.0, 500.0)),
                                    ("sea_water_salinity", (50.0, 100.0))):
        depth = np.arange(top, bottom + 0.5, 1.0)
        profile = truth_value(quantity, -30.0, -65.0, depth, when)
        layer_mean = np.trapezoid(profile, depth) / (bottom - top)
        middle = truth_value(quantity, -30.0, -65.0, (top + bottom) / 2.0, when)
        assert abs(layer_mean - middle) > 0.01, quantity
