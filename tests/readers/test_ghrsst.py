"""GHRSST GDS 2.0 L2P and L3 readers on small files written from the specification.

References: GHRSST Data Specification 2.0 (from memory; [GDS2]): quality
levels 0 no data .. 5 best, bias-corrected SST = sea_surface_temperature - sses_bias, time
reference 1981-01-01 00:00:00 UTC, l2p_flags bits from flag_masks/flag_meanings (CF 3.5).  The
netCDF4 library's own unpacking (scale_factor/add_offset) and numpy datetime64 arithmetic are the
reference implementations for values and times.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest
from sample_files import GDS2_EPOCH, write_gds2

from obsprep.model.table import validate_table
from obsprep.readers import cf, guess_kind, read, registered_readers

NAN = np.nan


def reasons(table):
    return [None if isinstance(r, float) else r for r in table["rejected"].astype(object)]


def netcdf4_decoded(path, name):
    """The variable as netCDF4 unpacks it (reference for packing), NaN for fill."""
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_maskandscale(True)
        return np.ma.filled(nc[name][0].astype(np.float64), np.nan)


@pytest.fixture
def l2p(tmp_path):
    sst = np.array([[300.00, 301.00, 302.00, 290.00],
                    [285.00, NAN, 288.00, 289.00],
                    [271.50, 280.00, 281.00, 282.00]])
    bias = np.array([[0.50, -0.30, 0.00, 0.10],
                     [0.00, 0.00, NAN, 0.00],
                     [0.00, 0.20, 0.00, 0.00]])
    sd = np.full(sst.shape, 0.40)
    sd[0, 1] = 0.65
    dtime = np.arange(sst.size, dtype=float).reshape(sst.shape) * 120.0
    quality = np.array([[5, 4, 3, 5],
                        [5, 0, 5, 2],
                        [5, 5, 5, 1]])
    # l2p_flags bits (GDS 2.0, from memory): 1 microwave, 2 land, 4 ice, 8 lake, 16 river
    flags = np.array([[0, 1, 0, 0],
                      [2, 0, 0, 0],
                      [4 | 2, 8, 16, 0]])
    path = write_gds2(tmp_path / "20261119000000-DEMO-L2P_GHRSST-SSTskin.nc", sst, bias=bias,
                      sd=sd, dtime=dtime, quality=quality, flags=flags)
    return path, dict(sst=sst, bias=bias, sd=sd, dtime=dtime, quality=quality, flags=flags)


def test_gds2_files_are_claimed_before_the_cf_generic_sst_readers(l2p, tmp_path):
    path, _ = l2p
    ds = cf.open_dataset(path)
    claims = [k for k, r in registered_readers().items() if r.guess_can_open(ds)]
    # the CF-generic swath reader also recognises the file; the GDS 2.0 reader is asked first
    assert claims[0] == "ghrsst_l2p" and "ghrsst_l3" not in claims
    assert guess_kind(path) == "ghrsst_l2p"
    l3 = write_gds2(tmp_path / "l3.nc", np.full((2, 3), 290.0), level="L3")
    assert guess_kind(l3) == "ghrsst_l3"


def test_l2p_values_errors_times_against_netcdf4_and_the_gds2_rules(l2p):
    path, f = l2p
    table = read(path, sensor="sst_ir")
    validate_table(table)
    assert len(table) == f["sst"].size
    # reference: netCDF4's unpacking, then GDS 2.0 bias correction SST - sses_bias, K -> degC
    sst = netcdf4_decoded(path, "sea_surface_temperature")
    bias = netcdf4_decoded(path, "sses_bias")
    expected = np.where(np.isfinite(bias), sst - bias, sst) - 273.15
    np.testing.assert_allclose(table["value"], expected.ravel(), rtol=0, atol=1e-9)
    # bias sign: 300.00 K with bias +0.50 K is 299.50 K, i.e. 26.35 degC
    assert table["value"].iloc[0] == pytest.approx(26.35, abs=1e-9)
    np.testing.assert_allclose(table["error"], netcdf4_decoded(path, "sses_standard_deviation")
                               .ravel(), rtol=0, atol=1e-9)
    # time = 1981-01-01 + reference time + sst_dtime (numpy datetime64 as reference)
    expected_time = (GDS2_EPOCH + np.timedelta64(1_000_000_000, "s")
                     + (f["dtime"].ravel() * 1e9).astype("timedelta64[ns]"))
    np.testing.assert_array_equal(table["time"].to_numpy(), expected_time)
    assert set(table["group"].astype(str)) == {"DEMO-L2P-GHRSST"}
    assert set(table["platform"].astype(str)) == {"demo_sat"}
    # longitudes 350..351 in the file are -10..-9
    assert table["lon"].min() == pytest.approx(-10.0) and table["lon"].max() <= -9.0 + 1e-5


def test_l2p_rejections_each_have_their_reason(l2p):
    path, _ = l2p
    table = read(path)
    assert reasons(table) == [
        None, None, "quality_level", None,             # ql 3 < 4; microwave bit is not rejected
        "l2p_flag_land", "missing_value", "missing_bias", "quality_level",
        "l2p_flag_land", "l2p_flag_lake", "l2p_flag_river", "quality_level",  # land before ice
    ]


def test_rows_left_out_by_the_reader_are_counted_under_the_same_reasons(l2p):
    # Reference: the full table of the same file (every row with its reason, as `obsprep
    # read` shows it); the build's reader leaves the rejected rows out and counts them.
    path, _ = l2p
    full = read(path)
    lean = read(path, leave_out_rejected=True)
    kept = full[full["rejected"].isna()].reset_index(drop=True)
    assert len(lean) == len(kept) == 3  # the three kept pixels of the fixture
    for column in ("value", "error", "lon", "lat", "time", "row"):
        np.testing.assert_array_equal(lean[column].to_numpy(), kept[column].to_numpy())
    assert lean["rejected"].isna().all()
    counted = full["rejected"].value_counts()
    assert lean.attrs[cf.NOT_IN_TABLE] == {str(k): int(v) for k, v in counted.items() if v}
    assert sum(lean.attrs[cf.NOT_IN_TABLE].values()) + len(lean) == len(full)
    assert cf.NOT_IN_TABLE not in full.attrs


def test_only_the_variables_the_reader_uses_are_read_each_once(l2p, monkeypatch):
    # Real L2P granules carry many variables obsprep does not use (wind speed, sea-ice
    # fraction, ...); they must not be read or decoded.  Reference: the netCDF4 reads that
    # xarray's netCDF4 backend makes, recorded.
    from xarray.backends import netCDF4_

    path, _ = l2p
    expected = read(path)
    with netCDF4.Dataset(path, "a") as nc:
        for name in ("wind_speed", "sea_ice_fraction"):
            v = nc.createVariable(name, "f4", ("time", "nj", "ni"))
            v[:] = np.ones(v.shape)
    reads = []
    original = netCDF4_.NetCDF4ArrayWrapper._getitem

    def recording(self, key):
        reads.append(self.variable_name)
        return original(self, key)

    monkeypatch.setattr(netCDF4_.NetCDF4ArrayWrapper, "_getitem", recording)
    table = read(path)
    assert "wind_speed" not in reads and "sea_ice_fraction" not in reads
    assert sorted(reads) == sorted(set(reads))  # each variable read once
    assert {"sea_surface_temperature", "lat", "lon", "quality_level"} <= set(reads)
    np.testing.assert_array_equal(table["value"], expected["value"])
    assert reasons(table) == reasons(expected)


def test_options_minimum_quality_flags_and_bias_switch(l2p):
    path, f = l2p
    table = read(path, min_quality_level=2, reject_l2p_flags="ice microwave",
                 subtract_sses_bias=False)
    assert reasons(table) == [
        None, "l2p_flag_other", None, None,
        None, "missing_value", None, None,
        "l2p_flag_ice", None, None, "quality_level",
    ]
    # without the bias correction the value is the file's SST (netCDF4 unpacking)
    np.testing.assert_allclose(table["value"], netcdf4_decoded(path, "sea_surface_temperature")
                               .ravel() - 273.15, atol=1e-9)
    with pytest.raises(ValueError, match="min_quality_level"):
        read(path, min_quality_level=6)
    with pytest.raises(TypeError, match="good_flag_meanings"):
        # not an option of the GDS 2.0 reader
        read(path, kind="ghrsst_l2p", good_flag_meanings="good")


def test_l3_grid_with_one_dimensional_coordinates(tmp_path):
    sst = np.array([[275.0, 276.0, NAN], [277.0, 278.0, 279.0]])
    quality = np.array([[5, 4, 0], [3, 5, 5]])
    path = write_gds2(tmp_path / "l3.nc", sst, level="L3", quality=quality,
                      bias=np.full(sst.shape, 0.1), lat=[-65.0, -64.0], lon=[170.0, 180.0, 190.0])
    table = read(path)
    assert table.attrs["kind"] == "ghrsst_l3"
    np.testing.assert_allclose(table["lat"], [-65.0] * 3 + [-64.0] * 3)
    # 190 E is -170 in -180..180; 180 E is -180
    np.testing.assert_allclose(table["lon"], [170.0, -180.0, -170.0] * 2)
    np.testing.assert_allclose(table["value"], (sst - 0.1 - 273.15).ravel(), atol=1e-6)
    assert reasons(table) == [None, None, "missing_value", "quality_level", None, None]
    assert set(table["group"].astype(str)) == {""}


def test_an_absent_bias_reads_the_uncorrected_sst_with_a_warning(tmp_path):
    path = write_gds2(tmp_path / "nobias.nc", np.full((2, 2), 290.0))
    with netCDF4.Dataset(path, "a") as nc:
        nc.renameVariable("sses_bias", "bias_other")
    table = read(path)  # subtract_sses_bias is on by default: no refusal, a warning
    np.testing.assert_allclose(table["value"], 290.0 - 273.15, atol=1e-9)
    assert table["rejected"].isna().all()
    assert any("no sses_bias variable" in w and "without the bias correction" in w
               for w in table.attrs["warnings"])


def test_flags_without_meanings_get_the_gds2_bits_with_a_warning(tmp_path):
    # GDS 2.0 l2p_flags bits 0-4 (from memory): 1 microwave, 2 land, 4 ice, 8 lake, 16 river
    path = write_gds2(tmp_path / "flags.nc", np.full((2, 2), 290.0),
                      flags=np.array([[0, 2], [4, 1]]))
    with netCDF4.Dataset(path, "a") as nc:
        nc["l2p_flags"].delncattr("flag_meanings")
    table = read(path)
    assert reasons(table) == [None, "l2p_flag_land", "l2p_flag_ice", None]
    assert any("'l2p_flags' has no flag_masks/flag_meanings" in w for w in table.attrs["warnings"])


def test_an_absent_quality_level_keeps_the_values_or_rejects_them_by_option(tmp_path):
    path = write_gds2(tmp_path / "noql.nc", np.array([[290.0, NAN], [291.0, 292.0]]))
    with netCDF4.Dataset(path, "a") as nc:
        nc.renameVariable("quality_level", "ql_other")
    table = read(path)
    assert reasons(table) == [None, "missing_value", None, None]
    assert any("no quality_level variable" in w for w in table.attrs["warnings"])
    strict = read(path, without_quality_level="reject")
    assert reasons(strict) == ["quality_level", "missing_value", "quality_level", "quality_level"]
    with pytest.raises(ValueError, match="without_quality_level"):
        read(path, without_quality_level="maybe")


def test_sst_type_is_the_quantity_of_the_standard_name(tmp_path):
    # CF standard names of the GDS 2.0 SST types ([GDS2] "SST definitions")
    for standard_name in ("sea_surface_skin_temperature", "sea_surface_subskin_temperature",
                          "sea_surface_foundation_temperature", "sea_surface_temperature"):
        path = write_gds2(tmp_path / f"{standard_name}.nc", np.full((2, 2), 290.0),
                          sst_standard_name=standard_name)
        table = read(path)
        assert set(table["quantity"].astype(str)) == {standard_name}
        assert "warnings" not in table.attrs or not any(
            "not an SST standard name" in w for w in table.attrs["warnings"])


@pytest.mark.parametrize("standard_name, file_name, long_name, expected", [
    # GDS 2.0: SSTdepth is written sea_water_temperature with a depth ([GDS2] "SST definitions")
    ("sea_water_temperature", "l2p.nc", "sea water temperature at 1 meter depth",
     "sea_surface_temperature"),
    # the GDS 2.0 file name carries the SST type ([GDS2] file naming, from memory)
    ("sea_surface_temp", "20261119000000-DEMO-L2P_GHRSST-SSTsubskin-X-v02.0-fv01.0.nc",
     "sst", "sea_surface_subskin_temperature"),
    (None, "l2p.nc", "sea surface foundation temperature", "sea_surface_foundation_temperature"),
    ("surface_temperature", "l2p.nc", "sst", "sea_surface_temperature"),
])
def test_a_gds2_sst_with_a_wrong_standard_name_is_read_with_a_warning(
        tmp_path, standard_name, file_name, long_name, expected):
    path = write_gds2(tmp_path / file_name, np.full((2, 2), 290.0))
    with netCDF4.Dataset(path, "a") as nc:
        var = nc["sea_surface_temperature"]
        var.delncattr("standard_name")
        if standard_name is not None:
            var.standard_name = standard_name
        var.long_name = long_name
    assert guess_kind(path) == "ghrsst_l2p"
    table = read(path)
    assert set(table["quantity"].astype(str)) == {expected}
    np.testing.assert_allclose(table["value"], 290.0 - 273.15, atol=1e-9)
    (warning,) = [w for w in table.attrs["warnings"] if "not an SST standard name" in w]
    found = f"standard_name '{standard_name}'" if standard_name else "no standard_name"
    assert found in warning and expected in warning


def _guard_file(tmp_path, standard_name="sea_surface_skin_temperature", wind=None,
                name="guard.nc"):
    """Four pixels at 2026-03-20T12:00 UTC on the equator: lon 0 and 10 E by day (about
    local noon), 180 and 170 W by night (about local midnight)."""
    reference = (np.datetime64("2026-03-20T12:00:00") - GDS2_EPOCH) // np.timedelta64(1, "s")
    path = write_gds2(tmp_path / name, np.full((1, 4), 300.0), lat=[0.0],
                      lon=[0.0, 10.0, 180.0, -170.0], reference_seconds=int(reference),
                      sst_standard_name=standard_name)
    if wind is not None:
        with netCDF4.Dataset(path, "a") as nc:
            v = nc.createVariable("wind_speed", "f4", ("time", "nj", "ni"), fill_value=np.float32(-999))
            v.setncatts({"standard_name": "wind_speed", "units": "m s-1"})
            v[:] = np.ma.masked_invalid(np.asarray(wind, dtype=np.float32)).reshape(1, 1, 4)
    return path


def test_diurnal_guard_night_only_rejects_daytime_skin_sst(tmp_path):
    path = _guard_file(tmp_path)
    assert reasons(read(path)) == [None] * 4  # off by default
    table = read(path, diurnal_guard="night")
    # local solar time 12:00 and 12:40 at 0 and 10 E: day; 00:00 and 00:40 at 180, 170 W: night
    assert reasons(table) == ["diurnal_warming", "diurnal_warming", None, None]


def test_diurnal_guard_keeps_daytime_values_in_wind_above_the_threshold(tmp_path):
    path = _guard_file(tmp_path, wind=[7.0, 3.0, 1.0, NAN])
    table = read(path, diurnal_guard="night_or_windy")
    assert reasons(table) == [None, "diurnal_warming", None, None]
    assert "wind_speed" in table.attrs["variables"]
    # the threshold is an option (m/s): at 8 m/s the 7 m/s pixel is warmed too
    table = read(path, diurnal_guard="night_or_windy", diurnal_min_wind_speed=8.0)
    assert reasons(table) == ["diurnal_warming", "diurnal_warming", None, None]
    # no wind in the file: no daytime value passes, with a warning
    table = read(_guard_file(tmp_path, name="calm.nc"), diurnal_guard="night_or_windy")
    assert reasons(table) == ["diurnal_warming", "diurnal_warming", None, None]
    assert any("no wind_speed variable" in w for w in table.attrs["warnings"])


def test_diurnal_guard_leaves_foundation_and_depth_sst_alone(tmp_path):
    for standard_name in ("sea_surface_foundation_temperature", "sea_surface_temperature"):
        path = _guard_file(tmp_path, standard_name, name=f"{standard_name}.nc")
        assert reasons(read(path, diurnal_guard="night")) == [None] * 4


def test_gds2_l4_analysis_keeps_open_water_cells_with_their_analysis_error(tmp_path):
    # GDS 2.0 L4 ([GDS2], from memory): analysed_sst (foundation), analysis_error and a mask of
    # bits 1 water, 2 land, 4 optional_lake_surface, 8 sea_ice, 16 optional_river_surface
    path = tmp_path / "20261119120000-DEMO-L4_GHRSST-SSTfnd-ANALYSIS-v02.0-fv01.0.nc"
    sst = np.array([[280.0, NAN, 281.0], [271.35, 282.0, NAN]])
    error = np.array([[0.3, NAN, 0.4], [0.5, 0.35, NAN]])
    mask = np.array([[1, 2, 5], [9, 1, 1]])
    with netCDF4.Dataset(path, "w") as nc:
        nc.gds_version_id = "2.0"
        for name, size in (("time", 1), ("lat", 2), ("lon", 3)):
            nc.createDimension(name, size)
        t = nc.createVariable("time", "i4", ("time",))
        t.setncatts({"standard_name": "time", "units": "seconds since 1981-01-01 00:00:00"})
        t[:] = [int((np.datetime64("2026-11-19T12:00:00") - GDS2_EPOCH) // np.timedelta64(1, "s"))]
        for name, data, sn in (("lat", [-60.0, -59.9], "latitude"), ("lon", [10.0, 10.1, 10.2], "longitude")):
            v = nc.createVariable(name, "f4", (name,))
            v.setncatts({"standard_name": sn, "units": f"degrees_{'north' if name == 'lat' else 'east'}"})
            v[:] = data
        for name, data, sn, offset in (("analysed_sst", sst, "sea_surface_foundation_temperature", 273.15),
                                       ("analysis_error", error, None, 0.0)):
            v = nc.createVariable(name, "i2", ("time", "lat", "lon"), fill_value=np.int16(-32768))
            v.setncatts({"scale_factor": 0.01, "add_offset": offset, "units": "kelvin",
                         **({"standard_name": sn} if sn else {})})
            v[0] = np.ma.masked_array(np.nan_to_num(data), mask=np.isnan(data))
        m = nc.createVariable("mask", "i1", ("time", "lat", "lon"))
        m.setncatts({"flag_masks": np.array([1, 2, 4, 8, 16], np.int8),
                     "flag_meanings": "water land optional_lake_surface sea_ice optional_river_surface"})
        m[0] = mask
    path = str(path)
    assert guess_kind(path) == "ghrsst_l4"
    table = read(path)
    assert set(table["quantity"].astype(str)) == {"sea_surface_foundation_temperature"}
    # water + lake (5) and water + sea_ice (9) set a meaning other than water
    assert reasons(table) == [None, "missing_value", "l4_mask", "l4_mask", None, "missing_value"]
    kept = table["rejected"].isna().to_numpy()
    np.testing.assert_allclose(table["value"][kept], (sst.ravel() - 273.15)[kept], atol=1e-9)
    np.testing.assert_allclose(table["error"][kept], error.ravel()[kept], atol=1e-9)
    assert (table["time"] == np.datetime64("2026-11-19T12:00:00")).all()
