"""The table checks' reasons set in one update (model.table.reject_first, used by the basic
checks) against the computation it replaces: obsprep.model.table.reject called once per test,
in order (a row keeps the first reason that selects it, rows rejected before keep theirs), and
the basic checks' counts against numpy tests written out here."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from obsprep.model.table import make_table, reject, reject_first
from obsprep.qc.basic import basic_checks
from obsprep.settings.config import Window

REASONS_IN_ORDER = ("missing_value", "bad_position", "bad_time", "outside_window")


def random_table(n=5000, seed=7):
    """Invented rows: some already rejected, NaN values, bad positions and times."""
    rng = np.random.default_rng(seed)
    value = rng.normal(5.0, 3.0, n)
    value[rng.random(n) < 0.05] = np.nan
    lat = rng.uniform(-95.0, 95.0, n)
    lon = rng.uniform(-180.0, 180.0, n)
    lon[rng.random(n) < 0.02] = np.nan
    start = np.datetime64("2026-11-19T00:00:00", "ns")
    time = start + (rng.uniform(-6.0, 30.0, n) * 3600e9).astype("timedelta64[ns]")
    time[rng.random(n) < 0.03] = np.datetime64("NaT")
    table = make_table(quantity="sea_surface_temperature", value=value, lon=lon, lat=lat,
                       time=time, sensor="s")
    reject(table, rng.random(n) < 0.1, "quality_level")  # a reader's rejections, before
    return table, rng


def masks_of(table, rng):
    n = len(table)
    return [(rng.random(n) < share, reason) for share, reason in
            zip((0.1, 0.2, 0.05, 0.3), REASONS_IN_ORDER)]


def test_one_update_equals_one_reject_per_test_in_order():
    table, rng = random_table()
    masks = masks_of(table, rng)
    reference = table.copy()
    expected = {reason: reject(reference, mask, reason) for mask, reason in masks}
    got = reject_first(table, masks)
    assert got == expected
    assert list(table["rejected"].cat.categories) == list(reference["rejected"].cat.categories)
    pd.testing.assert_series_equal(table["rejected"], reference["rejected"])
    assert sum(expected.values()) > 0 and min(expected.values()) > 0  # every test rejects


def test_no_row_selected_leaves_the_table_as_it_was():
    table, _ = random_table(n=100)
    before = table["rejected"].copy()
    got = reject_first(table, [(np.zeros(100, dtype=bool), r) for r in REASONS_IN_ORDER])
    assert got == dict.fromkeys(REASONS_IN_ORDER, 0)
    pd.testing.assert_series_equal(table["rejected"], before)


def test_an_unknown_reason_is_refused():
    table, _ = random_table(n=10)
    with pytest.raises(KeyError, match="no_such_reason"):
        reject_first(table, [(np.ones(10, dtype=bool), "no_such_reason")])


def test_basic_checks_count_what_numpy_tests_written_out_find():
    table, _ = random_table()
    window = Window(analysis_time=np.datetime64("2026-11-20T00:00:00", "ns"),
                    start=np.datetime64("2026-11-19T00:00:00", "ns"),
                    end=np.datetime64("2026-11-20T00:00:00", "ns"), slot_seconds=21600.0)
    free = table["rejected"].isna().to_numpy()
    value, lon, lat = (table[c].to_numpy() for c in ("value", "lon", "lat"))
    time = table["time"].to_numpy()
    tests = [~np.isfinite(value), ~(np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90)),
             np.isnat(time), ~((time >= window.start) & (time < window.end))]
    expected, left = {}, free.copy()
    for mask, reason in zip(tests, REASONS_IN_ORDER):
        expected[reason] = int(np.count_nonzero(mask & left))
        left &= ~mask
    counts = basic_checks(table, window, range_check=False)
    assert counts == expected
    assert np.array_equal(table["rejected"].isna().to_numpy(), left)
