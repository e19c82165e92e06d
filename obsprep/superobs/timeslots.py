"""Time slots for asynchronous assimilation.

The window [start, end) is cut into slots of equal length counted from the window start; the
last slot may be shorter.  Times are handled as float64 seconds relative to the analysis time,
which keeps microsecond resolution for windows of years (float64 has 15-16 significant digits)
and avoids the loss of precision of seconds since 1970 (about 1.7e9 s).
"""

from __future__ import annotations

import numpy as np


def seconds_since(times, reference: np.datetime64) -> np.ndarray:
    """Seconds (float64) from ``reference`` to ``times`` (datetime64); NaN for NaT."""
    times = np.asarray(times, dtype="datetime64[ns]")
    delta = (times - np.datetime64(reference, "ns")).astype(np.int64).astype(np.float64) / 1e9
    delta[np.isnat(times)] = np.nan
    return delta


def slot_index(times, window) -> np.ndarray:
    """Slot index (int64) of each time: floor((t - window.start) / slot length); -1 outside the window.

    Parameters
    ----------
    times : array of datetime64
    window : obsprep.settings.config.Window
    """
    t = seconds_since(times, window.start)
    span = (window.end - window.start) / np.timedelta64(1, "s")
    inside = (t >= 0) & (t < span)
    slot = np.full(t.shape, -1, dtype=np.int64)
    slot[inside] = np.floor(t[inside] / window.slot_seconds).astype(np.int64)
    return slot


def slot_bounds(window) -> np.ndarray:
    """(n_slots, 2) datetime64[ns] start and end of each slot."""
    n = window.n_slots
    step = np.timedelta64(int(round(window.slot_seconds * 1e9)), "ns")
    starts = window.start + step * np.arange(n)
    ends = np.minimum(starts + step, window.end)
    return np.stack([starts, ends], axis=1)
