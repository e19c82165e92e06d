"""Tests of the CF-generic readers and the shared CF layer (obsprep.readers, .cf).

Every test writes its own small netCDF file in tmp_path with netCDF4, following the CF
conventions (layouts recalled from the CF conventions document: "(from memory)").  Reference
values come from outside the project: the SI definitions, pint/cf_xarray.units, the netCDF4
library's own unpacking, cftime, PROJ through pyproj, TEOS-10 through gsw and published
check values (named beside each check).
"""

from __future__ import annotations

import cftime
import gsw
import netCDF4
import numpy as np
import pyproj
import pytest
from cf_xarray.units import units as cf_units
from hypothesis import given, settings
from hypothesis import strategies as st
from sample_files import (  # noqa: I001 - the tests' shared file writers
    TIME_1950,
    alongtrack_file,
    geographic_drift_file,
    ice_concentration_file,
    masked_nan,
    multidimensional_profiles_file,
    projected_drift_file,
    ragged_profiles_file,
    read_checked,
    reasons,
    sst_grid_file,
    sst_swath_file,
    var,
    write_nc,
)

from obsprep.exceptions import InputFileError, NoReaderError
from obsprep.geo.rotation import projection_axis_angles, projection_to_east_north
from obsprep.readers import cf, guess_kind, read, registered_readers
from obsprep.readers.products.profiles import depth_from_pressure


def test_empty_file_gives_input_file_error_naming_the_file(tmp_path):
    path = tmp_path / "empty.nc"
    path.write_bytes(b"")
    with pytest.raises(InputFileError, match="empty") as info:
        read(path)
    assert str(path) in str(info.value)


def test_missing_file_gives_input_file_error(tmp_path):
    path = tmp_path / "absent.nc"
    with pytest.raises(InputFileError, match="not found") as info:
        read(path)
    assert str(path) in str(info.value)


def test_non_netcdf_file_gives_input_file_error(tmp_path):
    path = tmp_path / "notes.nc"
    path.write_text("this is a text file, not netCDF\n")
    with pytest.raises(InputFileError, match="not a netCDF file") as info:
        cf.open_dataset(path)
    assert str(path) in str(info.value)


@pytest.mark.parametrize("fmt", ["NETCDF4", "NETCDF3_CLASSIC"])
def test_truncated_file_gives_input_file_error(tmp_path, fmt):
    full = tmp_path / "full.nc"
    with netCDF4.Dataset(full, "w", format=fmt) as nc:
        nc.createDimension("n", 20000)
        v = nc.createVariable("sla", "f8", ("n",))
        v.standard_name = "sea_surface_height_above_sea_level"
        v[:] = np.arange(20000.0)
    data = full.read_bytes()
    path = tmp_path / "truncated.nc"
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputFileError) as info:
        read(path, kind="alongtrack")
    assert str(path) in str(info.value)
    assert "truncated" in str(info.value)


# --------------------------------------------------------------------------------------------
# auto-detection
# --------------------------------------------------------------------------------------------


def test_each_kind_is_recognised_by_exactly_one_reader(tmp_path):
    files = [
        ("alongtrack", alongtrack_file(tmp_path / "a.nc")),
        ("sst_swath", sst_swath_file(tmp_path / "b.nc")),
        ("sst_grid", sst_grid_file(tmp_path / "c.nc", np.full(6, 290.0))),
        ("ice_concentration", ice_concentration_file(tmp_path / "d.nc")),
        ("ice_drift", geographic_drift_file(tmp_path / "e.nc")),
        ("ice_drift", projected_drift_file(tmp_path / "f.nc", [0.0, 1e5], [-1e6, -1e6],
                                           [1.0, 2.0], [0.0, 1.0])),
        ("profiles", multidimensional_profiles_file(tmp_path / "g.nc", [[5.0, 10.0]],
                                                    [[10.0, 9.0]], [[35.0, 35.1]])),
        ("profiles", ragged_profiles_file(tmp_path / "h.nc")),
    ]
    for expected, path in files:
        ds = cf.open_dataset(path)
        claims = [k for k, r in registered_readers().items() if r.guess_can_open(ds)]
        assert claims == [expected], (path, claims)
        assert guess_kind(path) == expected
        assert read_checked(path).attrs["kind"] == expected


def test_file_with_no_recognisable_variables_gets_no_reader_error(tmp_path):
    path = write_nc(tmp_path / "wind.nc", {"n": 3}, {
        "u": var(("n",), [1.0, 2.0, 3.0], standard_name="eastward_wind", units="m s-1")})
    with pytest.raises(NoReaderError) as info:
        read(path)
    message = str(info.value)
    assert path in message and "no reader recognises" in message
    assert "alongtrack" in message and "profiles" in message  # lists the known kinds


# --------------------------------------------------------------------------------------------
# units
# --------------------------------------------------------------------------------------------


def test_kelvin_to_celsius_offset_conversion(tmp_path):
    kelvin = np.array([273.15, 300.0, 271.35, 280.5, 290.25, 305.0])
    table = read_checked(sst_grid_file(tmp_path / "sst.nc", kelvin))
    # SI Brochure (9th ed., from memory): t/degC = T/K - 273.15, so 273.15 K is exactly 0 degC
    assert table["value"].iloc[0] == pytest.approx(0.0, abs=1e-12)
    # pint with the CF/udunits registry of cf_xarray as reference implementation
    reference = cf_units.Quantity(kelvin, "K").to("degC").magnitude
    np.testing.assert_allclose(table["value"], reference, rtol=0, atol=1e-12)
    assert table["quantity"].astype(str).unique().tolist() == ["sea_surface_temperature"]


def test_percent_to_fraction(tmp_path):
    table = read_checked(ice_concentration_file(tmp_path / "ic.nc", units="%"))
    percent = np.array([10.0, 55.0, 100.0, 0.0, np.nan, 87.5])
    # SI Brochure (from memory): % is the number 0.01; pint/cf_xarray.units as reference
    np.testing.assert_allclose(table["value"], cf_units.Quantity(percent, "%").to("1").magnitude,
                               rtol=1e-15)
    np.testing.assert_allclose(table["value"], percent * 0.01, rtol=1e-15)


def test_centimetre_sea_level_to_metre(tmp_path):
    sla_cm = np.array([-12.5, 0.0, 3.25, 40.0, 7.0, -1.0])
    table = read_checked(alongtrack_file(tmp_path / "a.nc", sla=sla_cm, units="cm"))
    # SI prefix centi = 1e-2; pint/cf_xarray.units as reference
    np.testing.assert_allclose(table["value"], cf_units.Quantity(sla_cm, "cm").to("m").magnitude,
                               rtol=1e-15)
    np.testing.assert_allclose(table["value"], sla_cm * 1e-2, rtol=1e-15)


def test_kilometre_drift_to_metre_with_interval_and_two_rows_per_vector(tmp_path):
    table = read_checked(geographic_drift_file(tmp_path / "drift.nc"))
    assert len(table) == 6
    east = table[table["quantity"] == "sea_ice_drift_east"]
    north = table[table["quantity"] == "sea_ice_drift_north"]
    # SI prefix kilo = 1e3; pint/cf_xarray.units as reference
    np.testing.assert_allclose(north["value"],
                               cf_units.Quantity([0.5, 2.0, 4.0], "km").to("m").magnitude)
    np.testing.assert_allclose(east["value"], [1500.0, np.nan, -3000.0])
    assert east["row"].tolist() == north["row"].tolist() == [0, 1, 2]
    assert east["rejected"].astype(object).tolist()[1] == "missing_value"
    assert north["rejected"].isna().all()
    # interval from the CF time bounds (days since 1950-01-01, cftime as reference)
    start = cftime.num2date([27000.0, 27000.5, 27001.0], TIME_1950["units"])
    end = cftime.num2date([27002.0, 27002.5, 27003.0], TIME_1950["units"])
    for column, ref in (("time", start), ("time_end", end)):
        expected = np.array([np.datetime64(d.isoformat()) for d in ref], dtype="datetime64[ns]")
        np.testing.assert_array_equal(east[column].to_numpy(), expected)
        np.testing.assert_array_equal(north[column].to_numpy(), expected)


@pytest.mark.parametrize("units", ["PSU", "psu", "1e-3", "0.001", "1"])
def test_practical_salinity_spellings_mean_canonical_one(tmp_path, units):
    path = multidimensional_profiles_file(tmp_path / "p.nc", [[5.0, 10.0]], [[10.0, 9.0]],
                                          [[35.0, 34.5]], salinity_units=units)
    table = read_checked(path)
    salinity = table[table["quantity"] == "sea_water_salinity"]
    np.testing.assert_array_equal(salinity["value"], [35.0, 34.5])


@pytest.mark.parametrize("units, canonical", [
    ("K", "degC"), ("kelvin", "degC"), ("degF", "degC"), ("degree_Celsius", "degC"),
    ("cm", "m"), ("mm", "m"), ("km day-1", "m s-1"), ("cm/s", "m s-1"), ("%", "1"),
    ("dbar", "dbar"), ("hPa", "dbar"),
])
def test_unit_conversion_equals_pint_on_the_whole_array(units, canonical):
    # Reference: the CF/udunits pint registry of cf_xarray converting the array itself; obsprep
    # applies the same map as scale and offset, for values and for differences (errors).
    values = np.array([-40.0, 0.0, 0.3, 271.35, 300.0, 1e4])
    expected = cf_units.Quantity(values, units).to(canonical).magnitude
    np.testing.assert_allclose(cf.convert_units(values, units, canonical, "x.nc"), expected,
                               rtol=1e-13, atol=1e-10)
    zero = cf_units.Quantity(0.0, units).to(canonical).magnitude
    np.testing.assert_allclose(cf.convert_units(values, units, canonical, "x.nc",
                                                difference=True), expected - zero,
                               rtol=1e-13, atol=1e-10)


def test_nonsense_units_name_file_variable_and_units(tmp_path):
    path = sst_grid_file(tmp_path / "sst.nc", np.full(6, 290.0), units="bananas")
    with pytest.raises(InputFileError) as info:
        read(path)
    message = str(info.value)
    assert path in message and "'sst'" in message
    assert "bananas" in message and "degC" in message


def test_wrong_dimension_units_are_rejected(tmp_path):
    path = sst_grid_file(tmp_path / "sst.nc", np.full(6, 290.0), units="m")
    with pytest.raises(InputFileError, match="'m' cannot be converted to 'degC'"):
        read(path)


# --------------------------------------------------------------------------------------------
# packing, errors, flags
# --------------------------------------------------------------------------------------------


def test_int16_packing_equals_netcdf4_auto_decoding(tmp_path):
    kelvin = np.array([271.2, 285.55, np.nan, 300.01, 303.0, np.nan])
    path = sst_grid_file(tmp_path / "packed.nc", kelvin, scale_factor=np.float32(0.01),
                         add_offset=np.float32(273.15))
    # rewrite the variable packed as int16 with _FillValue -32768 (CF 8.1)
    with netCDF4.Dataset(tmp_path / "int16.nc", "w") as out, netCDF4.Dataset(path) as src:
        for name, dim in src.dimensions.items():
            out.createDimension(name, len(dim))
        for name, v in src.variables.items():
            if name == "sst":
                w = out.createVariable(name, "i2", v.dimensions, fill_value=np.int16(-32768))
                w.setncatts({k: v.getncattr(k) for k in v.ncattrs() if k != "_FillValue"})
                w[...] = masked_nan(kelvin.reshape(v.shape))
            else:
                out.createVariable(name, v.dtype, v.dimensions)[...] = v[...]
                out[name].setncatts({k: v.getncattr(k) for k in v.ncattrs()})
    with netCDF4.Dataset(tmp_path / "int16.nc") as nc:
        assert nc["sst"].dtype == np.int16
        reference = nc["sst"][...]  # the netCDF4 library's own unpacking (reference)
    table = read_checked(tmp_path / "int16.nc")
    decoded_kelvin = table["value"].to_numpy() + 273.15
    ref = np.ma.filled(reference.astype(np.float64), np.nan).ravel()
    # both unpack in float32 (the type of scale_factor, CF 8.1); +-273.15 in float64 adds 1e-13
    np.testing.assert_allclose(decoded_kelvin, ref, rtol=0, atol=1e-9)
    assert (table["rejected"].astype(object) == "missing_value").tolist() == \
        np.ma.getmaskarray(reference).ravel().tolist()


def test_standard_error_ancillary_converted_as_a_difference(tmp_path):
    kelvin = np.full(6, 290.0)
    path = sst_grid_file(tmp_path / "sst.nc", kelvin, ancillary_variables="sst_err")
    with netCDF4.Dataset(path, "a") as nc:
        e = nc.createVariable("sst_err", "f8", ("time", "lat", "lon"), fill_value=-999.0)
        e.standard_name = "sea_surface_temperature standard_error"
        e.units = "K"
        e[...] = np.array([0.3, 0.5, -999.0, 0.4, 0.6, 0.7]).reshape(1, 2, 3)
    table = read_checked(path, sensor="ir_sat")
    # a temperature difference of 1 K is 1 degC (SI Brochure, from memory)
    np.testing.assert_allclose(table["error"], [0.3, 0.5, np.nan, 0.4, 0.6, 0.7])
    assert table["error_origin"].astype(str).tolist() == ["file", "file", "unset", "file",
                                                           "file", "file"]
    assert set(table["sensor"].astype(str)) == {"ir_sat"}
    assert set(table["file_id"].astype(str)) == {path}


def test_flag_values_keep_only_good_meanings(tmp_path):
    # CF 3.5 flag_values/flag_meanings (from memory)
    path = alongtrack_file(tmp_path / "f.nc", qc=var(
        ("n",), [0, 1, 2, 0, 3, 1], dtype="i1", standard_name="status_flag",
        flag_values=np.array([0, 1, 2, 3], "i1"), flag_meanings="good probably_good suspect bad"))
    with netCDF4.Dataset(path, "a") as nc:
        nc["sla"].ancillary_variables = "qc"
    table = read_checked(path)
    expected = np.isin([0, 1, 2, 0, 3, 1], [0, 1])  # meanings good, probably_good
    assert (table["rejected"].isna().to_numpy() == expected).all()
    assert set(table.loc[~expected, "rejected"].astype(str)) == {"provider_flag"}
    strict = read_checked(path, good_flag_meanings=["good"])
    assert strict["rejected"].isna().tolist() == [True, False, False, True, False, False]


def test_flag_masks_bit_fields(tmp_path):
    # CF 3.5 flag_masks: each meaning is a bit; bits land=1, cloud=2, ice=4 (from memory)
    bits = np.array([0, 1, 2, 4, 6, 0])
    path = sst_grid_file(tmp_path / "sst.nc", np.full(6, 290.0), ancillary_variables="l2p")
    with netCDF4.Dataset(path, "a") as nc:
        f = nc.createVariable("l2p", "i2", ("time", "lat", "lon"))
        f.standard_name = "sea_surface_temperature status_flag"
        f.flag_masks = np.array([1, 2, 4], "i2")
        f.flag_meanings = "land cloud ice"
        f[...] = bits.reshape(1, 2, 3)
    table = read_checked(path)
    assert table["rejected"].isna().tolist() == (bits == 0).tolist()
    tolerant = read_checked(path, good_flag_meanings="ice")
    # keep a value unless the land or cloud bit is set
    assert tolerant["rejected"].isna().tolist() == ((bits & 3) == 0).tolist()


def test_flag_masks_with_flag_values_select_states(tmp_path):
    # CF 3.5: with both attributes, a state is set when value & mask == flag_value
    ds_flags = np.array([0, 1, 2, 3, 4, 7])
    path = sst_grid_file(tmp_path / "sst.nc", np.full(6, 290.0), ancillary_variables="qf")
    with netCDF4.Dataset(path, "a") as nc:
        f = nc.createVariable("qf", "i1", ("time", "lat", "lon"))
        f.standard_name = "quality_flag"
        f.flag_masks = np.array([3, 3, 3, 4], "i1")
        f.flag_values = np.array([0, 1, 2, 4], "i1")
        f.flag_meanings = "good suspect bad rain"
        f[...] = ds_flags.reshape(1, 2, 3)
    table = read_checked(path)
    expected_good = ((ds_flags & 3) != 1) & ((ds_flags & 3) != 2) & ((ds_flags & 4) != 4)
    assert table["rejected"].isna().tolist() == expected_good.tolist()


# --------------------------------------------------------------------------------------------
# times
# --------------------------------------------------------------------------------------------


def test_days_since_1950_against_cftime(tmp_path):
    days = np.array([0.0, 27000.0, 27000.5, 27000.999988426, 25567.25, 36524.0])
    table = read_checked(alongtrack_file(tmp_path / "a.nc", time=days), pass_gap_seconds=1e12)
    reference = cftime.num2date(days, "days since 1950-01-01 00:00:00", "standard")
    expected = np.array([np.datetime64(d.isoformat()) for d in reference], dtype="datetime64[ns]")
    # cftime rounds to the microsecond; ours keeps the same instant to within 1 us
    error = np.abs((table["time"].to_numpy() - expected).astype(np.int64))
    assert error.max() <= 1000


def test_noleap_calendar_against_cftime():
    # 2004 is a leap year in the real calendar; the noleap calendar has no 29 February
    days = np.array([58.0, 59.0, 59.5, 364.0, 365.0 + 59.0])
    units = "days since 2004-01-01 00:00:00"
    decoded = cf.decode_time(days, units, "noleap", "x.nc", "time")
    labels = cftime.num2date(days, units, calendar="noleap")
    expected = np.array([np.datetime64(d.isoformat()) for d in labels], dtype="datetime64[ns]")
    np.testing.assert_array_equal(decoded, expected)
    assert str(decoded[1])[:10] == "2004-03-01"


def test_time_zone_in_epoch_is_converted_to_utc():
    # CF 4.4: "... 00:00:00 +02:00" means 2 h ahead of UTC; cftime as reference
    decoded = cf.decode_time([0.0], "hours since 2000-01-01 00:00:00 +02:00", None, "x.nc")
    assert decoded[0] == np.datetime64("1999-12-31T22:00:00", "ns")


@settings(max_examples=50, deadline=None)
@given(st.lists(st.integers(-2_000_000_000, 4_000_000_000), min_size=1, max_size=20))
def test_seconds_since_1970_round_trip_against_numpy(seconds):
    # numpy datetime64 (proleptic Gregorian, Unix epoch) as reference
    decoded = cf.decode_time(np.array(seconds, dtype=np.float64),
                             "seconds since 1970-01-01T00:00:00Z", "proleptic_gregorian", "x.nc")
    np.testing.assert_array_equal(decoded, np.array(seconds, dtype="datetime64[s]"))


def test_swath_two_dimensional_pixel_time_absolute_and_offset(tmp_path):
    base = cftime.num2date(1.3e9, "seconds since 1981-01-01 00:00:00")
    expected = np.datetime64(base.isoformat(), "ns") + \
        (np.arange(12) * 10).astype("timedelta64[s]")
    for pixel_time in ("absolute", "offset"):
        table = read_checked(sst_swath_file(tmp_path / f"{pixel_time}.nc", pixel_time=pixel_time))
        assert len(table) == 12
        np.testing.assert_array_equal(table["time"].to_numpy(), expected)
        assert set(table["group"].astype(str)) == {"granule_007"}
        np.testing.assert_allclose(table["value"], 290.0 - 273.15)
    scalar = read_checked(sst_swath_file(tmp_path / "scalar.nc", pixel_time=None))
    assert (scalar["time"].to_numpy() == np.datetime64(base.isoformat(), "ns")).all()


# --------------------------------------------------------------------------------------------
# grid mappings and vector rotation
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("epsg,xy_units", [("EPSG:3413", "m"), ("EPSG:3031", "km")])
def test_grid_mapping_positions_equal_pyproj(tmp_path, epsg, xy_units):
    x = np.array([-1.0e6, 0.0, 5.0e5])
    y = np.array([-2.0e6, -1.0e6])
    table = read_checked(ice_concentration_file(tmp_path / "ic.nc", crs=epsg, xy_units=xy_units,
                                                x=x, y=y))
    xx, yy = np.meshgrid(x, y)
    # PROJ via pyproj as reference: EPSG code straight to WGS 84 longitude/latitude
    lon, lat = pyproj.Transformer.from_crs(epsg, "EPSG:4326", always_xy=True).transform(xx, yy)
    np.testing.assert_allclose(table["lat"], lat.ravel(), rtol=0, atol=1e-9)
    # compare meridians: 180 and -180 are the same longitude
    lon_difference = np.mod(table["lon"].to_numpy() - lon.ravel() + 180.0, 360.0) - 180.0
    np.testing.assert_allclose(lon_difference, 0.0, rtol=0, atol=1e-9)
    assert ((table["lon"] >= -180.0) & (table["lon"] <= 180.0)).all()
    assert len(table) == 6  # one row per grid cell, the fill cell included
    assert table["rejected"].astype(object).tolist()[4] == "missing_value"


def test_grid_mapping_reproduces_snyder_polar_stereographic_example(tmp_path):
    # [Snyder1987] USGS PP 1395, polar stereographic ellipsoidal example (from memory):
    # International 1924 ellipsoid, true scale at 71 S, central meridian 100 W;
    # 75 S, 150 E -> x = -1 540 033.6 m, y = -560 526.4 m (stated to 0.1 m)
    mapping = dict(grid_mapping_name="polar_stereographic", latitude_of_projection_origin=-90.0,
                   straight_vertical_longitude_from_pole=-100.0, standard_parallel=-71.0,
                   false_easting=0.0, false_northing=0.0, semi_major_axis=6378388.0,
                   inverse_flattening=297.0)
    path = write_nc(tmp_path / "snyder.nc", {"time": 1, "y": 1, "x": 1}, {
        "time": var(("time",), [0.0], **TIME_1950),
        "x": var(("x",), [-1540033.6], standard_name="projection_x_coordinate", units="m"),
        "y": var(("y",), [-560526.4], standard_name="projection_y_coordinate", units="m"),
        "crs": var((), None, dtype="i4", **mapping),
        "conc": var(("time", "y", "x"), [[[0.5]]], standard_name="sea_ice_area_fraction",
                    units="1", grid_mapping="crs"),
    })
    table = read_checked(path)
    # 0.1 m is about 1e-6 deg of latitude and 4e-6 deg of longitude at 75 S
    assert table["lat"].iloc[0] == pytest.approx(-75.0, abs=2e-6)
    assert table["lon"].iloc[0] == pytest.approx(150.0, abs=1e-5)


def test_projected_drift_rotation_matches_proj_meridian_convergence(tmp_path):
    x = np.array([0.0, 1.5e6, -1.0e6, 2.0e5, -3.0e5])
    y = np.array([-1.5e6, 0.0, 1.0e6, 8.0e5, -2.5e5])
    dx_km = np.array([10.0, -5.0, 3.0, 0.0, 7.5])
    dy_km = np.array([0.0, 4.0, -8.0, 6.0, -2.5])
    sigma_km = np.array([1.0, 2.0, 1.5, 0.5, 3.0])
    path = projected_drift_file(tmp_path / "drift.nc", x, y, dx_km, dy_km, sigma_km=sigma_km)
    # ground distances along the axes: a pure rotation, no scale factor
    table = read_checked(path, axis_displacements="ground")
    east = table[table["quantity"] == "sea_ice_drift_east"]
    north = table[table["quantity"] == "sea_ice_drift_north"]
    lon, lat = pyproj.Transformer.from_crs("EPSG:3413", "EPSG:4326", always_xy=True).transform(x, y)
    np.testing.assert_allclose(east["lat"], lat, atol=1e-9)
    # PROJ's meridian convergence gamma (pyproj Proj.get_factors) is the azimuth of grid north,
    # clockwise from true north, for this conformal projection: rotate the grid vector by gamma
    gamma = np.radians(pyproj.Proj("EPSG:3413").get_factors(lon, lat).meridian_convergence)
    u, v = dx_km * 1e3, dy_km * 1e3
    expected_east = u * np.cos(gamma) + v * np.sin(gamma)
    expected_north = -u * np.sin(gamma) + v * np.cos(gamma)
    # angles agree to ~1e-8 deg (finite differences vs PROJ): 1e-5 m on a 10 km displacement
    np.testing.assert_allclose(east["value"], expected_east, rtol=0, atol=1e-5)
    np.testing.assert_allclose(north["value"], expected_north, rtol=0, atol=1e-5)
    # equal component errors stay equal under a rotation
    np.testing.assert_allclose(east["error"], sigma_km * 1e3, rtol=1e-6)
    np.testing.assert_allclose(north["error"], sigma_km * 1e3, rtol=1e-6)
    assert east["row"].tolist() == north["row"].tolist() == list(range(5))
    assert (east["time_end"] - east["time"] == np.timedelta64(2, "D")).all()


@pytest.mark.parametrize("epsg,central_meridian,hemisphere", [("EPSG:3413", -45.0, 1.0),
                                                               ("EPSG:3031", 0.0, -1.0)])
def test_polar_stereographic_grid_north_azimuth_is_the_longitude_difference(epsg,
                                                                          central_meridian,
                                                                          hemisphere):
    # polar stereographic: meridians are straight lines through the pole, so the grid +y axis
    # makes the angle +-(lon - lon0) with true north, clockwise positive ([Snyder1987], USGS
    # PP 1395, ch. 21, from memory); +x is 90 deg clockwise from +y (conformal projection).
    # In obsprep's convention (counterclockwise from east) +y is at 90 deg minus that angle.
    lon = np.array([-170.0, -45.0, 0.0, 30.0, 100.0, 179.0])
    lat = hemisphere * np.array([61.0, 70.0, 75.0, 80.0, 85.0, 89.0])
    angle_x, angle_y = projection_axis_angles(pyproj.CRS(epsg), lon, lat)
    expected_y = 90.0 - hemisphere * (lon - central_meridian)
    wrap = lambda a: np.mod(a + 180.0, 360.0) - 180.0  # noqa: E731
    np.testing.assert_allclose(wrap(np.degrees(angle_y) - expected_y), 0.0, atol=1e-7)
    np.testing.assert_allclose(wrap(np.degrees(angle_y - angle_x) - 90.0), 0.0, atol=1e-7)


def test_projected_drift_missing_component_makes_both_rotated_rows_missing(tmp_path):
    # after rotation east and north each depend on both grid components
    path = projected_drift_file(tmp_path / "drift.nc", [0.0, 1e5, 2e5], [-1e6, -1e6, -1e6],
                                [1.0, np.nan, 2.0], [3.0, 4.0, np.nan])
    table = read_checked(path)
    for quantity in ("sea_ice_drift_east", "sea_ice_drift_north"):
        rows = table[table["quantity"] == quantity]
        assert reasons(rows) == [None, "missing_value", "missing_value"]
        assert np.isfinite(rows["value"].iloc[0])


def test_grid_north_points_east_ninety_degrees_from_the_central_meridian():
    # geometry of the north polar stereographic projection (EPSG:3413, central meridian 45 W):
    # on the 45 E meridian the +y axis is tangent to the parallel, pointing east, and +x points
    # away from the pole (south)
    crs = pyproj.CRS("EPSG:3413")
    angles = projection_axis_angles(crs, np.array([45.0]), np.array([75.0]))
    east, north = projection_to_east_north(np.array([1.0]), np.array([0.0]), *angles)
    assert east[0] == pytest.approx(0.0, abs=1e-6) and north[0] == pytest.approx(-1.0, abs=1e-9)
    east, north = projection_to_east_north(np.array([0.0]), np.array([1.0]), *angles)
    assert east[0] == pytest.approx(1.0, abs=1e-9) and north[0] == pytest.approx(0.0, abs=1e-6)


def test_longitude_wrapped_into_minus_180_180(tmp_path):
    lon = np.array([0.0, 179.5, 180.0, 190.0, 350.0, 359.9])
    table = read_checked(alongtrack_file(tmp_path / "a.nc", lon=lon))
    # longitudes east of 180 are the same meridians as lon - 360 (definition of longitude)
    np.testing.assert_allclose(table["lon"], [0.0, 179.5, -180.0, -170.0, -10.0, -0.1],
                               atol=1e-9)


# --------------------------------------------------------------------------------------------
# along-track specifics
# --------------------------------------------------------------------------------------------


def test_alongtrack_passes_split_at_time_gaps_and_platform(tmp_path):
    seconds = np.array([0, 1, 2, 120, 121, 400], dtype=np.float64)
    path = alongtrack_file(tmp_path / "a.nc", time=27000.0 + seconds / 86400.0)
    table = read_checked(path)
    assert table["group"].astype(str).tolist() == ["pass_0000"] * 3 + ["pass_0001"] * 2 + \
        ["pass_0002"]
    assert set(table["platform"].astype(str)) == {"sat_x"}
    wide = read_checked(path, pass_gap_seconds=500, platform="sat_y")
    assert set(wide["group"].astype(str)) == {"pass_0000"}
    assert set(wide["platform"].astype(str)) == {"sat_y"}


def test_alongtrack_trajectory_id_is_the_group(tmp_path):
    path = alongtrack_file(tmp_path / "a.nc", track=var(("n",), [7, 7, 7, 8, 8, 8], dtype="i4",
                                                           cf_role="trajectory_id"))
    table = read_checked(path)
    assert table["group"].astype(str).tolist() == ["7"] * 3 + ["8"] * 3


def test_unknown_option_is_named(tmp_path):
    path = alongtrack_file(tmp_path / "a.nc")
    # a wrong option is a mistake of the caller, not a problem of the file
    with pytest.raises(TypeError, match="'sensr'") as info:
        read(path, sensr="x")
    assert "accepted options" in str(info.value)
    with pytest.raises(TypeError, match="pass_gap_seconds"):
        read(sst_grid_file(tmp_path / "s.nc", np.full(6, 290.0)), kind="sst_grid",
             pass_gap_seconds=10)
    with pytest.raises(ValueError, match="positive"):
        read(path, pass_gap_seconds=-1)


# --------------------------------------------------------------------------------------------
# profiles
# --------------------------------------------------------------------------------------------


def test_profiles_pressure_to_depth_and_padding(tmp_path):
    nan = np.nan
    pressure = [[5.0, 100.0, 1000.0, nan], [10.0, 50.0, nan, nan]]
    temperature = [[20.0, 15.0, 4.0, nan], [10.0, nan, 3.0, nan]]
    salinity = [[35.0, 35.2, 34.9, nan], [34.0, 34.1, nan, nan]]
    path = multidimensional_profiles_file(tmp_path / "p.nc", pressure, temperature, salinity)
    table = read_checked(path, sensor="argo")
    # padding (every quantity and pressure fill): profile 0 level 3, profile 1 level 3;
    # profile 1 level 2 has a temperature but no pressure: not padding, counted as missing
    temp = table[table["quantity"] == "sea_water_temperature"]
    sal = table[table["quantity"] == "sea_water_salinity"]
    n_levels = 4
    assert temp["row"].tolist() == sal["row"].tolist() == [0, 1, 2, 1 * n_levels + 0,
                                                           1 * n_levels + 1, 1 * n_levels + 2]
    assert reasons(temp) == [None, None, None, None, "missing_value", "missing_value"]
    assert reasons(sal) == [None, None, None, None, None, "missing_value"]
    # TEOS-10 via gsw as reference: depth = -z_from_p(p, lat)
    lat = np.array([30.0, 30.0, 30.0, -40.0, -40.0, -40.0])
    p = np.array([5.0, 100.0, 1000.0, 10.0, 50.0, nan])
    np.testing.assert_allclose(temp["depth"], -gsw.z_from_p(p, lat), rtol=1e-12)
    assert temp["group"].astype(str).tolist() == ["101"] * 3 + ["202"] * 3
    assert set(table["platform"].astype(str)) == {"float_9"}
    np.testing.assert_allclose(temp["lon"], [-20.0] * 3 + [-160.0] * 3)


def test_profile_depth_at_10000_dbar_against_unesco_1983(tmp_path):
    # [FofonoffMillard1983], UNESCO Tech. Pap. Mar. Sci. 44, depth check value
    # (from memory): 10 000 dbar at 30 deg latitude -> 9712.653 m; TEOS-10 differs by ~1.1 m
    assert depth_from_pressure(10000.0, 30.0) == pytest.approx(9712.653, abs=1.5)
    path = multidimensional_profiles_file(tmp_path / "deep.nc", [[10000.0]], [[1.5]], [[34.7]],
                                          lat=(30.0,))
    table = read_checked(path)
    assert table["depth"].iloc[0] == pytest.approx(9712.653, abs=1.5)
    assert table["depth"].iloc[0] == pytest.approx(-gsw.z_from_p(10000.0, 30.0), rel=1e-12)


def test_ragged_profiles_with_depth_and_platform_variable(tmp_path):
    table = read_checked(ragged_profiles_file(tmp_path / "r.nc"))
    assert len(table) == 5  # ragged arrays have no padding: every sample is a row
    assert table["row"].tolist() == [0, 1, 2, 3, 4]
    np.testing.assert_allclose(table["depth"], [5.0, 10.0, 20.0, 1.0, 3.0])
    np.testing.assert_allclose(table["lat"], [45.0] * 3 + [46.0] * 2)
    # file in kelvin: SI Brochure (from memory) t/degC = T/K - 273.15
    np.testing.assert_allclose(table["value"], np.array([12.0, 11.0, np.nan, 14.0, 13.5]) - 273.15)
    assert table["rejected"].astype(object).tolist()[2] == "missing_value"
    assert table["platform"].astype(str).tolist() == ["ship_a"] * 3 + ["ship_b"] * 2
    assert table["group"].astype(str).tolist() == ["0"] * 3 + ["1"] * 2



# --------------------------------------------------------------------------------------------
# bad content
# --------------------------------------------------------------------------------------------


def test_missing_coordinate_variable_is_named(tmp_path):
    path = write_nc(tmp_path / "nolat.nc", {"time": 1, "y": 2}, {
        "time": var(("time",), [0.0], **TIME_1950),
        "sst": var(("time", "y"), [[290.0, 291.0]], standard_name="sea_surface_temperature",
                   units="K"),
    })
    with pytest.raises(InputFileError) as info:
        read(path, kind="sst_grid")
    message = str(info.value)
    assert path in message and "'sst'" in message and "latitude" in message


def test_missing_drift_interval_is_named(tmp_path):
    path = geographic_drift_file(tmp_path / "drift.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc["time"].delncattr("bounds")
    with pytest.raises(InputFileError, match="bounds") as info:
        read(path)
    assert path in str(info.value) and "'de'" in str(info.value)


def test_all_fill_file_is_read_with_nothing_kept_and_a_warning(tmp_path):
    # empty is not broken (a cloud-covered grid): every row under its reason, zero kept
    path = sst_grid_file(tmp_path / "fill.nc", np.full(6, np.nan))
    table = read(path)
    assert len(table) == 6
    assert (table["rejected"].astype(object) == "missing_value").all()
    assert any("all 6 values of sst" in w for w in table.attrs["warnings"])


def test_gridded_rows_account_for_every_value(tmp_path):
    kelvin = np.array([290.0, np.nan, np.nan, 291.0, np.nan, 292.0])
    table = read_checked(sst_grid_file(tmp_path / "sst.nc", kelvin))
    assert len(table) == kelvin.size
    assert table["row"].tolist() == list(range(6))
    assert (table["rejected"].astype(object) == "missing_value").sum() == 3
    np.testing.assert_allclose(table["lat"], [50.0] * 3 + [51.0] * 3)
    np.testing.assert_allclose(table["lon"], [0.0, 1.0, 2.0] * 2)


def test_programming_error_inside_a_reader_is_not_called_a_bad_file(tmp_path, monkeypatch):
    # only real file problems become InputFileError; a bug must surface as itself so the
    # build reports an internal error instead of a silently missing sensor (common practice)
    path = alongtrack_file(tmp_path / "a.nc")
    reader = registered_readers()["alongtrack"]

    def broken(*args, **kwargs):
        raise KeyError("a key the code got wrong")

    monkeypatch.setattr(reader, "read_dataset", broken)
    with pytest.raises(KeyError, match="a key the code got wrong") as info:
        read(path, kind="alongtrack")
    assert not isinstance(info.value, InputFileError)


def test_auto_kind_gives_a_reader_only_the_options_it_declares(tmp_path):
    # one source with kind auto may mix files of several readers: each reader takes its own
    # options (validated against all readers at configuration load)
    path = sst_grid_file(tmp_path / "s.nc", np.full(6, 290.0))
    plain = read(path, sensor="sst_a")
    mixed = read(path, sensor="sst_a", pass_gap_seconds=10)
    assert mixed.attrs["kind"] == "sst_grid"
    assert mixed.equals(plain) and set(mixed["sensor"]) == {"sst_a"}
    with pytest.raises(TypeError, match="'pass_gap_secs'"):
        read(path, pass_gap_secs=10)


def test_reader_options_mapping_is_derived_from_the_options_dataclass():
    import dataclasses

    for reader in registered_readers().values():
        fields = dataclasses.fields(reader.Options)
        assert list(reader.options) == [f.name for f in fields]
        assert all(reader.options[f.name] == f.metadata["meaning"] for f in fields)
    options = cf.reader_options(registered_readers()["alongtrack"],
                                {"add_corrections": "tide dac", "pass_gap_seconds": 30})
    assert options.add_corrections == ("tide", "dac") and options.pass_gap_seconds == 30.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        options.sensor = "x"


def test_leaving_out_rejected_rows_counts_what_the_full_table_holds(tmp_path):
    # the build's lean read must account for exactly the rows the full read rejects
    # (never silent: every dropped raw value is counted under its reason)
    path = alongtrack_file(tmp_path / "a.nc", sla=[0.1, np.nan, 0.2, np.nan, np.nan, 0.3])
    full = read(path)
    lean = read(path, leave_out_rejected=True)
    counted = full["rejected"].value_counts()
    assert lean.attrs[cf.NOT_IN_TABLE] == {str(k): int(v) for k, v in counted.items() if v}
    assert lean.attrs[cf.NOT_IN_TABLE] == {"missing_value": 3}
    assert lean["row"].tolist() == [0, 2, 5]


def test_reader_reasons_are_registered_by_their_modules_in_stage_order():
    # the ledger lists reasons in REASONS order: common ones, then the readers', then QC
    # (GDS 2.0 quality_level and l2p_flags, Argo QC flags: the reasons their readers produce);
    # each stage registers its reasons when it is imported, as the build imports them all
    import obsprep.qc  # noqa: F401
    import obsprep.readers  # noqa: F401
    from obsprep.model import reasons

    order = list(reasons.REASONS)
    for code in ("quality_level", "l2p_flag_ice", "missing_correction", "argo_qc_flag",
                 "position_qc", "time_qc"):
        assert order.index("quantity_not_selected") < order.index(code) \
            < order.index("argo_global_range")
    with pytest.raises(ValueError, match="already registered"):
        reasons.register_reason("quality_level", "something else", stage="reader")
    with pytest.raises(ValueError, match="unknown stage"):
        reasons.register_reason("a_new_code", "a new reason", stage="writer")
    assert "a_new_code" not in reasons.REASONS


# --- tolerant decoding, loud warnings ---------------------------------------------------------
# CF 1.11 section 3.5 (flag_values, flag_masks, flag_meanings; looked up in the CF conventions
# document, cf-convention/cf-conventions ch03), section 2.5.1 (values outside valid_min,
# valid_max, valid_range are missing, interpreted in the packed values; looked up, ch02).


def _flagged_sst(path, flag_values, flag_meanings, flags, **flag_attrs):
    """A 2 x 3 SST grid with a status_flag ancillary variable of the given attributes."""
    attrs = dict(standard_name="sea_surface_temperature status_flag", **flag_attrs)
    if flag_values is not None:
        attrs["flag_values"] = np.asarray(flag_values, np.int8)
    if flag_meanings is not None:
        attrs["flag_meanings"] = flag_meanings
    return write_nc(path, {"time": 1, "lat": 2, "lon": 3}, {
        "time": var(("time",), [1.3e9], standard_name="time",
                    units="seconds since 1981-01-01 00:00:00"),
        "lat": var(("lat",), [50.0, 51.0], standard_name="latitude", units="degrees_north"),
        "lon": var(("lon",), [0.0, 1.0, 2.0], standard_name="longitude", units="degrees_east"),
        "sst": var(("time", "lat", "lon"), np.full((1, 2, 3), 290.0), fill=-999.0,
                   standard_name="sea_surface_temperature", units="K",
                   ancillary_variables="qc"),
        "qc": var(("time", "lat", "lon"), np.asarray(flags, np.int8).reshape(1, 2, 3),
                  dtype="i1", **attrs),
    })


def test_flag_meanings_match_without_case_or_separators(tmp_path):
    # the IMOS spelling of the flag scheme: "Good_data Probably_good_data Bad_data ..."
    path = _flagged_sst(tmp_path / "qc.nc", [0, 1, 2, 3, 4],
                        "No_QC_performed Good_data Probably-good-data Bad_data Missing_value",
                        [1, 2, 3, 0, 4, 1])
    table = read_checked(path)
    assert reasons(table) == [None, None, "provider_flag", "provider_flag", "provider_flag", None]
    assert cf.meaning_key("Probably_good_data") == cf.meaning_key("probably good") \
        == "probably_good"


def test_flag_attributes_of_unequal_length_use_the_pairs_that_exist(tmp_path):
    # 3 flag_values, 4 meanings: the first 3 pairs (good, bad, good_but_odd) are read
    path = _flagged_sst(tmp_path / "qc.nc", [0, 1, 2], "good bad ok extra",
                        [0, 1, 2, 0, 1, 2])
    table = read_checked(path)
    assert reasons(table) == [None, "provider_flag", None, None, "provider_flag", None]
    assert any("'qc'" in w and "first 3 pairs" in w for w in table.attrs["warnings"])


def test_a_flag_variable_without_meanings_is_not_used_and_said_so(tmp_path):
    # flag_masks with a misspelt meanings attribute: nothing to interpret, never a refusal
    path = _flagged_sst(tmp_path / "qc.nc", None, None, [1, 2, 4, 8, 0, 0],
                        flag_masks=np.array([1, 2, 4, 8], np.int8),
                        flag_mask_meanings="a b c d")
    table = read_checked(path)
    assert reasons(table) == [None] * 6
    assert any("'qc'" in w and "not used" in w and "flag_mask_meanings" in w
               for w in table.attrs["warnings"])


def test_flag_values_written_as_a_string_are_parsed(tmp_path):
    path = _flagged_sst(tmp_path / "qc.nc", None, "good bad", [0, 1, 0, 0, 1, 0])
    with netCDF4.Dataset(path, "a") as nc:
        nc["qc"].flag_values = "0b, 1b"
    table = read_checked(path)
    assert reasons(table) == [None, "provider_flag", None, None, "provider_flag", None]
    assert any("'0b, 1b'" in w for w in table.attrs["warnings"])


def test_valid_min_and_max_make_values_outside_missing(tmp_path):
    # CF 2.5.1: values outside valid_min .. valid_max are missing, not observations
    kelvin = np.array([290.0, 250.0, 300.0, 330.0, 271.0, 310.0])
    path = sst_grid_file(tmp_path / "sst.nc", kelvin, valid_min=260.0, valid_max=310.0)
    table = read_checked(path)
    assert reasons(table) == [None, "missing_value", None, "missing_value", None, None]


def _packed_ice(path, stored, scale=0.01, meanings="pole_hole lakes coastal land_mask missing"):
    """A packed (unsigned byte, scale 0.01) ice concentration with its own flags beyond
    valid_max, in the layout of a polar-stereographic climate data record."""
    crs = pyproj.CRS("EPSG:3413")
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("time", 1)
        nc.createDimension("y", 2)
        nc.createDimension("x", 3)
        t = nc.createVariable("time", "f8", ("time",))
        t.setncatts(TIME_1950)
        t[:] = [27000.5]
        for name, values, axis in (("x", [-1e6, 0.0, 5e5], "projection_x_coordinate"),
                                   ("y", [-2e6, -1e6], "projection_y_coordinate")):
            v = nc.createVariable(name, "f8", (name,))
            v.setncatts(dict(standard_name=axis, units="m"))
            v[:] = values
        m = nc.createVariable("crs", "i4", ())
        m.setncatts({k: v for k, v in crs.to_cf().items() if k != "crs_wkt"})
        c = nc.createVariable("conc", "u1", ("time", "y", "x"), fill_value=np.uint8(255))
        c.set_auto_maskandscale(False)
        c.setncatts(dict(standard_name="sea_ice_area_fraction", units="1", grid_mapping="crs",
                         scale_factor=np.float32(scale),
                         valid_range=np.array([0, 100], np.uint8),
                         flag_values=np.array([251, 252, 253, 254, 255], np.uint8),
                         flag_meanings=meanings))
        c[:] = np.asarray(stored, np.uint8).reshape(1, 2, 3)
    return str(path)


def test_flag_values_in_the_data_variable_beyond_valid_max_are_flags(tmp_path):
    # stored 0, 100, 253 (coastal), 120 (outside 0..100, no flag: missing), 255 (fill), 37
    path = _packed_ice(tmp_path / "ice.nc", [0, 100, 253, 120, 255, 37])
    table = read_checked(path)
    assert reasons(table) == [None, None, "provider_flag", "missing_value", "missing_value",
                              None]
    kept = table["rejected"].isna().to_numpy()
    # netCDF4's own unpacking of the stored bytes (scale_factor 0.01, float32)
    with netCDF4.Dataset(path) as nc:
        unpacked = np.ma.filled(nc["conc"][:].astype(np.float64), np.nan).ravel()
    np.testing.assert_allclose(table["value"].to_numpy()[kept], unpacked[kept], rtol=1e-6)


def test_several_variables_with_one_standard_name_chosen_by_the_rule(tmp_path):
    # two algorithms' concentrations; the one with ancillary variables is the product's own
    path = ice_concentration_file(tmp_path / "ice.nc")
    with netCDF4.Dataset(path, "a") as nc:
        other = nc.createVariable("algo_b", "f8", ("time", "y", "x"), fill_value=-1.0)
        other.setncatts(dict(standard_name="sea_ice_area_fraction", units="%",
                             grid_mapping="crs"))
        other[:] = np.full((1, 2, 3), 50.0)
        nc.renameVariable("ice_conc", "z_primary")  # after algo_b in name order, not in rule
        err = nc.createVariable("z_err", "f8", ("time", "y", "x"))
        err.setncatts(dict(standard_name="sea_ice_area_fraction standard_error", units="%"))
        err[:] = np.full((1, 2, 3), 5.0)
        nc["z_primary"].ancillary_variables = "z_err"
    table = read_checked(path)
    assert table.attrs["variables"].get("z_primary") == "%"
    np.testing.assert_allclose(table["error"].dropna(), 0.05)
    assert any("2 variables have standard_name 'sea_ice_area_fraction'" in w
               and "'z_primary'" in w for w in table.attrs["warnings"])


def test_meanings_reject_by_word_prefix_and_never_for_a_filter():
    assert cf.meaning_matches("Lakes", ["lake"]) and cf.meaning_matches("coastal", ["coast"])
    assert cf.meaning_matches("land_mask", ["land"]) and cf.meaning_matches("pole_hole",
                                                                             ["pole hole"])
    assert not cf.meaning_matches("nominal", ["no_data"])
    assert not cf.meaning_matches("island", ["land"])
    assert cf.is_filter_meaning("land_spill_over_filtered")
    assert cf.is_filter_meaning("BT_weather_filter_applied")
    assert not cf.is_filter_meaning("land")


# --- drift: per-vector times, ancillary uncertainty ------------------------------------------

def _drift_with_vector_times(path):
    """Three east/north vectors; nominal period 2 days; each vector with its own start (hours
    since 2023-12-01) and end (seconds since 1970-01-01); an uncertainty named only in
    ancillary_variables, in m (the displacements are in km), no standard_name, no flags."""
    start_hours = np.array([12.0, 13.5, np.nan])
    end = np.datetime64("2023-12-02T18:00:00", "s") + np.array([0, 3600, 7200])
    end_seconds = (end - np.datetime64("1970-01-01T00:00:00", "s")).astype(np.float64)
    return write_nc(path, {"n": 3, "nv": 2}, {
        "time": var((), 26997.0, bounds="time_bnds", **TIME_1950),
        "time_bnds": var(("nv",), [26997.0, 26999.0]),
        "lat": var(("n",), [80.0, 81.0, 82.0], standard_name="latitude", units="degrees_north"),
        "lon": var(("n",), [0.0, 10.0, 20.0], standard_name="longitude", units="degrees_east"),
        "t_start": var(("n",), start_hours, fill=-1.0, units="hours since 2023-12-01 00:00:00",
                       long_name="start time of the displacement"),
        "t_end": var(("n",), end_seconds, units="seconds since 1970-01-01",
                     long_name="end time of the displacement"),
        "de": var(("n",), [1.5, 2.0, -3.0], fill=-1e20, units="km",
                  standard_name="eastward_sea_ice_displacement",
                  ancillary_variables="uncert_e"),
        "dn": var(("n",), [0.5, 2.0, 4.0], fill=-1e20, units="km",
                  standard_name="northward_sea_ice_displacement",
                  ancillary_variables="uncert_n"),
        "uncert_e": var(("n",), [300.0, 400.0, 500.0], units="m"),
        "uncert_n": var(("n",), [350.0, 450.0, 550.0], units="m"),
    })


def test_drift_uses_per_vector_times_with_their_own_epochs(tmp_path):
    table = read_checked(_drift_with_vector_times(tmp_path / "drift.nc"))
    east = table[table["quantity"] == "sea_ice_drift_east"]
    # cftime decodes the same numbers with each variable's own units (reference library)
    starts = cftime.num2date([12.0, 13.5], "hours since 2023-12-01 00:00:00",
                             only_use_cftime_datetimes=False, only_use_python_datetimes=True)
    assert list(east["time"][:2]) == [np.datetime64(s, "ns") for s in starts]
    assert np.isnat(east["time"].to_numpy()[2]) and reasons(east)[2] == "bad_time"
    np.testing.assert_array_equal(
        east["time_end"].to_numpy(),
        np.datetime64("2023-12-02T18:00:00", "ns") + np.array([0, 1, 2]) * np.timedelta64(1, "h"))


def test_drift_uncertainty_from_ancillary_variables_by_units(tmp_path):
    table = read_checked(_drift_with_vector_times(tmp_path / "drift.nc"))
    east = table[table["quantity"] == "sea_ice_drift_east"]
    north = table[table["quantity"] == "sea_ice_drift_north"]
    # 300 m etc. in the data's canonical m; the displacements 1.5 km -> 1500 m
    np.testing.assert_allclose(east["error"], [300.0, 400.0, 500.0])
    np.testing.assert_allclose(north["error"], [350.0, 450.0, 550.0])
    np.testing.assert_allclose(east["value"], [1500.0, 2000.0, -3000.0])
    assert any("uncert_e" in w for w in table.attrs["warnings"])


def test_drift_uncertainty_with_flag_attributes_or_other_units_is_not_used(tmp_path):
    path = _drift_with_vector_times(tmp_path / "drift.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc["uncert_e"].units = "degC"
        nc["uncert_n"].flag_values = np.array([1.0])
        nc["uncert_n"].flag_meanings = "bad"
    table = read_checked(path)
    assert table["error"].isna().all()


def test_drift_per_vector_offsets_from_the_nominal_start_and_end(tmp_path):
    # durations in seconds, the start one from the nominal start, the end one from the
    # nominal end (time_bnds 26997 .. 26999 days since 1950)
    path = _drift_with_vector_times(tmp_path / "drift.nc")
    with netCDF4.Dataset(path, "a") as nc:
        for name, seconds, what in (("dt0", [600.0, 1200.0, 0.0], "start"),
                                    ("dt1", [-600.0, 0.0, 1800.0], "end")):
            v = nc.createVariable(name, "f8", ("n",))
            v.setncatts(dict(units="seconds", long_name=f"time offset of the {what} of the "
                                                         "displacement"))
            v[:] = seconds
        for name in ("t_start", "t_end"):
            nc.renameVariable(name, f"old_{name}")
            nc[f"old_{name}"].units = "1"  # no longer times
    table = read_checked(path)
    east = table[table["quantity"] == "sea_ice_drift_east"]
    start = np.datetime64("2023-12-01T00:00:00", "ns")  # 26997 days after 1950-01-01
    end = start + np.timedelta64(2, "D")
    assert cftime.num2date(26997.0, TIME_1950["units"], only_use_cftime_datetimes=False,
                           only_use_python_datetimes=True) == start.astype("datetime64[us]").item()
    np.testing.assert_array_equal(east["time"].to_numpy(),
                                  start + np.array([600, 1200, 0]) * np.timedelta64(1, "s"))
    np.testing.assert_array_equal(east["time_end"].to_numpy(),
                                  end + np.array([-600, 0, 1800]) * np.timedelta64(1, "s"))


def test_attributes_that_are_not_numbers_warn_and_never_refuse(tmp_path):
    # valid_max written as text, flag_values as text: warnings, the file read
    path = _flagged_sst(tmp_path / "qc.nc", None, "good bad", [0, 1, 0, 0, 1, 0])
    with netCDF4.Dataset(path, "a") as nc:
        nc["qc"].flag_values = "0, 1"
        nc["sst"].setncattr_string("valid_max", "hot")
    table = read_checked(path)
    assert reasons(table) == [None, "provider_flag", None, None, "provider_flag", None]
    assert any("not numbers" in w and "'sst'" in w for w in table.attrs["warnings"])


def test_a_status_flag_with_no_flag_attributes_at_all_is_not_used(tmp_path):
    path = _flagged_sst(tmp_path / "qc.nc", None, None, [1, 2, 4, 8, 0, 0])
    table = read_checked(path)
    assert reasons(table) == [None] * 6
    assert any("'qc'" in w and "no flag attributes" in w for w in table.attrs["warnings"])
