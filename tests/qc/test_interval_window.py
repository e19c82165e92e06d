"""An interval observation (drift) is usable when it ends inside the window and started at most
``qc.interval_start_before_window_hours`` before it: a 48 h drift with a 24 h window."""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.model.table import make_table
from obsprep.qc.basic import basic_checks
from obsprep.settings.config import Window

WINDOW = Window(analysis_time=np.datetime64("2026-11-20T00", "ns"),
                start=np.datetime64("2026-11-19T00", "ns"),
                end=np.datetime64("2026-11-20T00", "ns"), slot_seconds=86400.0)
# (start, end) of each drift interval, and whether it is usable with a 24 h lead
INTERVALS = [
    ("2026-11-18T00", "2026-11-20T00", True),    # 48 h ending at the window end
    ("2026-11-17T23", "2026-11-19T23", False),   # starts 25 h before the window
    ("2026-11-18T00", "2026-11-19T00", False),   # ends at the window start: nothing inside
    ("2026-11-19T06", "2026-11-20T06", False),   # ends after the window
    ("2026-11-19T00", "2026-11-19T12", True),    # wholly inside
]


def _table():
    n = len(INTERVALS)
    return make_table(
        quantity=np.full(n, "sea_ice_drift_east"), value=np.full(n, 1000.0),
        lon=np.zeros(n), lat=np.full(n, -70.0),
        time=pd.to_datetime([s for s, _, _ in INTERVALS]).to_numpy(),
        time_end=pd.to_datetime([e for _, e, _ in INTERVALS]).to_numpy())


def _kept(table):
    return table["rejected"].isna().tolist()


def test_intervals_ending_inside_the_window_within_the_lead_are_kept():
    table = _table()
    counts = basic_checks(table, WINDOW, interval_lead_hours=24.0)
    assert _kept(table) == [usable for _, _, usable in INTERVALS]
    assert counts["outside_window"] == 3


def test_no_lead_keeps_only_intervals_wholly_inside():
    table = _table()
    basic_checks(table, WINDOW, interval_lead_hours=0.0)
    assert _kept(table) == [False, False, False, False, True]
