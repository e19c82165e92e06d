"""Time slots for asynchronous assimilation.

The window [start, end) is cut into slots of equal length counted from the window start; the
last slot may be shorter.  Times are handled as float64 seconds relative to the analysis time,
which keeps microsecond resolution for windows of years (float64 has 15-16 significant digits)
and avoids the loss of precision of seconds since 1970 (about 1.7e9 s).
"""

from __future__ import annotations

import numpy as np

from obsprep.settings.stages import INTERVAL_PLACEMENTS


def seconds_since(times, reference: np.datetime64) -> np.ndarray:
    """Seconds (float64) from ``reference`` to ``times`` (datetime64); NaN for NaT."""
    times = np.asarray(times, dtype="datetime64[ns]")
    delta = (times - np.datetime64(reference, "ns")).astype(np.int64).astype(np.float64) / 1e9
    delta[np.isnat(times)] = np.nan
    return delta



def interval_placement(time, time_end, where: str) -> np.ndarray:
    """The time (datetime64[ns]) at which each observation is placed for its slot and offset:
    ``time`` where there is no interval (``time_end`` NaT), else the interval's start, middle
    or end (``where``, one of :data:`INTERVAL_PLACEMENTS`).  An asynchronous filter compares a
    displacement with the model at the end of its interval, hence the default "end"."""
    time = np.asarray(time, dtype="datetime64[ns]")
    time_end = np.asarray(time_end, dtype="datetime64[ns]")
    if where == "start":
        return time
    interval = ~np.isnat(time_end)
    if where == "end":
        placed = time_end
    elif where == "middle":
        placed = time + (time_end - time) // 2
    else:
        raise ValueError(f"interval placement must be one of {INTERVAL_PLACEMENTS}, got {where!r}")
    return np.where(interval, placed, time)


def slot_index(times, window, end_inclusive=None) -> np.ndarray:
    """Slot index (int64) of each time: floor((t - window.start) / slot length); -1 outside the window.

    Parameters
    ----------
    times : array of datetime64
    window : obsprep.settings.config.Window
    end_inclusive : boolean array, optional
        Rows whose time may equal ``window.end`` and then belong to the last slot: intervals
        placed at their end, which the window check accepts up to and including the window
        end.
    """
    t = seconds_since(times, window.start)
    span = (window.end - window.start) / np.timedelta64(1, "s")
    inside = (t >= 0) & (t < span)
    slot = np.full(t.shape, -1, dtype=np.int64)
    slot[inside] = np.floor(t[inside] / window.slot_seconds).astype(np.int64)
    if end_inclusive is not None:
        slot[np.asarray(end_inclusive, dtype=bool) & (t == span)] = window.n_slots - 1
    return slot


def slot_bounds(window) -> np.ndarray:
    """(n_slots, 2) datetime64[ns] start and end of each slot."""
    n = window.n_slots
    step = np.timedelta64(int(round(window.slot_seconds * 1e9)), "ns")
    starts = window.start + step * np.arange(n)
    ends = np.minimum(starts + step, window.end)
    return np.stack([starts, ends], axis=1)
