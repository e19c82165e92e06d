"""An L4 SST analysis in a layout of its own, read through a reader profile (``[sources.reader]``)
as docs/file-conventions.md documents it.

The file is written here with netCDF4 in a layout real analyses use (from memory): the field is
``analysed_sst`` on (time_counter, y, x) with 1-D ``nav_lat``/``nav_lon`` and no standard names,
packed int16 degrees Celsius, an ``analysis_error`` in kelvin, and a ``mask`` of exclusive
states (water, land, lake, ice).  netCDF4's unpacking is the reference for the values.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from obsprep.exceptions import InputFileError
from obsprep.readers import guess_kind, read

NAN = np.nan

#: the documented profile (docs/file-conventions.md, "An L4 analysis in another layout")
L4_PROFILE = {
    "variables": {
        "sea_surface_foundation_temperature": "analysed_sst",
        "sea_surface_foundation_temperature_error": "analysis_error",
        "sea_surface_foundation_temperature_flag": "mask",
        "latitude": "nav_lat",
        "longitude": "nav_lon",
        "time": "time_counter",
    },
    "attributes": {"analysed_sst": {"units": "degC"}},
    "good_flag_meanings": ["water"],
}


@pytest.fixture
def l4(tmp_path):
    path = tmp_path / "analysis_20261119.nc"
    sst = np.array([[10.25, 11.50, NAN], [-1.80, 12.00, 13.10]])
    error = np.array([[0.30, 0.40, NAN], [0.60, 0.35, 0.32]])
    mask = np.array([[1, 1, 2], [8, 4, 1]])  # water water land / ice lake water
    with netCDF4.Dataset(path, "w") as nc:
        nc.title = "an SST analysis, not GDS 2.0"
        for name, size in (("time_counter", 1), ("y", 2), ("x", 3)):
            nc.createDimension(name, size)
        t = nc.createVariable("time_counter", "f8", ("time_counter",))
        t.units = "hours since 2026-11-19 00:00:00"
        t[:] = [12.0]
        lat = nc.createVariable("nav_lat", "f4", ("y",))
        lat[:] = [-60.0, -59.75]
        lon = nc.createVariable("nav_lon", "f4", ("x",))
        lon[:] = [10.0, 10.25, 10.5]
        v = nc.createVariable("analysed_sst", "i2", ("time_counter", "y", "x"), fill_value=np.int16(-32768))
        v.setncatts({"scale_factor": 0.01, "add_offset": 0.0, "long_name": "analysed sst"})
        v[0] = np.ma.masked_array(np.nan_to_num(sst), mask=np.isnan(sst))
        e = nc.createVariable("analysis_error", "i2", ("time_counter", "y", "x"), fill_value=np.int16(-32768))
        e.setncatts({"scale_factor": 0.01, "add_offset": 0.0, "units": "K"})
        e[0] = np.ma.masked_array(np.nan_to_num(error), mask=np.isnan(error))
        m = nc.createVariable("mask", "i1", ("time_counter", "y", "x"))
        m.setncatts({"flag_values": np.array([1, 2, 4, 8], np.int8),
                     "flag_meanings": "water land lake ice"})
        m[0] = mask
    return str(path)


def test_without_a_profile_no_reader_claims_the_analysis(l4):
    with pytest.raises(InputFileError):
        guess_kind(l4)


def test_the_documented_profile_reads_the_analysis_as_foundation_sst(l4):
    table = read(l4, kind="sst_grid", reader_profile=L4_PROFILE)
    assert set(table["quantity"].astype(str)) == {"sea_surface_foundation_temperature"}
    with netCDF4.Dataset(l4) as nc:  # netCDF4's unpacking as reference
        values = np.ma.filled(nc["analysed_sst"][0].astype(float), NAN).ravel()
        errors = np.ma.filled(nc["analysis_error"][0].astype(float), NAN).ravel()
    np.testing.assert_allclose(table["value"], values, atol=1e-9)
    kept = table["rejected"].isna().to_numpy()
    # CF 3.5 exclusive states: only "water" is good; the land cell is also fill
    assert list(table["rejected"].astype(object).where(~kept, None)) == [
        None, None, "missing_value", "provider_flag", "provider_flag", None]
    # a kelvin error is a difference: the same number in degC
    np.testing.assert_allclose(table["error"][kept], errors[kept], atol=1e-9)
    np.testing.assert_allclose(table["lat"], [-60.0] * 3 + [-59.75] * 3)
    np.testing.assert_allclose(table["lon"], [10.0, 10.25, 10.5] * 2)
    assert (table["time"] == np.datetime64("2026-11-19T12:00:00")).all()
