"""Basic, product-independent checks: quantity selection, position, time, window, gross range.

The first test that fails names the rejection (the order below); the model-grid checks (outside,
land, bathymetry) are applied later by the grid stage.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.model.quantities import QUANTITIES, SUSPICIOUS_OUT_OF_RANGE_SHARE
from obsprep.model.reasons import REASONS
from obsprep.model.table import reject, warn_of_large_shares
from obsprep.qc.check import QcCheck, QcSetting


def basic_checks(table: pd.DataFrame, window, *, quantities=None, valid_range=None,
                 range_check: bool = True, interval_lead_hours: float = 0.0) -> dict:
    """Apply the basic checks in place; return {reason: newly rejected count}.

    Tests, in order:

    - ``missing_value``: value not finite (readers normally flag fill values already);
    - ``quantity_not_selected``: quantity not in ``quantities`` (when given);
    - ``bad_position``: lon/lat not finite or ``|lat| > 90``;
    - ``bad_time``: time is NaT, or an interval ends before it starts;
    - ``outside_window``: time outside [window.start, window.end); an interval observation must
      end inside the window, in (window.start, window.end], and start at most
      ``interval_lead_hours`` before window.start (0: the whole interval inside the window;
      a 48 h drift is usable with a 24 h window, its end compared with the model inside it);
    - ``out_of_range``: value outside the quantity's physically possible range
      (:attr:`obsprep.model.quantities.Quantity.valid_range`), narrowed by ``valid_range`` {quantity:
      [min, max]} (canonical units, inclusive); skipped with ``range_check=False``
      (:func:`gross_range_check` does it alone).
    """
    counts = {}
    counts["missing_value"] = reject(table, ~np.isfinite(table["value"].to_numpy()), "missing_value")
    if quantities:
        # on the categories, not on millions of strings
        counts["quantity_not_selected"] = reject(
            table, ~table["quantity"].isin(list(quantities)).to_numpy(), "quantity_not_selected")
    lon, lat = table["lon"].to_numpy(), table["lat"].to_numpy()
    counts["bad_position"] = reject(table, ~(np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90)),
                                    "bad_position")
    time = table["time"].to_numpy()
    time_end = table["time_end"].to_numpy()
    interval = ~np.isnat(time_end)
    bad_time = np.isnat(time) | (interval & (time_end < time))
    counts["bad_time"] = reject(table, bad_time, "bad_time")
    with np.errstate(invalid="ignore"):
        inside = (time >= window.start) & (time < window.end)
        lead = np.timedelta64(int(round(interval_lead_hours * 3600e9)), "ns")
        inside_interval = ((time >= window.start - lead) & (time_end <= window.end)
                           & ((time_end > window.start) | (time >= window.start)))
    counts["outside_window"] = reject(table, ~np.where(interval, inside_interval, inside), "outside_window")
    if range_check:
        counts["out_of_range"] = gross_range_check(table, valid_range)
    return counts


def gross_range_check(table: pd.DataFrame, valid_range=None) -> int:
    """Reject as ``out_of_range`` the values outside their quantity's physical range narrowed
    by ``valid_range`` {quantity: [min, max]} (canonical units, inclusive); return the count.

    When more than :data:`~obsprep.model.quantities.SUSPICIOUS_OUT_OF_RANGE_SHARE` of a
    quantity's values still kept are
    outside its physical range (not the narrowed one), the table gets a warning
    (:func:`obsprep.model.table.add_warning`) that the file's units may be wrong: the values
    inside the range are kept all the same, and may be just as wrong.
    """
    value = table["value"].to_numpy()
    quantity = table["quantity"]
    if isinstance(quantity.dtype, pd.CategoricalDtype):
        codes, categories = quantity.cat.codes.to_numpy(), list(quantity.cat.categories)
    else:
        codes, categories = pd.factorize(quantity.astype(str).to_numpy())
    _warn_of_units(table, value, codes, categories)
    # limits per category, then looked up by code (no per-row string work)
    low_of = np.full(len(categories) + 1, -np.inf)
    high_of = np.full(len(categories) + 1, np.inf)
    for c, name in enumerate(categories):
        if str(name) not in QUANTITIES:
            continue
        lo, hi = QUANTITIES[str(name)].valid_range
        if valid_range and name in valid_range:
            lo, hi = max(lo, valid_range[name][0]), min(hi, valid_range[name][1])
        low_of[c], high_of[c] = lo, hi
    low, high = low_of[codes], high_of[codes]   # code -1 (missing) takes the last slot
    with np.errstate(invalid="ignore"):
        return reject(table, (value < low) | (value > high), "out_of_range")


def _warn_of_units(table: pd.DataFrame, value: np.ndarray, codes: np.ndarray, categories) -> None:
    """The warning of :func:`gross_range_check` for each quantity with a suspicious share of
    values outside its physical range (among its rows still kept)."""
    rows_of, outside = {}, np.zeros(len(value), dtype=bool)
    for c, name in enumerate(categories):
        known = QUANTITIES.get(str(name))
        if known is None:
            continue
        rows_of[str(name)] = rows = codes == c
        lo, hi = known.valid_range
        with np.errstate(invalid="ignore"):
            outside |= rows & ((value < lo) | (value > hi))

    def message(name):
        known = QUANTITIES[name]
        lo, hi = known.valid_range
        return (f"more than {SUSPICIOUS_OUT_OF_RANGE_SHARE:.0%} of the values of {name} are outside "
                f"its physical range [{lo:g}, {hi:g}] '{known.units}': the file's units or scale may "
                "be wrong")

    warn_of_large_shares(table, rows_of, outside, SUSPICIOUS_OUT_OF_RANGE_SHARE, message)


def _apply_basic(table: pd.DataFrame, context, settings) -> dict:
    return basic_checks(table, context.window, quantities=context.quantities,
                        valid_range=context.valid_range, range_check=False,
                        interval_lead_hours=settings.interval_start_before_window_hours)


def _apply_gross_range(table: pd.DataFrame, context, settings) -> dict:
    return {"out_of_range": gross_range_check(table, context.valid_range)}


_BASIC_REASONS = ("missing_value", "quantity_not_selected", "bad_position", "bad_time",
                  "outside_window")
#: missing value, quantity selection, position, time, window (reasons shared with the readers)
BASIC_CHECK = QcCheck(
    name="basic", reasons={code: REASONS[code] for code in _BASIC_REASONS}, apply=_apply_basic,
    settings=(QcSetting("interval_start_before_window_hours", "non_negative_number", 48.0,
                        "an interval observation (drift) ending inside the window may start up "
                        "to this long before the window start, h; 0: the whole interval "
                        "inside"),))
#: the physical range of the quantity, narrowed by the source's ``valid_range``
GROSS_RANGE_CHECK = QcCheck(name="gross_range", reasons={"out_of_range": REASONS["out_of_range"]},
                            apply=_apply_gross_range)
