"""Onboarding: the reader profile guessed for a file no reader claims parses as TOML, names the
roles the file's metadata supports, and with it the file reads.

The files are written here without standard names, so no reader claims them (checked first);
the roles expected follow from how each variable was written: CF 1.8 sections 4.1/4.2
(latitude and longitude units), 4.4 (time units "<unit> since <epoch>"), 3.5 (flag_values,
flag_meanings), and decibar for sea pressure (common practice).  Values read are compared
with the file read by netCDF4 directly (masking by hand)."""

from __future__ import annotations

import tomllib

import netCDF4
import numpy as np
import pytest
from onboarding_files import unclaimed_grid, unclaimed_profiles
from sample_files import var, write_nc

from obsprep.exceptions import NoReaderError
from obsprep.readers import guess_kind, read
from obsprep.readers.cf import open_dataset
from obsprep.readers.onboarding import candidate_variables, guess_profile_roles, profile_snippet


def roles(path):
    ds = open_dataset(path, load=False)
    try:
        return {g.role: g.variable for g in guess_profile_roles(ds)}, profile_snippet(ds, path)
    finally:
        ds.close()


def test_candidates_list_every_numeric_variable_with_its_metadata(tmp_path):
    path = unclaimed_grid(tmp_path / "grid.nc")
    ds = open_dataset(path, load=False)
    candidates = {c.name: c for c in candidate_variables(ds)}
    ds.close()
    assert list(candidates) == ["obs_time", "y_lat", "x_lon", "surface_temp", "surface_temp_err",
                                "surface_temp_qc", "wind"]
    c = candidates["surface_temp"]
    assert (c.units, c.long_name, c.dimensions, c.standard_name) == (
        "degree_Celsius", "sea surface temperature", ("t", "row", "col"), "")
    assert candidates["surface_temp_qc"].flag_meanings == "good suspect bad"


def test_guessed_profile_of_an_unclaimed_grid_parses_and_reads_the_file(tmp_path):
    path = unclaimed_grid(tmp_path / "grid.nc")
    with pytest.raises(NoReaderError):
        guess_kind(path)  # the control: unclaimed as written
    guessed, snippet = roles(path)
    assert guessed == {
        "sea_surface_temperature": "surface_temp",
        "sea_surface_temperature_error": "surface_temp_err",  # named after it, same dimension
        "sea_surface_temperature_flag": "surface_temp_qc",     # flag_meanings (CF 3.5)
        "latitude": "y_lat", "longitude": "x_lon", "time": "obs_time",
    }
    profile = tomllib.loads(snippet)["sources"]["reader"]
    assert profile == {"variables": guessed}
    for line in snippet.splitlines():
        assert line.startswith("#") or line.startswith("[") or "# CHECK:" in line, line

    table = read(path, reader_profile=profile)
    assert table.attrs["kind"] == "sst_grid"
    # reference: the file read by netCDF4, fill masked by netCDF4 itself; flag meaning "good"
    # kept (CF 3.5: flag_values[i] means flag_meanings[i])
    with netCDF4.Dataset(path) as nc:
        sst = nc["surface_temp"][:].ravel()
        qc = nc["surface_temp_qc"][:].ravel()
        good_value = nc["surface_temp_qc"].flag_values[
            nc["surface_temp_qc"].flag_meanings.split().index("good")]
    expected_kept = (~np.ma.getmaskarray(sst)) & (qc == good_value)
    kept = table["rejected"].isna().to_numpy()
    assert np.array_equal(kept, expected_kept)
    # degree_Celsius is degC (udunits), so the values are the file's
    np.testing.assert_allclose(table["value"].to_numpy()[kept], sst.data[expected_kept])
    # a 0.3 K difference is 0.3 degC (SI Brochure: a temperature interval of 1 K equals 1 degC)
    np.testing.assert_allclose(table["error"].to_numpy()[kept], 0.3)


def test_guessed_profile_of_unclaimed_profiles_reads_them(tmp_path):
    path = unclaimed_profiles(tmp_path / "ctd.nc")
    with pytest.raises(NoReaderError):
        guess_kind(path)
    guessed, snippet = roles(path)
    assert guessed == {"sea_water_temperature": "TEMP", "sea_water_salinity": "PSAL",
                       "latitude": "LATITUDE", "longitude": "LONGITUDE", "time": "TIME",
                       "sea_water_pressure": "PRES"}
    profile = tomllib.loads(snippet)["sources"]["reader"]
    table = read(path, reader_profile=profile)
    assert table.attrs["kind"] == "profiles"
    with netCDF4.Dataset(path) as nc:
        temp, psal = nc["TEMP"][:], nc["PSAL"][:]
    by_quantity = table.groupby("quantity", observed=True)["value"]
    np.testing.assert_allclose(np.sort(by_quantity.get_group("sea_water_temperature")),
                               np.sort(temp.ravel()))
    # psu is practical salinity on the PSS-78 scale, canonical "1" (PSS-78: unitless)
    np.testing.assert_allclose(np.sort(by_quantity.get_group("sea_water_salinity")),
                               np.sort(psal.ravel()))


def test_roles_with_no_candidate_are_commented_out_and_the_snippet_still_parses(tmp_path):
    # no time and a quantity without units: the snippet says so and still parses
    path = write_nc(tmp_path / "bare.nc", {"n": 3}, {
        "lat": var(("n",), [1.0, 2.0, 3.0], units="degrees_north"),
        "lon": var(("n",), [1.0, 2.0, 3.0], units="degrees_east"),
        "sla": var(("n",), [0.1, 0.2, 0.3], long_name="sea level anomaly"),
    })
    guessed, snippet = roles(path)
    assert guessed["time"] is None and guessed["sea_level_anomaly"] == "sla"
    assert '# time = "?"  # CHECK: no candidate found' in snippet
    assert "no units in the file" in snippet
    assert '# "sla" = { units = "?" }' in snippet  # the attribute to fill in, commented out
    assert tomllib.loads(snippet)["sources"]["reader"]["variables"] == {
        "sea_level_anomaly": "sla", "latitude": "lat", "longitude": "lon"}


def test_names_that_only_mention_a_quantity_lose_to_names_that_are_it(tmp_path):
    # a deviation from a climatology in kelvin mentions SST in its long_name only; the
    # variable named after the quantity wins, whatever the order in the file
    path = write_nc(tmp_path / "two.nc", {"y": 2, "x": 2}, {
        "lat": var(("y", "x"), [[1.0, 1.0], [2.0, 2.0]], units="degrees_north"),
        "lon": var(("y", "x"), [[1.0, 2.0], [1.0, 2.0]], units="degrees_east"),
        "dt_analysis": var(("y", "x"), np.zeros((2, 2)), units="kelvin",
                           long_name="deviation from sst reference climatology"),
        "sea_surface_temperature": var(("y", "x"), np.full((2, 2), 290.0), units="kelvin",
                                       long_name="sea water temperature at 1 meter depth"),
    })
    guessed, _ = roles(path)
    assert guessed["sea_surface_temperature"] == "sea_surface_temperature"


@pytest.mark.parametrize("relative", [
    "sst/SS_VIIRS_NPP-NAVO-L2P-v3.0__l2ss-cut.nc",          # NAVO via PO.DAAC, GDS 2.0 L2P
    "seaice/seaice_conc_daily_nh_20211231_f17_v04r00.nc",   # NOAA/NSIDC sea-ice CDR
    "insitu/sp025-20141125T1730_glider_trajectoryProfile.nc",  # Scripps via US IOOS glider DAC
    "altimetry/JA1_GPN_2PeP001_002_20020115_060706_20020115_070316.nc",  # CNES/NASA Jason-1
])
def test_guessed_profile_of_a_real_file_parses_and_names_its_variables(relative):
    # whatever the readers make of these files, the snippet for their metadata is TOML and
    # names only variables the file has (netCDF4 lists them), each role once
    from realdata import real_file

    path = real_file(relative)
    ds = open_dataset(path, load=False)
    try:
        snippet = profile_snippet(ds, path)
    finally:
        ds.close()
    variables = tomllib.loads(snippet)["sources"]["reader"]["variables"]
    with netCDF4.Dataset(path) as nc:
        names = set(nc.variables)
    assert variables and set(variables.values()) <= names
    assert len(set(variables.values())) == len(variables)  # one role per variable


def test_a_projected_grid_gets_its_x_and_y_instead_of_latitude_and_longitude(tmp_path):
    from sample_files import ice_concentration_file

    # CF 1.8 section 5.6: positions of a projected grid from x, y and the grid_mapping
    guessed, snippet = roles(ice_concentration_file(tmp_path / "ice.nc"))
    assert guessed == {"sea_ice_concentration": "ice_conc", "projection_x_coordinate": "x",
                       "projection_y_coordinate": "y", "time": "time"}
    assert "latitude" not in snippet


def test_coordinates_on_the_dimensions_of_the_data_are_preferred(tmp_path):
    # an along-track record at 1 Hz with 20 Hz times and positions beside it: the 1 Hz ones
    # share the data's dimension (both carry CF standard names time/latitude/longitude)
    since = "seconds since 2000-01-01 00:00:00"
    path = write_nc(tmp_path / "track.nc", {"time": 3, "meas": 2}, {
        "time_20hz": var(("time", "meas"), np.arange(6.0).reshape(3, 2), standard_name="time",
                         units=since),
        "lat_20hz": var(("time", "meas"), np.zeros((3, 2)), standard_name="latitude",
                        units="degrees_north"),
        "lon_20hz": var(("time", "meas"), np.zeros((3, 2)), standard_name="longitude",
                        units="degrees_east"),
        "time": var(("time",), [0.0, 1.0, 2.0], standard_name="time", units=since),
        "lat": var(("time",), [1.0, 2.0, 3.0], standard_name="latitude", units="degrees_north"),
        "lon": var(("time",), [1.0, 2.0, 3.0], standard_name="longitude", units="degrees_east"),
        "ssha": var(("time",), [0.1, 0.0, -0.1], units="m", long_name="sea surface height anomaly"),
    })
    guessed, _ = roles(path)
    assert guessed == {"sea_level_anomaly": "ssha", "latitude": "lat", "longitude": "lon",
                       "time": "time"}


def test_a_depth_of_one_level_leaves_a_surface_file_surface(tmp_path):
    # an SST grid with a depth coordinate of one level (the measurement depth) is no profile
    path = write_nc(tmp_path / "sst1m.nc", {"depth": 1, "lat": 2, "lon": 2}, {
        "depth": var(("depth",), [1.0], standard_name="depth", units="m"),
        "lat": var(("lat",), [1.0, 2.0], units="degrees_north"),
        "lon": var(("lon",), [1.0, 2.0], units="degrees_east"),
        "temp": var(("depth", "lat", "lon"), np.full((1, 2, 2), 12.0), units="degC",
                    long_name="sea surface temperature"),
    })
    guessed, _ = roles(path)
    assert guessed["sea_surface_temperature"] == "temp"
    assert "sea_water_temperature" not in guessed
