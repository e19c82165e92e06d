"""Profiles in every CF discrete-sampling representation, on small files written from the
examples of CF 1.8 chapter 9 and appendix H (looked up in the CF conventions text):

- 9.3.1 orthogonal multidimensional: data(i, o), z(o) shared by every profile;
- 9.3.2 incomplete multidimensional: data(i, o), z(i, o), shorter profiles padded with missing
  values, which are unused storage (9.6);
- 9.3.3 contiguous ragged: a count variable with ``sample_dimension``; counts of zero or
  missing for profiles not yet written, storage past the counts unused;
- 9.3.4 indexed ragged: an index variable with ``instance_dimension``, missing for samples
  not yet written;
- H.6 trajectoryProfile, multidimensional (data(i, p, o), example H.20) and ragged (count per
  profile, index of each profile's trajectory, example H.22); H.5 timeSeriesProfile ragged
  (example H.19);
- several sample dimensions in one file (each data variable with its own count variable).

Potential temperature (CF standard name ``sea_water_potential_temperature``) is its own
quantity, never in-situ temperature.  Depth from pressure with TEOS-10 (``gsw.z_from_p``).
"""

from __future__ import annotations

import gsw
import numpy as np
import pytest
from sample_files import TIME_1950, var, write_nc

from obsprep.exceptions import InputFileError
from obsprep.model.table import validate_table
from obsprep.readers import guess_kind, read

NAN = np.nan
LAT = dict(standard_name="latitude", units="degrees_north")
LON = dict(standard_name="longitude", units="degrees_east")
DEPTH = dict(standard_name="depth", units="m", positive="down", axis="Z")
TEMP = dict(standard_name="sea_water_temperature", units="degree_Celsius")
PSAL = dict(standard_name="sea_water_practical_salinity", units="1")


def reasons(rows):
    return [None if isinstance(r, float) else r for r in rows["rejected"].astype(object)]


def quantity(table, name):
    return table[table["quantity"] == name].sort_values("row")


def test_orthogonal_multidimensional_every_element_a_level(tmp_path):
    # CF 9.3.1: the levels z(o) are those of every profile; a fill value is a missing
    # observation at a valid coordinate (9.6), so it is a row counted as missing_value
    path = write_nc(tmp_path / "orth.nc", {"profile": 2, "z": 3}, {
        "time": var(("profile",), [27000.0, 27001.0], **TIME_1950),
        "lat": var(("profile",), [10.0, 11.0], **LAT),
        "lon": var(("profile",), [-30.0, 190.0], **LON),
        "z": var(("z",), [5.0, 10.0, 20.0], **DEPTH),
        "temp": var(("profile", "z"), [[20.0, 19.0, NAN], [21.0, NAN, NAN]], fill=-999.0,
                    coordinates="time lat lon z", **TEMP),
    }, featureType="profile")
    assert guess_kind(path) == "profiles"
    table = read(path)
    validate_table(table)
    t = quantity(table, "sea_water_temperature")
    assert len(t) == 6
    np.testing.assert_allclose(t["depth"], [5, 10, 20, 5, 10, 20])
    np.testing.assert_allclose(t["lat"], [10, 10, 10, 11, 11, 11])
    np.testing.assert_allclose(t["lon"], [-30, -30, -30, -170, -170, -170])  # wrapped
    assert reasons(t) == [None, None, "missing_value", None, "missing_value", "missing_value"]
    assert list(t["group"].astype(str)) == ["0"] * 3 + ["1"] * 3  # no cf_role: profile number


def test_incomplete_multidimensional_padding_is_not_a_row(tmp_path):
    # CF 9.3.2 / 9.6: unused elements hold missing values in the data and in z(i, o)
    path = write_nc(tmp_path / "inc.nc", {"profile": 2, "obs": 3}, {
        "cast": var(("profile",), np.array(["A1", "B2"], dtype=object), dtype=str,
                    cf_role="profile_id"),
        "time": var(("profile",), [27000.0, 27001.0], **TIME_1950),
        "lat": var(("profile",), [10.0, 11.0], **LAT),
        "lon": var(("profile",), [-30.0, -31.0], **LON),
        "z": var(("profile", "obs"), [[5.0, 10.0, NAN], [2.0, NAN, 30.0]], fill=-999.0, **DEPTH),
        "temp": var(("profile", "obs"), [[20.0, NAN, NAN], [21.0, 22.0, NAN]], fill=-999.0,
                    coordinates="time lat lon z", **TEMP),
    }, featureType="profile")
    t = quantity(read(path), "sea_water_temperature")
    # (0, 2) is padding; (0, 1) a missing value at a valid depth; (1, 1) a value that
    # cannot be placed; (1, 2) a missing value at a valid depth
    assert list(t["row"]) == [0, 1, 3, 4, 5]
    assert reasons(t) == [None, "missing_value", None, "missing_value", "missing_value"]
    assert list(t["group"].astype(str)) == ["A1", "A1", "B2", "B2", "B2"]


def test_contiguous_ragged_reserved_storage_and_unwritten_profiles(tmp_path):
    # CF 9.3.3: count(i) profile i's samples, contiguous; a profile not yet written has a
    # count of zero or a missing value; samples past the counts are reserved storage
    path = write_nc(tmp_path / "cr.nc", {"profile": 3, "obs": 7}, {
        "row_size": var(("profile",), [2, -1, 3], dtype="i4", fill=-1, sample_dimension="obs"),
        "time": var(("profile",), [27000.0, NAN, 27002.0], fill=-1.0, **TIME_1950),
        "lat": var(("profile",), [10.0, NAN, 12.0], fill=-999.0, **LAT),
        "lon": var(("profile",), [-30.0, NAN, -32.0], fill=-999.0, **LON),
        "pres": var(("obs",), [10.0, 20.0, 5.0, 1000.0, 2000.0, NAN, NAN], fill=-999.0,
                    standard_name="sea_water_pressure", units="dbar"),
        "temp": var(("obs",), [15.0, 14.0, 16.0, 4.0, 2.0, NAN, NAN], fill=-999.0,
                    coordinates="time lat lon pres", **TEMP),
    }, featureType="profile")
    t = quantity(read(path), "sea_water_temperature")
    assert list(t["row"]) == [0, 1, 2, 3, 4]
    np.testing.assert_allclose(t["lat"], [10, 10, 12, 12, 12])
    # depth from sea pressure, TEOS-10 reference implementation
    np.testing.assert_allclose(t["depth"], -gsw.z_from_p([10, 20, 5, 1000, 2000],
                                                         [10, 10, 12, 12, 12]), atol=1e-9)
    assert list(t["group"].astype(str)) == ["0", "0", "2", "2", "2"]


def test_contiguous_ragged_counts_beyond_the_sample_dimension_name_the_variable(tmp_path):
    path = write_nc(tmp_path / "bad.nc", {"profile": 2, "obs": 3}, {
        "row_size": var(("profile",), [2, 2], dtype="i4", sample_dimension="obs"),
        "time": var(("profile",), [27000.0, 27001.0], **TIME_1950),
        "lat": var(("profile",), [10.0, 11.0], **LAT),
        "lon": var(("profile",), [-30.0, -31.0], **LON),
        "z": var(("obs",), [1.0, 2.0, 3.0], **DEPTH),
        "temp": var(("obs",), [1.0, 2.0, 3.0], coordinates="time lat lon z", **TEMP),
    }, featureType="profile")
    with pytest.raises(InputFileError, match="row_size"):
        read(path)


def test_indexed_ragged_missing_index_is_unwritten_storage(tmp_path):
    # CF 9.3.4: index(o) the zero-based profile of each sample, missing where not yet written
    path = write_nc(tmp_path / "ir.nc", {"profile": 2, "obs": 5}, {
        "parent": var(("obs",), [1, 0, -9, 1, 0], dtype="i4", fill=-9,
                      instance_dimension="profile"),
        "time": var(("profile",), [27000.0, 27001.0], **TIME_1950),
        "lat": var(("profile",), [10.0, 11.0], **LAT),
        "lon": var(("profile",), [-30.0, -31.0], **LON),
        "z": var(("obs",), [1.0, 2.0, NAN, 3.0, 4.0], fill=-999.0, **DEPTH),
        "temp": var(("obs",), [5.0, 6.0, NAN, 7.0, 8.0], fill=-999.0,
                    coordinates="time lat lon z", **TEMP),
    }, featureType="profile")
    t = quantity(read(path), "sea_water_temperature")
    assert list(t["row"]) == [0, 1, 3, 4]
    np.testing.assert_allclose(t["lat"], [11, 10, 11, 10])
    assert list(t["group"].astype(str)) == ["1", "0", "1", "0"]


def test_trajectory_profile_ragged_count_and_index(tmp_path):
    # CF H.6, example H.22: the levels of each profile contiguous (count with
    # sample_dimension), each profile's trajectory by index (instance_dimension)
    path = write_nc(tmp_path / "tp.nc", {"trajectory": 2, "profile": 3, "obs": 6}, {
        "trajectory": var(("trajectory",), np.array(["gl_a", "gl_b"], dtype=object), dtype=str,
                          cf_role="trajectory_id"),
        "profile": var(("profile",), [7, 8, 9], dtype="i4", cf_role="profile_id"),
        "trajectory_index": var(("profile",), [1, 0, 1], dtype="i4",
                                instance_dimension="trajectory"),
        "row_size": var(("profile",), [2, 1, 3], dtype="i4", sample_dimension="obs"),
        "time": var(("profile",), [27000.0, 27000.5, 27001.0], **TIME_1950),
        "lat": var(("profile",), [30.0, 31.0, 32.0], **LAT),
        "lon": var(("profile",), [-60.0, -61.0, -62.0], **LON),
        "z": var(("obs",), [1.0, 2.0, 3.0, 4.0, 5.0, 6.0], **DEPTH),
        "temp": var(("obs",), [10.0, 11.0, 12.0, 13.0, 14.0, 15.0],
                    coordinates="time lat lon z", **TEMP),
        "psal": var(("obs",), [35.0, 35.1, 35.2, 35.3, 35.4, 35.5],
                    coordinates="time lat lon z", **PSAL),
    }, featureType="trajectoryProfile")
    assert guess_kind(path) == "profiles"
    table = read(path)
    validate_table(table)
    t = quantity(table, "sea_water_temperature")
    assert list(t["group"].astype(str)) == ["gl_b_7", "gl_b_7", "gl_a_8",
                                            "gl_b_9", "gl_b_9", "gl_b_9"]
    assert list(t["platform"].astype(str)) == ["gl_b", "gl_b", "gl_a", "gl_b", "gl_b", "gl_b"]
    np.testing.assert_allclose(t["lat"], [30, 30, 31, 32, 32, 32])
    s = quantity(table, "sea_water_salinity")
    assert list(s["row"]) == list(t["row"])  # one level, one row number for both quantities


def test_trajectory_profile_multidimensional(tmp_path):
    # CF H.6, example H.20: data(i, p, o), position and time (i, p), z (i, p, o)
    temp = np.arange(12, dtype=float).reshape(2, 2, 3) + 1.0
    z = np.broadcast_to([[1.0, 2.0, 3.0]], (2, 2, 3)).copy()
    z[1, 1, 2] = NAN
    temp[1, 1, 2] = NAN  # padding of the last profile
    path = write_nc(tmp_path / "tpm.nc", {"trajectory": 2, "profile": 2, "z": 3}, {
        "trajectory": var(("trajectory",), [101, 102], dtype="i4", cf_role="trajectory_id"),
        "time": var(("trajectory", "profile"), [[27000.0, 27000.1], [27001.0, 27001.1]],
                    **TIME_1950),
        "lat": var(("trajectory", "profile"), [[1.0, 2.0], [3.0, 4.0]], **LAT),
        "lon": var(("trajectory", "profile"), [[5.0, 6.0], [7.0, 8.0]], **LON),
        "depth": var(("trajectory", "profile", "z"), z, fill=-999.0, **DEPTH),
        "temp": var(("trajectory", "profile", "z"), temp, fill=-999.0,
                    coordinates="time lat lon depth", **TEMP),
    }, featureType="trajectoryProfile")
    t = quantity(read(path), "sea_water_temperature")
    assert len(t) == 11
    np.testing.assert_allclose(t["lat"], [1] * 3 + [2] * 3 + [3] * 3 + [4] * 2)
    # no profile_id: the trajectory id and the profile number along (trajectory, profile)
    assert list(t["group"].astype(str)) == (["101_0"] * 3 + ["101_1"] * 3 + ["102_2"] * 3
                                            + ["102_3"] * 2)


def test_time_series_profile_ragged(tmp_path):
    # CF H.5, example H.19: profiles contiguous, each profile's station by index; the
    # position is the station's
    path = write_nc(tmp_path / "tsp.nc", {"station": 2, "profile": 3, "obs": 4}, {
        "station_name": var(("station",), np.array(["M1", "M2"], dtype=object), dtype=str,
                            cf_role="timeseries_id"),
        "lat": var(("station",), [50.0, 60.0], **LAT),
        "lon": var(("station",), [0.0, 10.0], **LON),
        "station_index": var(("profile",), [1, 1, 0], dtype="i4", instance_dimension="station"),
        "row_size": var(("profile",), [1, 1, 2], dtype="i4", sample_dimension="obs"),
        "time": var(("profile",), [27000.0, 27001.0, 27002.0], **TIME_1950),
        "z": var(("obs",), [10.0, 10.0, 5.0, 15.0], **DEPTH),
        "temp": var(("obs",), [8.0, 8.5, 9.0, 7.0], coordinates="time lat lon z", **TEMP),
    }, featureType="timeSeriesProfile")
    t = quantity(read(path), "sea_water_temperature")
    np.testing.assert_allclose(t["lat"], [60, 60, 50, 50])
    assert list(t["group"].astype(str)) == ["M2_0", "M2_1", "M1_2", "M1_2"]
    days = (t["time"] - np.datetime64("1950-01-01")) / np.timedelta64(1, "D")
    np.testing.assert_allclose(days, [27000, 27001, 27002, 27002])


def test_several_sample_dimensions_in_one_file(tmp_path):
    # temperature and salinity sampled on their own levels, each with its own count variable
    # (CF 9.3.3 names the sample dimension on the count variable, so a file can hold several)
    path = write_nc(tmp_path / "multi.nc", {"profile": 2, "obs_t": 3, "obs_s": 4}, {
        "profile": var(("profile",), [1, 2], dtype="i4", cf_role="profile_id"),
        "time": var(("profile",), [27000.0, 27001.0], **TIME_1950),
        "lat": var(("profile",), [10.0, 20.0], **LAT),
        "lon": var(("profile",), [0.0, 1.0], **LON),
        "n_t": var(("profile",), [1, 2], dtype="i4", sample_dimension="obs_t"),
        "n_s": var(("profile",), [3, 1], dtype="i4", sample_dimension="obs_s"),
        "z_t": var(("obs_t",), [5.0, 1.0, 2.0], **DEPTH),
        "z_s": var(("obs_s",), [10.0, 20.0, 30.0, 40.0], **DEPTH),
        "temp": var(("obs_t",), [10.0, 11.0, 12.0], coordinates="time lat lon z_t", **TEMP),
        "psal": var(("obs_s",), [35.0, 35.1, 35.2, 35.3], coordinates="time lat lon z_s",
                    **PSAL),
    }, featureType="profile")
    table = read(path)
    validate_table(table)
    t, s = quantity(table, "sea_water_temperature"), quantity(table, "sea_water_salinity")
    np.testing.assert_allclose(t["depth"], [5, 1, 2])
    np.testing.assert_allclose(t["lat"], [10, 20, 20])
    np.testing.assert_allclose(s["depth"], [10, 20, 30, 40])
    np.testing.assert_allclose(s["lat"], [10, 10, 10, 20])
    # rows of the second layout follow those of the first: no level shares a row number
    assert list(t["row"]) == [0, 1, 2] and list(s["row"]) == [3, 4, 5, 6]
    assert list(s["group"].astype(str)) == ["1", "1", "1", "2"]


def potential_temperature_file(path, with_in_situ):
    variables = {
        "time": var(("profile",), [27000.0], **TIME_1950),
        "lat": var(("profile",), [0.0], **LAT),
        "lon": var(("profile",), [-20.0], **LON),
        "pres": var(("profile", "z"), [[10.0, 4000.0]], standard_name="sea_water_pressure",
                    units="dbar"),
        "theta": var(("profile", "z"), [[25.0, 1.2]], coordinates="time lat lon pres",
                     standard_name="sea_water_potential_temperature", units="degree_Celsius"),
    }
    if with_in_situ:
        variables["temp"] = var(("profile", "z"), [[25.002, 1.5]],
                                coordinates="time lat lon pres", **TEMP)
    return write_nc(path, {"profile": 1, "z": 2}, variables, featureType="profile")


@pytest.mark.parametrize("with_in_situ", [False, True])
def test_potential_temperature_is_its_own_quantity(tmp_path, with_in_situ):
    # CF standard names: sea_water_potential_temperature is not sea_water_temperature (about
    # 0.3 K apart at 4000 dbar, TEOS-10 manual, from memory); the two are never one quantity
    table = read(potential_temperature_file(tmp_path / "theta.nc", with_in_situ))
    theta = quantity(table, "sea_water_potential_temperature")
    np.testing.assert_allclose(theta["value"], [25.0, 1.2])
    assert any("'theta' is potential temperature" in w for w in table.attrs["warnings"])
    in_situ = quantity(table, "sea_water_temperature")
    if with_in_situ:
        np.testing.assert_allclose(in_situ["value"], [25.002, 1.5])
    else:
        assert in_situ.empty


def test_second_variable_of_one_quantity_on_the_same_dimensions_is_named(tmp_path):
    path = write_nc(tmp_path / "two.nc", {"profile": 1, "z": 2}, {
        "time": var(("profile",), [27000.0], **TIME_1950),
        "lat": var(("profile",), [0.0], **LAT),
        "lon": var(("profile",), [-20.0], **LON),
        "z": var(("z",), [1.0, 2.0], **DEPTH),
        "temp1": var(("profile", "z"), [[10.0, 9.0]], coordinates="time lat lon z", **TEMP),
        "temp2": var(("profile", "z"), [[10.1, 9.1]], coordinates="time lat lon z", **TEMP),
    }, featureType="profile")
    table = read(path)
    np.testing.assert_allclose(quantity(table, "sea_water_temperature")["value"], [10.0, 9.0])
    assert any("'temp2' not read" in w for w in table.attrs["warnings"])


def test_a_layout_without_coordinates_does_not_refuse_the_others(tmp_path):
    # a temperature on a dimension no coordinate reaches (a sensor calibration series) cannot
    # be placed; the profile beside it is still read, the other variable named in a warning
    path = write_nc(tmp_path / "extra.nc", {"profile": 1, "z": 2, "cal": 3}, {
        "time": var(("profile",), [27000.0], **TIME_1950),
        "lat": var(("profile",), [0.0], **LAT),
        "lon": var(("profile",), [-20.0], **LON),
        "z": var(("z",), [1.0, 2.0], **DEPTH),
        "temp": var(("profile", "z"), [[10.0, 9.0]], coordinates="time lat lon z", **TEMP),
        "cal_temp": var(("cal",), [0.0, 10.0, 20.0], **TEMP),
    }, featureType="profile")
    table = read(path)
    assert len(table) == 2
    assert any("cal_temp not read" in w and "coordinate" in w for w in table.attrs["warnings"])
    alone = write_nc(tmp_path / "alone.nc", {"cal": 3}, {
        "cal_temp": var(("cal",), [0.0, 10.0, 20.0], **TEMP),
    }, featureType="profile")
    with pytest.raises(InputFileError, match="coordinate"):
        read(alone)
