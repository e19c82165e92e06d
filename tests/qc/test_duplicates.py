"""Duplicate profiles across files: the cross-file pre-pass and the ledger of a build.

The rule (common practice for profiles arriving in real-time and adjusted form):
same platform, time and position within tolerances, in different files; keep the adjusted copy
(Argo DATA_MODE D over A over R, Argo user's manual, from memory), else the one with more
values, else the first file.  Distances are checked against pyproj.Geod (GeographicLib).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyproj
from sample_files import ARGO_EPOCH, write_argo

from obsprep.qc.duplicates import decide_duplicates, file_identities
from obsprep.run.build import build
from obsprep.settings.config import load_config

NAN = np.nan
DAY = np.datetime64("2026-11-19T12:00:00", "ns")


def juld(t):
    """Days since 1950-01-01 (Argo JULD) of a datetime64."""
    return (t - ARGO_EPOCH) / np.timedelta64(1, "D")


def argo(path, platforms, cycles, modes, times, lats, lons, n_levels=3):
    n = len(platforms)
    pres = np.tile(np.linspace(10.0, 100.0, n_levels), (n, 1))
    temp = np.full((n, n_levels), 1.0)
    psal = np.full((n, n_levels), 34.5)
    return write_argo(path, platform=platforms, cycle=cycles, mode=modes,
                      juld=[juld(t) for t in times], lat=lats, lon=lons, pres=pres,
                      temp=temp, psal=psal, adjusted={"PRES": pres, "TEMP": temp + 0.01,
                                                      "PSAL": psal + 0.01},
                      errors={"PRES": np.full_like(pres, 2.4), "TEMP": np.full_like(pres, 0.002),
                              "PSAL": np.full_like(pres, 0.01)})


def offset_position(lon, lat, azimuth, metres):
    lon2, lat2, _ = pyproj.Geod(ellps="WGS84").fwd(lon, lat, azimuth, metres)
    return float(lon2), float(lat2)


def config(tmp_path, **qc):
    qc = {"duplicates": True, **qc}
    return {
        "window": {"analysis_time": "2026-11-20T00:00:00", "start_hours": -24.0,
                   "end_hours": 0.0},
        "grid": {"type": "regular", "lon_min": -40.0, "lat_min": -70.0, "dlon": 1.0,
                 "dlat": 1.0, "nlon": 40, "nlat": 20, "layer_interfaces": [0.0, 50.0, 500.0]},
        "sources": [
            {"sensor": "argo_rt", "paths": [str(tmp_path / "rt_*.nc")], "kind": "argo",
             "error": {"rule": "constant", "value": 0.01}, "qc": qc},
            {"sensor": "argo_dm", "paths": [str(tmp_path / "dm_*.nc")], "kind": "argo",
             "error": {"rule": "file"}, "qc": qc},
        ],
        "output": {"directory": str(tmp_path / "out")},
    }


def test_build_keeps_the_delayed_mode_copy_and_counts_the_others(tmp_path):
    lon_a, lat_a = -30.0, -60.0
    near_lon, near_lat = offset_position(lon_a, lat_a, 45.0, 600.0)     # 600 m away
    far_lon, far_lat = offset_position(-20.0, -62.0, 0.0, 1500.0)       # 1.5 km away
    argo(tmp_path / "rt_1.nc", ["6901001", "6901002"], [10, 5], ["R", "R"],
         [DAY, DAY + np.timedelta64(3, "h")], [lat_a, -62.0], [lon_a, -20.0])
    argo(tmp_path / "rt_2.nc", ["6901001", "6901002"], [10, 5], ["R", "R"],
         [DAY + np.timedelta64(30, "s"), DAY + np.timedelta64(3, "h")],
         [near_lat, far_lat], [near_lon, far_lon])
    argo(tmp_path / "dm_1.nc", ["6901001", "6901003"], [10, 2], ["D", "D"],
         [DAY, DAY], [lat_a, -61.0], [lon_a, -25.0])
    result = build(config(tmp_path))
    ledger = result.ledger.to_frame().set_index(result.ledger.to_frame()["file"].str.rsplit(
        "/", n=1).str[-1])
    rows_per_profile = 2 * 3   # T and S on 3 levels
    # 6901001 cycle 10: the R copies in rt_1 and rt_2 (30 s, 600 m apart) lose to D in dm_1;
    # 6901002 in rt_1/rt_2 are 1.5 km apart: not copies at the 1 km tolerance
    assert ledger.loc["rt_1.nc", "rejected_duplicate"] == rows_per_profile
    assert ledger.loc["rt_2.nc", "rejected_duplicate"] == rows_per_profile
    assert ledger.loc["dm_1.nc", "rejected_duplicate"] == 0
    assert ledger.loc["dm_1.nc", "kept"] == 2 * rows_per_profile
    assert ledger.loc["rt_1.nc", "kept"] == rows_per_profile
    # a wider tolerance makes the 6901002 pair copies too: the first file's copy is kept
    result = build(config(tmp_path, duplicate_distance_km=2.0))
    ledger = result.ledger.to_frame()
    by_file = dict(zip(ledger["file"].str.rsplit("/", n=1).str[-1], ledger["rejected_duplicate"]))
    assert by_file == {"rt_1.nc": rows_per_profile, "rt_2.nc": 2 * rows_per_profile,
                       "dm_1.nc": 0}


def test_sources_without_the_check_are_left_alone(tmp_path):
    argo(tmp_path / "rt_1.nc", ["6901001"], [10], ["R"], [DAY], [-60.0], [-30.0])
    argo(tmp_path / "dm_1.nc", ["6901001"], [10], ["D"], [DAY], [-60.0], [-30.0])
    cfg = config(tmp_path)
    cfg["sources"][0]["qc"] = {"duplicates": False}
    result = build(cfg)
    assert (result.ledger.to_frame()["rejected_duplicate"] == 0).all()


def records(**columns):
    n = len(columns["platform"])
    base = dict(time=[DAY] * n, lon=[0.0] * n, lat=[0.0] * n, rank=[0] * n, n_valid=[5] * n,
                task=list(range(n)), group=[f"g{k}" for k in range(n)],
                time_tolerance_s=[60.0] * n, distance_tolerance_m=[1000.0] * n)
    base.update(columns)
    return pd.DataFrame(base)


def test_decision_rules_rank_then_values_then_file_order():
    lose = decide_duplicates(records(platform=["a", "a", "a"], rank=[0, 2, 1]))
    assert lose.tolist() == [True, False, True]
    lose = decide_duplicates(records(platform=["a", "a"], n_valid=[3, 7]))
    assert lose.tolist() == [True, False]
    lose = decide_duplicates(records(platform=["a", "a"]))
    assert lose.tolist() == [False, True]          # equal copies: the first file wins
    # the same platform in the same file is never its own duplicate
    assert not decide_duplicates(records(platform=["a", "a"], task=[4, 4])).any()
    # no platform, or other platforms: no copies
    assert not decide_duplicates(records(platform=["", ""])).any()
    assert not decide_duplicates(records(platform=["a", "b"])).any()


def test_tolerances_are_the_smaller_of_the_two_sources():
    t = [DAY, DAY + np.timedelta64(90, "s")]
    assert decide_duplicates(records(platform=["a", "a"], time=t,
                                     time_tolerance_s=[120.0, 120.0])).tolist() == [False, True]
    assert not decide_duplicates(records(platform=["a", "a"], time=t,
                                         time_tolerance_s=[120.0, 60.0])).any()
    lon2, lat2 = offset_position(0.0, 0.0, 90.0, 900.0)
    near = records(platform=["a", "a"], lon=[0.0, lon2], lat=[0.0, lat2])
    assert decide_duplicates(near).tolist() == [False, True]
    near["distance_tolerance_m"] = [1000.0, 800.0]
    assert not decide_duplicates(near).any()


def test_copies_are_grouped_transitively_and_the_order_of_records_does_not_matter():
    t = [DAY, DAY + np.timedelta64(50, "s"), DAY + np.timedelta64(100, "s")]
    frame = records(platform=["a"] * 3, time=t, rank=[0, 0, 1])
    # 1st and 3rd are 100 s apart, but both are copies of the 2nd: one group, the D copy wins
    assert decide_duplicates(frame).tolist() == [True, True, False]
    shuffled = frame.iloc[[2, 0, 1]].reset_index(drop=True)
    assert decide_duplicates(shuffled).tolist() == [False, True, True]


def test_argo_identities_read_only_the_profile_metadata(tmp_path):
    path = argo(tmp_path / "rt_1.nc", ["6901001", "6901002"], [10, 5], ["R", "D"],
                [DAY, DAY], [-60.0, -61.0], [330.0, -20.0])
    source = load_config(config(tmp_path)).sources[0]
    frame = file_identities(path, source)
    assert frame["group"].tolist() == ["6901001_010", "6901002_005"]
    assert frame["rank"].tolist() == [0, 2]
    np.testing.assert_allclose(frame["lon"], [-30.0, -20.0])
    np.testing.assert_array_equal(frame["time"].to_numpy(), np.array([DAY, DAY]))


def test_cf_profile_identities_come_from_the_full_read(tmp_path):
    from sample_files import multidimensional_profiles_file

    path = multidimensional_profiles_file(
        tmp_path / "ctd.nc", [[5.0, 10.0, NAN], [5.0, 10.0, 20.0]],
        [[1.0, NAN, NAN], [1.0, 1.1, 1.2]], [[34.0, 34.1, NAN], [34.0, 34.1, 34.2]])
    cfg = config(tmp_path)
    cfg["sources"][0].update(kind="profiles", paths=[str(path)])
    source = load_config(cfg).sources[0]
    frame = file_identities(path, source)
    assert frame["group"].tolist() == ["101", "202"]
    assert frame["platform"].tolist() == ["float_9", "float_9"]
    # valid values: profile 101 has T at level 0 and S at levels 0-1; 202 has 3 + 3
    assert frame["n_valid"].tolist() == [3, 6]
    assert frame["rank"].tolist() == [0, 0]
    np.testing.assert_allclose(frame["lat"], [30.0, -40.0])
