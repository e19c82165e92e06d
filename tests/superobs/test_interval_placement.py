"""Where an interval observation (drift) sits in time: slot and time_offset at the interval end
by default (an asynchronous filter compares a displacement with the model at the end of its
interval, common practice), start or middle by ``superobs.interval_time``."""

from __future__ import annotations

import numpy as np
import pytest
from sample_files import TIME_1950, var, write_nc

from obsprep.run.build import build
from obsprep.settings.config import Window
from obsprep.superobs.timeslots import interval_placement, slot_index

NAT = np.datetime64("NaT", "ns")
DAY = 86400.0


def test_placement_of_intervals_and_of_plain_times():
    start = np.array(["2026-11-18T00", "2026-11-19T06", "2026-11-19T12"], dtype="datetime64[ns]")
    end = np.array(["2026-11-20T00", "2026-11-19T18", NAT], dtype="datetime64[ns]")
    assert (interval_placement(start, end, "start") == start).all()
    np.testing.assert_array_equal(interval_placement(start, end, "end"),
                                  np.array([end[0], end[1], start[2]]))
    np.testing.assert_array_equal(
        interval_placement(start, end, "middle"),
        np.array(["2026-11-19T00", "2026-11-19T12", "2026-11-19T12"], dtype="datetime64[ns]"))
    with pytest.raises(ValueError, match="interval placement"):
        interval_placement(start, end, "late")


def test_an_interval_ending_at_the_window_end_is_in_the_last_slot():
    window = Window(analysis_time=np.datetime64("2026-11-20T00", "ns"),
                    start=np.datetime64("2026-11-19T00", "ns"),
                    end=np.datetime64("2026-11-20T00", "ns"), slot_seconds=6 * 3600.0)
    times = np.array(["2026-11-19T00", "2026-11-19T23", "2026-11-20T00"], dtype="datetime64[ns]")
    assert slot_index(times, window).tolist() == [0, 3, -1]
    assert slot_index(times, window, np.array([False, False, True])).tolist() == [0, 3, 3]


def _drift_file(path, start_days, end_days):
    """Two geographic drift vectors in one 1x1 degree cell, with per-vector intervals."""
    n = len(start_days)
    return write_nc(path, {"n": n, "nv": 2}, {
        "time": var(("n",), start_days, bounds="time_bnds", **TIME_1950),
        "time_bnds": var(("n", "nv"), np.stack([start_days, end_days], axis=1)),
        "lat": var(("n",), np.full(n, -70.2), standard_name="latitude", units="degrees_north"),
        "lon": var(("n",), np.full(n, 10.3), standard_name="longitude", units="degrees_east"),
        "de": var(("n",), np.full(n, 3.0), standard_name="eastward_sea_ice_displacement",
                  units="km"),
        "dn": var(("n",), np.full(n, -1.0), standard_name="northward_sea_ice_displacement",
                  units="km"),
    })


def _config(tmp_path, interval_time=None):
    # 27000 days since 1950-01-01 is 2023-12-04 (calendar arithmetic)
    path = _drift_file(tmp_path / "drift.nc", np.array([27000.0, 27000.0]),
                       np.array([27001.0, 27001.0]))
    superobs = {} if interval_time is None else {"interval_time": interval_time}
    return {
        "window": {"analysis_time": "2023-12-05T00:00:00", "start_hours": -24.0,
                   "end_hours": 24.0, "slot_hours": 6.0},
        "grid": {"type": "regular", "lon_min": 10.0, "lat_min": -71.0, "dlon": 1.0, "dlat": 1.0,
                 "nlon": 1, "nlat": 1},
        "sources": [{"sensor": "drift", "kind": "ice_drift", "paths": [path],
                     "error": {"rule": "constant", "value": 500.0}}],
        "superobs": superobs,
        "output": {"directory": str(tmp_path / "out")},
    }


@pytest.mark.parametrize("interval_time, offset_s, slot", [
    (None, 0.0, 4),            # default: the end, 2023-12-05T00, the analysis time
    ("end", 0.0, 4),
    ("middle", -0.5 * DAY, 2),
    ("start", -DAY, 0),
])
def test_build_places_the_interval_as_configured(tmp_path, interval_time, offset_s, slot):
    superobs = build(_config(tmp_path, interval_time)).superobs
    assert set(superobs["quantity"]) == {"sea_ice_drift_x", "sea_ice_drift_y"}
    assert (superobs["count"] == 2).all()
    np.testing.assert_allclose(superobs["time_offset"], offset_s, atol=1e-6)
    assert (superobs["slot"] == slot).all()
    # whatever the placement, time and time_end keep the interval
    assert (superobs["time"] == np.datetime64("2023-12-04T00:00:00", "ns")).all()
    assert (superobs["time_end"] == np.datetime64("2023-12-05T00:00:00", "ns")).all()


def test_a_48_hour_drift_is_used_with_a_24_hour_window_by_default(tmp_path):
    config = _config(tmp_path)
    # the interval 2023-12-04T00 .. 2023-12-06T00 (48 h) ends at the end of a 24 h window
    _drift_file(tmp_path / "drift.nc", np.array([27000.0, 27000.0]), np.array([27002.0, 27002.0]))
    config["window"] = {"analysis_time": "2023-12-06T00:00:00", "start_hours": -24.0,
                        "end_hours": 0.0, "slot_hours": 6.0}
    superobs = build(config).superobs
    assert (superobs["count"] == 2).all() and len(superobs) == 2
    assert (superobs["slot"] == 3).all()                # placed at its end: the last slot
    np.testing.assert_allclose(superobs["time_offset"], 0.0, atol=1e-6)
    # with no lead allowed the same drift is outside the window
    config["sources"][0]["qc"] = {"interval_start_before_window_hours": 0.0}
    config["output"] = {"directory": str(tmp_path / "out0")}
    result = build(config)
    assert len(result.superobs) == 0
    assert result.ledger.entries[0].rejected == {"outside_window": 4}
