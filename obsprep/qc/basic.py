"""Basic, product-independent checks: quantity selection, position, time, window, gross range.

The first test that fails names the rejection (the order below); the model-grid checks (outside,
land, bathymetry) are applied later by the grid stage.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..quantities import QUANTITIES
from ..table import reject


def basic_checks(table: pd.DataFrame, window, *, quantities=None, valid_range=None) -> dict:
    """Apply the basic checks in place; return {reason: newly rejected count}.

    Tests, in order:

    - ``missing_value``: value not finite (readers normally flag fill values already);
    - ``quantity_not_selected``: quantity not in ``quantities`` (when given);
    - ``bad_position``: lon/lat not finite or ``|lat| > 90``;
    - ``bad_time``: time is NaT, or an interval ends before it starts;
    - ``outside_window``: time outside [window.start, window.end); an interval observation must
      lie entirely inside [window.start, window.end];
    - ``out_of_range``: value outside the quantity's physically possible range
      (:attr:`obsprep.quantities.Quantity.valid_range`), narrowed by ``valid_range`` {quantity:
      [min, max]} (canonical units, inclusive).
    """
    counts = {}
    counts["missing_value"] = reject(table, ~np.isfinite(table["value"].to_numpy()), "missing_value")
    quantity = table["quantity"].astype(str).to_numpy()
    if quantities:
        counts["quantity_not_selected"] = reject(table, ~np.isin(quantity, list(quantities)),
                                                 "quantity_not_selected")
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
        inside_interval = (time >= window.start) & (time_end <= window.end)
    counts["outside_window"] = reject(table, ~np.where(interval, inside_interval, inside), "outside_window")
    value = table["value"].to_numpy()
    low = np.full(len(table), -np.inf)
    high = np.full(len(table), np.inf)
    for name, q in QUANTITIES.items():
        sel = quantity == name
        if not sel.any():
            continue
        lo, hi = q.valid_range
        if valid_range and name in valid_range:
            lo, hi = max(lo, valid_range[name][0]), min(hi, valid_range[name][1])
        low[sel], high[sel] = lo, hi
    with np.errstate(invalid="ignore"):
        counts["out_of_range"] = reject(table, (value < low) | (value > high), "out_of_range")
    return counts
