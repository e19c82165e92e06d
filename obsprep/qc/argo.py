"""Argo real-time quality-control tests on profiles ([ArgoQC], Argo Quality Control Manual for CTD and
Trajectory Data; thresholds from memory, see docs/references.md).

They apply to the depth-resolved quantities (``sea_water_temperature``,
``sea_water_salinity``) of any profile source, Argo or not.  A profile is the rows of one
(``file_id``, ``group``) in ``row`` order (the level order of the file); each quantity is tested
on its own.  The spike and pressure tests look only at rows still kept, so a value the provider
already flagged does not make its neighbours fail.  Pressure is recovered from depth with
TEOS-10 (:func:`obsprep.geo.seawater.pressure_from_depth`), the inverse of what the readers did.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.geo.seawater import pressure_from_depth
from obsprep.model.quantities import QUANTITIES
from obsprep.model.table import kept, reject
from obsprep.qc.check import QcCheck, QcSetting, declare_reasons

#: global range test (test 6): quantity -> (min, max), canonical units (degC, PSU)
GLOBAL_RANGE = {"sea_water_temperature": (-2.5, 40.0), "sea_water_salinity": (2.0, 41.0)}
#: spike test (test 9): quantity -> (threshold above 500 dbar, threshold at/below 500 dbar)
SPIKE_THRESHOLD = {"sea_water_temperature": (6.0, 2.0), "sea_water_salinity": (0.9, 0.3)}
#: pressure (dbar) at which the spike thresholds change
SPIKE_PRESSURE_DBAR = 500.0


def profile_quantity_rows(table: pd.DataFrame) -> np.ndarray:
    """Boolean array: rows of a depth-resolved quantity (``Quantity.surface`` False)."""
    names = [n for n, q in QUANTITIES.items() if not q.surface]
    return table["quantity"].isin(names).to_numpy()  # on the categories: fast for big tables


def profile_order(table: pd.DataFrame, rows: np.ndarray):
    """Indices of ``rows`` sorted by (file, group, quantity, row) and a segment number per
    sorted index that changes at each new (file, group, quantity)."""
    idx = np.flatnonzero(rows)
    keys = [table[c].cat.codes.to_numpy()[idx] if isinstance(table[c].dtype, pd.CategoricalDtype)
            else table[c].to_numpy()[idx] for c in ("file_id", "group", "quantity")]
    order = np.lexsort((table["row"].to_numpy()[idx], keys[2], keys[1], keys[0]))
    idx = idx[order]
    keys = [k[order] for k in keys]
    new = np.ones(idx.size, dtype=bool)
    if idx.size:
        new[1:] = np.any([k[1:] != k[:-1] for k in keys], axis=0)
    return idx, np.cumsum(new) - 1


def _profile_levels(table: pd.DataFrame, column: str, rows):
    """``(values of column, idx, segment)`` for a per-level Argo test: the column as an
    array, and :func:`profile_order` of ``rows`` (default: kept rows of profile quantities
    where the column is finite)."""
    values = table[column].to_numpy()
    if rows is None:
        rows = kept(table) & profile_quantity_rows(table) & np.isfinite(values)
    idx, segment = profile_order(table, rows)
    return values, idx, segment


def global_range_test(table: pd.DataFrame) -> np.ndarray:
    """Rows failing the Argo global range test: temperature outside -2.5..40 degC, salinity
    outside 2..41 PSU (inclusive limits pass)."""
    value = table["value"].to_numpy()
    fail = np.zeros(len(table), dtype=bool)
    with np.errstate(invalid="ignore"):
        for name, (low, high) in GLOBAL_RANGE.items():
            sel = table["quantity"].isin([name]).to_numpy()
            fail[sel] = (value[sel] < low) | (value[sel] > high)
    return fail


def pressure_increasing_test(table: pd.DataFrame, rows=None) -> np.ndarray:
    """Rows failing the Argo pressure increasing test.

    In level order, a level fails when its pressure is not greater than the pressure of every
    earlier level of the profile (not smaller, for a profile whose last level is shallower than
    its first: stored from the bottom up): of a run of equal pressures all but the first fail, and a
    reversed part fails as a whole.  Depth is monotonic in pressure at a given latitude, so
    depth is compared.  ``rows`` (default: kept rows of profile quantities with a finite
    depth) selects the rows taking part.
    """
    depth, idx, segment = _profile_levels(table, "depth", rows)
    fail = np.zeros(len(table), dtype=bool)
    if idx.size < 2:
        return fail
    d = depth[idx]
    # a profile stored from the bottom up (an ascent in sampling order, as CF profiles of
    # gliders may be) is tested in its own direction: its last level shallower than its first
    starts = np.flatnonzero(np.concatenate([[True], segment[1:] != segment[:-1]]))
    ends = np.concatenate([starts[1:], [d.size]]) - 1
    d = np.where((d[ends] < d[starts])[segment], -d, d)
    span = float(np.max(d) - np.min(d)) + 1.0
    # segmented running maximum: an offset per profile larger than any depth range keeps the
    # maximum of one profile from leaking into the next
    shifted = d - np.min(d) + segment * span
    running_max = np.maximum.accumulate(shifted)
    previous_max = np.concatenate([[-np.inf], running_max[:-1]])
    same_profile = np.concatenate([[False], segment[1:] == segment[:-1]])
    fail[idx] = same_profile & (shifted <= previous_max)
    return fail


def spike_test(table: pd.DataFrame, rows=None) -> np.ndarray:
    """Rows failing the Argo spike test.

    .. math:: test = |V_2 - (V_3 + V_1)/2| - |(V_3 - V_1)/2|

    with V2 the tested value and V1, V3 the values of the levels above and below (the previous
    and next kept rows of the same profile and quantity); fails when ``test`` exceeds 6 degC
    (pressure < 500 dbar) or 2 degC (>= 500 dbar) for temperature, 0.9 / 0.3 PSU for
    salinity.  The first and last levels are not tested.
    """
    value, idx, segment = _profile_levels(table, "value", rows)
    fail = np.zeros(len(table), dtype=bool)
    if idx.size < 3:
        return fail
    v = value[idx]
    v1, v2, v3 = v[:-2], v[1:-1], v[2:]
    interior = (segment[1:-1] == segment[:-2]) & (segment[1:-1] == segment[2:])
    test = np.abs(v2 - 0.5 * (v3 + v1)) - np.abs(0.5 * (v3 - v1))
    middle = idx[1:-1]
    pressure = pressure_from_depth(table["depth"].to_numpy()[middle],
                                   table["lat"].to_numpy()[middle])
    quantity = table["quantity"].astype(str).to_numpy()[middle]
    threshold = np.full(middle.size, np.inf)
    for name, (shallow, deep) in SPIKE_THRESHOLD.items():
        sel = quantity == name
        threshold[sel] = np.where(pressure[sel] < SPIKE_PRESSURE_DBAR, shallow, deep)
    fail[middle] = interior & (test > threshold)
    return fail


#: the one switch of the three Argo checks
ARGO_TESTS = QcSetting("argo_tests", "boolean", True,
                       "Argo real-time tests (global range, pressure increasing, spike) on "
                       "profile quantities")


def _argo_enabled(settings) -> bool:
    return settings.argo_tests


def _apply_global_range(table: pd.DataFrame, context, settings) -> dict:
    profile = profile_quantity_rows(table)
    if not profile.any():
        return {}
    return {"argo_global_range": reject(table, profile & global_range_test(table),
                                        "argo_global_range")}


def _apply_pressure_increasing(table: pd.DataFrame, context, settings) -> dict:
    if not profile_quantity_rows(table).any():
        return {}
    return {"argo_pressure_not_increasing": reject(table, pressure_increasing_test(table),
                                                   "argo_pressure_not_increasing")}


def _apply_spike(table: pd.DataFrame, context, settings) -> dict:
    if not profile_quantity_rows(table).any():
        return {}
    return {"argo_spike": reject(table, spike_test(table), "argo_spike")}


GLOBAL_RANGE_CHECK = QcCheck(
    name="argo_global_range",
    reasons={"argo_global_range": "outside the Argo real-time global range "
                                  "(T -2.5..40 degC, S 2..41)"},
    apply=_apply_global_range, settings=(ARGO_TESTS,), enabled=_argo_enabled)
PRESSURE_INCREASING_CHECK = QcCheck(
    name="argo_pressure_increasing",
    reasons={"argo_pressure_not_increasing": "pressure not greater than at every shallower "
                                             "level (Argo real-time pressure increasing test)"},
    apply=_apply_pressure_increasing, enabled=_argo_enabled)
SPIKE_CHECK = QcCheck(
    name="argo_spike", reasons={"argo_spike": "fails the Argo real-time spike test"},
    apply=_apply_spike, enabled=_argo_enabled)
# registration order is the ledger's column order
declare_reasons(GLOBAL_RANGE_CHECK, SPIKE_CHECK, PRESSURE_INCREASING_CHECK)
