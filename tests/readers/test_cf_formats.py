"""CF products of the other families, as data centres publish them: along-track altimetry in
0..360 longitudes with a pass variable and corrections, sea-ice concentration with and without
lat/lon and with CF ancillary uncertainty and status flags, ragged-array profiles (contiguous
and indexed) for ship CTD and glider data.

References: CF conventions 1.10 (from memory): ancillary_variables with the standard_name
modifiers "standard_error" and "status_flag", flag_values/flag_meanings, contiguous (H.3.4) and
indexed (H.3.5) ragged arrays, grid_mapping; PROJ via pyproj for projected coordinates; TEOS-10
via gsw for pressure to depth; udunits/pint via cf_xarray for unit conversions.
"""

from __future__ import annotations

import gsw
import numpy as np
import pyproj
import pytest
from sample_files import TIME_1950, polar_grid_mapping, var, write_nc

from obsprep.exceptions import InputFileError
from obsprep.model.table import validate_table
from obsprep.readers import read

NAN = np.nan


def reasons(table):
    return [None if isinstance(r, float) else r for r in table["rejected"].astype(object)]


# --- along-track altimetry -------------------------------------------------------------------

def alongtrack_360(path, tide_cm=None):
    n = 6
    lon = np.array([358.0, 359.0, 359.9, 0.2, 1.0, 2.0])
    tide_cm = np.array([1.0, -2.0, NAN, 0.5, 0.0, 3.0]) if tide_cm is None else tide_cm
    return write_nc(path, {"time": n}, {
        "time": var(("time",), 27000.0 + np.array([0, 1, 2, 3, 10, 11]) / 86400.0, **TIME_1950),
        "latitude": var(("time",), np.linspace(-60.0, -59.0, n), standard_name="latitude",
                        units="degrees_north"),
        "longitude": var(("time",), lon, standard_name="longitude", units="degrees_east"),
        "track": var(("time",), [101, 101, 101, 101, 102, 102], dtype="i4",
                     long_name="pass number"),
        "sla": var(("time",), [0.10, 0.20, 0.30, 0.40, 0.50, 0.60], fill=-9999.0,
                   standard_name="sea_surface_height_above_sea_level", units="m",
                   coordinates="time latitude longitude"),
        "ocean_tide": var(("time",), tide_cm, fill=-9999.0, units="cm",
                          long_name="ocean tide correction"),
        "dac": var(("time",), np.full(n, 0.02), units="m", long_name="dynamic atmospheric "
                                                                      "correction"),
    }, platform="demo_altimeter")


def test_alongtrack_longitudes_0_360_pass_variable_and_corrections(tmp_path):
    path = alongtrack_360(tmp_path / "alt.nc")
    table = read(path, pass_variable="track", subtract_corrections=["ocean_tide"],
                 add_corrections="dac")
    validate_table(table)
    # 358 E is -2 E; 0.2 E stays (wrapping into -180..180)
    np.testing.assert_allclose(table["lon"], [-2.0, -1.0, -0.1, 0.2, 1.0, 2.0], atol=1e-9)
    assert table["group"].astype(str).tolist() == ["101"] * 4 + ["102"] * 2
    # sla - tide (cm -> m, udunits) + dac; a fill tide rejects the value
    tide_m = np.array([0.01, -0.02, NAN, 0.005, 0.0, 0.03])
    expected = np.array([0.10, 0.20, 0.30, 0.40, 0.50, 0.60]) - np.nan_to_num(tide_m) + 0.02
    np.testing.assert_allclose(table["value"], expected, atol=1e-12)
    assert reasons(table) == [None, None, "missing_correction", None, None, None]
    assert {"track", "ocean_tide", "dac"} <= set(table.attrs["variables"])
    # without a pass variable the passes split at the 7 s gap (> 5 s)
    split = read(path, pass_gap_seconds=5)
    assert split["group"].astype(str).tolist() == ["pass_0000"] * 4 + ["pass_0001"] * 2
    with pytest.raises(InputFileError, match="'tide'"):
        read(path, subtract_corrections=["tide"])


# --- sea-ice concentration -------------------------------------------------------------------

def ice_file(path, with_latlon, crs="EPSG:3411"):
    crs = pyproj.CRS(crs)
    x = np.array([-1.0e6, 0.0, 1.0e6])
    y = np.array([-5.0e5, 5.0e5])
    xx, yy = np.meshgrid(x, y)
    lon, lat = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(xx, yy)
    variables = {
        "time": var(("time",), [27000.5], **TIME_1950),
        "xc": var(("xc",), x / 1000.0, standard_name="projection_x_coordinate", units="km"),
        "yc": var(("yc",), y / 1000.0, standard_name="projection_y_coordinate", units="km"),
        "crs": var((), None, dtype="i4", **polar_grid_mapping(crs)),
        "ice_conc": var(("time", "yc", "xc"), [[[15.0, 80.0, 100.0], [NAN, 42.0, 97.5]]],
                        fill=-32767.0, standard_name="sea_ice_area_fraction", units="%",
                        grid_mapping="crs", ancillary_variables="total_uncertainty status_flag",
                        **({"coordinates": "lat lon"} if with_latlon else {})),
        "total_uncertainty": var(("time", "yc", "xc"), [[[5.0, 7.5, 2.0], [NAN, 12.0, 3.0]]],
                                 fill=-32767.0, units="%",
                                 standard_name="sea_ice_area_fraction standard_error"),
        "status_flag": var(("time", "yc", "xc"), [[[0, 0, 2], [0, 1, 4]]], dtype="i1",
                           standard_name="sea_ice_area_fraction status_flag",
                           flag_values=np.array([0, 1, 2, 4], np.int8),
                           flag_meanings="nominal land_spill_over_filter Land "
                                         "open_water_filter"),
    }
    if with_latlon:
        variables["lat"] = var(("yc", "xc"), lat, standard_name="latitude",
                               units="degrees_north")
        variables["lon"] = var(("yc", "xc"), lon, standard_name="longitude",
                               units="degrees_east")
    return write_nc(path, {"time": 1, "yc": 2, "xc": 3}, variables), lon, lat


@pytest.mark.parametrize("with_latlon", [True, False])
def test_ice_concentration_percent_uncertainty_flags_with_and_without_latlon(tmp_path,
                                                                               with_latlon):
    path, lon, lat = ice_file(tmp_path / "sic.nc", with_latlon)
    table = read(path)
    assert table.attrs["kind"] == "ice_concentration"
    # percent -> fraction (udunits: % = 0.01); the uncertainty converts the same way
    np.testing.assert_allclose(table["value"], [0.15, 0.80, 1.0, NAN, 0.42, 0.975], atol=1e-12)
    np.testing.assert_allclose(table["error"], [0.05, 0.075, 0.02, NAN, 0.12, 0.03],
                               atol=1e-12)
    # CF 3.5 flag_values: cell 2 is "Land" (rejected by the default list, case ignored); the
    # filter meanings are values the provider's filter set, kept (docs/file-conventions.md)
    assert reasons(table) == [None, None, "provider_flag", "missing_value", None, None]
    # positions: the file's lat/lon, or the grid_mapping inverted by PROJ (same numbers)
    np.testing.assert_allclose(table["lat"], lat.ravel(), atol=1e-9)
    np.testing.assert_allclose(table["lon"], ((lon.ravel() + 180) % 360) - 180, atol=1e-9)
    # the list is an option: without "land" in it the land cell is kept
    kept = read(path, reject_flag_meanings="coast lake missing")
    assert reasons(kept) == [None, None, None, "missing_value", None, None]


# --- ragged-array profiles -------------------------------------------------------------------

def test_contiguous_ragged_ctd_with_pressure_and_flags(tmp_path):
    # CF H.3.4 (from memory): casts of 3 and 4 samples, pressure as the vertical coordinate
    pressure = [2.0, 10.0, 50.0, 1.0, 5.0, 20.0, 1000.0]
    path = write_nc(tmp_path / "ctd.nc", {"profile": 2, "obs": 7}, {
        "row_size": var(("profile",), [3, 4], dtype="i4", sample_dimension="obs"),
        "cast": var(("profile",), np.array(["CTD-001", "CTD-002"], dtype=object), dtype=str,
                    cf_role="profile_id"),
        "time": var(("profile",), [27000.0, 27000.5], **TIME_1950),
        "lat": var(("profile",), [-65.0, -66.0], standard_name="latitude", units="degrees_north"),
        "lon": var(("profile",), [-40.0, -41.0], standard_name="longitude", units="degrees_east"),
        "pres": var(("obs",), pressure, standard_name="sea_water_pressure", units="dbar"),
        "temp": var(("obs",), [-1.8, -1.7, 0.5, -1.85, -1.80, -1.0, 0.3], fill=-999.0,
                    standard_name="sea_water_temperature", units="degree_Celsius",
                    coordinates="time lat lon pres", ancillary_variables="temp_flag"),
        "temp_flag": var(("obs",), [1, 1, 4, 1, 2, 1, 1], dtype="i1",
                         standard_name="sea_water_temperature status_flag",
                         flag_values=np.array([1, 2, 4], np.int8),
                         flag_meanings="good probably_good bad"),
    }, featureType="profile", platform="RV Demo")
    table = read(path)
    lat = np.array([-65.0] * 3 + [-66.0] * 4)
    np.testing.assert_allclose(table["depth"], -gsw.z_from_p(pressure, lat), rtol=1e-12)
    assert table["group"].astype(str).tolist() == ["CTD-001"] * 3 + ["CTD-002"] * 4
    assert reasons(table) == [None, None, "provider_flag", None, None, None, None]
    assert set(table["platform"].astype(str)) == {"RV Demo"}


def test_indexed_ragged_glider_profiles(tmp_path):
    # CF H.3.5 (from memory): each sample names its profile; samples of two profiles
    # interleaved in time order, as a glider file may write them
    index = [0, 0, 1, 0, 1, 1]
    depth = [5.0, 10.0, 4.0, 20.0, 8.0, 16.0]
    path = write_nc(tmp_path / "glider.nc", {"profile": 2, "obs": 6}, {
        "profile_index": var(("obs",), index, dtype="i4", instance_dimension="profile"),
        "time": var(("profile",), [27001.0, 27001.1], **TIME_1950),
        "lat": var(("profile",), [-64.0, -64.05], standard_name="latitude", units="degrees_north"),
        "lon": var(("profile",), [-50.0, -50.1], standard_name="longitude", units="degrees_east"),
        "z": var(("obs",), depth, standard_name="depth", units="m", positive="down"),
        "psal": var(("obs",), [34.1, 34.2, 34.0, 34.3, 34.15, 34.25], fill=-999.0,
                    standard_name="sea_water_practical_salinity", units="1e-3",
                    coordinates="time lat lon z"),
    }, featureType="profile", platform="glider_07")
    table = read(path)
    assert table["group"].astype(str).tolist() == [str(k) for k in index]
    np.testing.assert_allclose(table["lat"], np.array([-64.0, -64.05])[index])
    np.testing.assert_allclose(table["depth"], depth)
    np.testing.assert_allclose(table["value"], [34.1, 34.2, 34.0, 34.3, 34.15, 34.25])
    with_bad_index = write_nc(tmp_path / "bad.nc", {"profile": 2, "obs": 2}, {
        "profile_index": var(("obs",), [0, 5], dtype="i4", instance_dimension="profile"),
        "time": var(("profile",), [27001.0, 27001.1], **TIME_1950),
        "lat": var(("profile",), [-64.0, -64.05], standard_name="latitude", units="degrees_north"),
        "lon": var(("profile",), [-50.0, -50.1], standard_name="longitude", units="degrees_east"),
        "z": var(("obs",), [1.0, 2.0], standard_name="depth", units="m"),
        "psal": var(("obs",), [34.0, 34.1], standard_name="sea_water_practical_salinity",
                    units="1", coordinates="time lat lon z"),
    }, featureType="profile")
    with pytest.raises(InputFileError, match="profile_index"):
        read(with_bad_index)


# --- along-track records in netCDF-4 groups ---------------------------------------------------

def grouped_alongtrack(path, n1=4, rate=20):
    """An L2 record with its 1 Hz and 20 Hz data in groups ``data_01`` and ``data_20``, each
    with a ``ku`` subgroup holding the anomaly; time, latitude and longitude in the parent
    group (found upward, CF 1.8 section 2.7, from memory)."""
    import netCDF4

    with netCDF4.Dataset(path, "w") as nc:
        nc.setncattr("platform", "sat_g")
        for group, n in (("data_01", n1), ("data_20", n1 * rate)):
            g = nc.createGroup(group)
            g.createDimension("time", n)
            seconds = np.arange(n) / (n / n1)
            for name, values, attrs in (
                    ("time", 7.0e8 + seconds, dict(standard_name="time",
                                                  units="seconds since 2000-01-01 00:00:00")),
                    ("latitude", np.linspace(10.0, 11.0, n), dict(standard_name="latitude",
                                                                  units="degrees_north")),
                    ("longitude", np.linspace(200.0, 201.0, n),
                     dict(standard_name="longitude", units="degrees_east")),
                    ("pole_tide", np.full(n, 0.01),
                     dict(standard_name="sea_surface_height_amplitude_due_to_pole_tide",
                          units="m"))):
                v = g.createVariable(name, "f8", ("time",))
                v.setncatts(attrs)
                v[:] = values
            ku = g.createGroup("ku")
            v = ku.createVariable("ssha", "f8", ("time",), fill_value=-9999.0)
            v.setncatts(dict(standard_name="sea_surface_height_above_sea_level", units="m",
                             coordinates="time latitude longitude"))
            v[:] = np.where(np.arange(n) == 1, -9999.0, np.arange(n) * 0.01)
    return str(path)


def test_grouped_alongtrack_reads_the_lowest_rate_group(tmp_path):
    path = grouped_alongtrack(tmp_path / "l2.nc")
    table = read(path)
    validate_table(table)
    assert table.attrs["kind"] == "alongtrack" and len(table) == 4
    assert reasons(table) == [None, "missing_value", None, None]
    np.testing.assert_allclose(table["value"].dropna(), [0.0, 0.02, 0.03])
    np.testing.assert_allclose(table["lon"], np.linspace(200.0, 201.0, 4) - 360.0)
    assert any("'data_01/ku'" in w and "data_20/ku (80)" in w for w in table.attrs["warnings"])
    # a correction named by its standard_name, found in the parent group
    corrected = read(path, subtract_corrections="sea_surface_height_amplitude_due_to_pole_tide")
    np.testing.assert_allclose(corrected["value"].dropna(), [-0.01, 0.01, 0.02])


def test_percent_numbers_in_dimensionless_units_are_read_as_percent(tmp_path):
    # units "1" (a fraction, CF) on values 0..100: read as percent, with a warning
    from sample_files import ice_concentration_file

    path = ice_concentration_file(tmp_path / "sic.nc", units="1")
    table = read(path)
    np.testing.assert_allclose(table["value"], [0.10, 0.55, 1.0, 0.0, NAN, 0.875], atol=1e-12)
    assert any("read as percent" in w for w in table.attrs["warnings"])
    # a true fraction (values within 0..1) is left alone
    fraction = ice_concentration_file(tmp_path / "frac.nc", units="1",
                                      conc=np.array([[[0.1, 0.5, 1.0], [0.0, NAN, 0.9]]]))
    table = read(fraction)
    np.testing.assert_allclose(table["value"], [0.1, 0.5, 1.0, 0.0, NAN, 0.9], atol=1e-12)
    assert not table.attrs.get("warnings")


def test_grouped_alongtrack_group_named_by_option(tmp_path):
    path = grouped_alongtrack(tmp_path / "l2.nc")
    table = read(path, data_group="data_20/ku")
    assert len(table) == 80 and not table.attrs.get("warnings")
    with pytest.raises(InputFileError, match="data_99"):
        read(path, data_group="data_99")
