"""Time slots and time offsets for asynchronous assimilation."""

import numpy as np

from obsprep.settings.config import Window
from obsprep.superobs.timeslots import seconds_since, slot_bounds, slot_index

ANALYSIS = np.datetime64("2026-11-20T00:00:00", "ns")
WINDOW = Window(ANALYSIS, ANALYSIS - np.timedelta64(72, "h"), ANALYSIS, 24 * 3600.0)


def test_slots_are_floor_of_elapsed_time_over_slot_length():
    t = ANALYSIS + np.array([-72 * 3600, -48 * 3600 - 1, -48 * 3600, -1, 0, -72 * 3600 - 1], dtype="timedelta64[s]")
    # hand computation: slot = floor((t - start) / 24 h); the window is [start, end)
    assert list(slot_index(t, WINDOW)) == [0, 0, 1, 2, -1, -1]
    assert WINDOW.n_slots == 3


def test_offsets_keep_sub_second_precision_for_epoch_scale_times():
    # numpy datetime64 integer arithmetic as the reference: 0.25 s after 1.7e9 s since 1970
    t = np.datetime64("2023-11-14T22:13:20.250", "ns")
    ref = np.datetime64("2023-11-14T22:13:20", "ns")
    assert seconds_since(np.array([t]), ref)[0] == 0.25
    assert np.isnan(seconds_since(np.array(["NaT"], dtype="datetime64[ns]"), ref)[0])


def test_slot_bounds_cover_the_window():
    b = slot_bounds(WINDOW)
    assert b.shape == (3, 2)
    assert b[0, 0] == WINDOW.start and b[-1, 1] == WINDOW.end
    assert (b[1:, 0] == b[:-1, 1]).all()


def test_days_overlapping_window():
    days = WINDOW.days()
    assert [d.strftime("%Y%m%d") for d in days] == ["20261117", "20261118", "20261119"]
