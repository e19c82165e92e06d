"""Collocation of super-observations of one quantity from different sensors.

Two super-observations are collocated when they share the quantity, time slot, grid cell
(j, i), layer k and, for interval observations (drift), the interval end.  For a pair of sensors
a and b with independent errors, the differences d = a - b have

.. math:: \\operatorname{var}(d) = \\sigma_a^2 + \\sigma_b^2

plus the variance of the true values' differences (positions and times inside the cell differ),
so ``ratio = var(d) / mean(sigma_a^2 + sigma_b^2)`` near 1 means the two assigned errors are
consistent together; it cannot tell which of the two is wrong (three sensors can: see
:mod:`obsprep.audit.triple`).
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd

MATCH_KEYS = ("slot", "j", "i", "k", "time_end")


def sensors_by_quantity(superobs: pd.DataFrame) -> dict:
    """Quantity -> sorted list of sensors with super-observations of it."""
    return {q: sorted(group["sensor"].unique()) for q, group in superobs.groupby("quantity")}


def matched(superobs: pd.DataFrame, quantity: str, sensors) -> pd.DataFrame:
    """Super-observations of ``sensors`` collocated on :data:`MATCH_KEYS` (inner join).

    Columns ``value_<sensor>``, ``error_<sensor>`` per sensor.  Where one sensor has several
    super-observations with the same key (several profiles in one cell and slot), the one of
    most raw values is kept.
    """
    sub = superobs[superobs["quantity"] == quantity].copy()
    sub["time_end"] = sub["time_end"].astype("datetime64[ns]").astype("int64")
    out = None
    for sensor in sensors:
        part = sub[sub["sensor"] == sensor].sort_values("count", ascending=False, kind="stable")
        part = part.drop_duplicates(list(MATCH_KEYS), keep="first")
        part = part[list(MATCH_KEYS) + ["value", "error"]].rename(
            columns={"value": f"value_{sensor}", "error": f"error_{sensor}"})
        out = part if out is None else out.merge(part, on=list(MATCH_KEYS), how="inner")
    return out


def pair_statistics(a, b, sigma_a, sigma_b) -> dict:
    """Statistics of the differences of collocated values.

    Parameters
    ----------
    a, b : arrays of collocated values (same units)
    sigma_a, sigma_b : their assigned 1-sigma errors

    Returns
    -------
    dict
        ``n``; ``mean_difference`` and its standard error std/sqrt(n); ``var_difference``
        (ddof = 1); ``expected_var`` = mean(sigma_a^2 + sigma_b^2); ``ratio`` =
        var_difference / expected_var with standard error ratio sqrt(2 / (n - 1)) (sampling
        variance of a Gaussian sample variance, textbook).
    """
    d = np.asarray(a, float) - np.asarray(b, float)
    n = d.size
    expected = float(np.mean(np.asarray(sigma_a, float) ** 2 + np.asarray(sigma_b, float) ** 2)) \
        if n else np.nan
    if n < 2:
        return {"n": n, "mean_difference": np.nan, "mean_difference_se": np.nan,
                "var_difference": np.nan, "expected_var": expected, "ratio": np.nan,
                "ratio_se": np.nan}
    var = float(np.var(d, ddof=1))
    ratio = var / expected
    return {"n": n, "mean_difference": float(d.mean()),
            "mean_difference_se": float(np.sqrt(var / n)), "var_difference": var,
            "expected_var": expected, "ratio": ratio,
            "ratio_se": ratio * float(np.sqrt(2.0 / (n - 1)))}


def collocation_table(superobs: pd.DataFrame, min_pairs: int = 2) -> pd.DataFrame:
    """One row per quantity and pair of sensors with at least ``min_pairs`` collocations."""
    rows = []
    for quantity, sensors in sensors_by_quantity(superobs).items():
        for a, b in combinations(sensors, 2):
            pairs = matched(superobs, quantity, [a, b])
            if len(pairs) < min_pairs:
                continue
            stats = pair_statistics(pairs[f"value_{a}"], pairs[f"value_{b}"],
                                    pairs[f"error_{a}"], pairs[f"error_{b}"])
            rows.append({"quantity": quantity, "sensor_a": a, "sensor_b": b, **stats})
    columns = ["quantity", "sensor_a", "sensor_b", "n", "mean_difference", "mean_difference_se",
               "var_difference", "expected_var", "ratio", "ratio_se"]
    return pd.DataFrame(rows, columns=columns)
