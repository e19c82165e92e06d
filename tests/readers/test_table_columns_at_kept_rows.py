"""The observation table computes the columns of kept rows only (cf.PerRow) and gives every
row its first reason in one pass per reason; both checked against the plain numpy computation
they replace: the whole column computed, then the kept rows selected, and the reason loop that
skips rows already rejected."""

from __future__ import annotations

import numpy as np
import pytest

from obsprep.model.quantities import get_quantity
from obsprep.model.reasons import REASONS
from obsprep.readers import cf
from obsprep.readers.cf.options import SourceOptions

SHAPE = (60, 45)


def swath(seed=3):
    """Invented swath pieces: SST-like values with fill, a reference time and per-pixel
    offsets (some NaN, some out of the datetime64 range), positions, and four reason masks."""
    rng = np.random.default_rng(seed)
    values = 2.0 + 8.0 * rng.random(SHAPE)
    values[rng.random(SHAPE) < 0.1] = np.nan
    reference = np.broadcast_to(np.datetime64("2026-11-19T06:00:00", "ns"), SHAPE)
    seconds = rng.uniform(-3000.0, 3000.0, SHAPE)
    seconds[rng.random(SHAPE) < 0.05] = np.nan
    seconds[0, :3] = 1e19  # out of the datetime64[ns] range: NaT
    lon = rng.uniform(-70.0, 10.0, SHAPE).astype(np.float32)
    lat = rng.uniform(55.0, 80.0, SHAPE).astype(np.float32)
    masks = [(rng.random(SHAPE) < share, reason) for share, reason in
             ((0.1, "l2p_flag_land"), (0.05, "l2p_flag_ice"), (0.3, "quality_level"),
              (0.02, "missing_bias"))]
    return values, reference, seconds, lon, lat, masks


def table_of(values, time, lon, lat, masks, leave_out):
    decoded = cf.DecodedVariable(get_quantity("sea_surface_skin_temperature"),
                                 "sea_surface_temperature", values, 0.1 + 0 * values)
    return cf.observation_table("synthetic.nc", SourceOptions(sensor="s"), decoded, lon=lon,
                                lat=lat, time=time, rejections=masks,
                                leave_out_rejected=leave_out)


@pytest.mark.parametrize("leave_out", [True, False])
def test_a_column_computed_at_kept_rows_equals_the_whole_column_selected(leave_out):
    values, reference, seconds, lon, lat, masks = swath()
    # reference: the time of every pixel computed first (numpy datetime64 arithmetic in
    # cf.add_seconds), the table made from the full arrays
    whole = table_of(values, cf.add_seconds(reference, seconds), lon, lat, masks, leave_out)
    deferred = table_of(values, cf.PerRow(cf.add_seconds, (reference, seconds)), lon, lat,
                        masks, leave_out)
    assert len(deferred) == len(whole) > 0
    for column in ("value", "error", "lon", "lat", "time", "row"):
        np.testing.assert_array_equal(deferred[column].to_numpy(), whole[column].to_numpy())
    assert deferred.attrs.get(cf.NOT_IN_TABLE) == whole.attrs.get(cf.NOT_IN_TABLE)
    assert np.isnat(whole["time"].to_numpy()).any()  # the NaT case is exercised


def test_each_row_gets_its_first_reason():
    values, reference, seconds, lon, lat, masks = swath(seed=11)
    table = table_of(values, reference, lon, lat, masks, leave_out=False)
    # reference: the loop over reasons in order, writing only rows not yet rejected
    reasons = list(REASONS)
    expected = np.full(values.size, -1, dtype=np.int64)
    ordered = [(~np.isfinite(values), "missing_value")] + masks
    for mask, reason in ordered:
        rows = mask.ravel() & (expected < 0)
        expected[rows] = reasons.index(reason)
    got = table["rejected"].cat.codes.to_numpy().astype(np.int64)
    np.testing.assert_array_equal(got, expected)
    # every reason occurs, and some rows carry two reasons (so the order matters)
    assert set(np.unique(expected[expected >= 0])) == {reasons.index(r) for _, r in ordered}
    assert (masks[0][0] & masks[2][0]).any()


def test_a_constant_column_at_kept_rows_is_that_constant():
    values, reference, seconds, lon, lat, masks = swath(seed=5)
    table = table_of(values, reference, lon, lat, masks, leave_out=True)
    assert (table["time"].to_numpy() == reference.flat[0]).all()
    assert len(table) == np.count_nonzero(
        np.isfinite(values) & ~np.logical_or.reduce([m for m, _ in masks]))
