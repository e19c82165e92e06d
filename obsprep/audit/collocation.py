"""Collocation of super-observations of one quantity from different sensors.

Two super-observations are collocated when they share the quantity, time slot, grid cell
(j, i), layer k and, for interval observations (drift), the interval end.  For a pair of sensors
a and b with independent errors, the differences d = a - b have

.. math:: \\operatorname{var}(d) = \\sigma_a^2 + \\sigma_b^2

plus the variance of the true values' differences (positions and times inside the cell differ).
A representation error common to both sensors (the constant or field representation models:
what the model grid cannot resolve, the same for every sensor in the cell) cancels in d, so the
error differences can see is the *visible* part, sigma_vis^2 = sigma^2 - sigma_repr^2; with the
sampling model each sensor's representation error is its own sampling of the cell and stays.
``ratio = var(d) / mean(sigma_vis,a^2 + sigma_vis,b^2)`` near 1 means the two assigned errors
are consistent together; it cannot tell which of the two is wrong (three sensors can: see
:mod:`obsprep.audit.triple`; a partner judged by other evidence can: see
:mod:`obsprep.audit.verdict`).  Its standard error is the block standard error
(:mod:`obsprep.audit.uncertainty`).
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd

from obsprep.audit.uncertainty import Blocks, blocked_ratio, centred_squares, gaussian_floor, with_floor

MATCH_KEYS = ("slot", "j", "i", "k", "time_end")


def sensors_by_quantity(superobs: pd.DataFrame) -> dict:
    """Quantity -> sorted list of sensors with super-observations of it."""
    return {q: sorted(group["sensor"].unique()) for q, group in superobs.groupby("quantity")}


def matched(superobs: pd.DataFrame, quantity: str, sensors) -> pd.DataFrame:
    """Super-observations of ``sensors`` collocated on :data:`MATCH_KEYS` (inner join).

    Columns ``value_<sensor>``, ``error_<sensor>``, ``visible_<sensor>`` (the error
    differences can see, :func:`visible_error`) per sensor, and ``time`` of the first sensor.
    Where one sensor has several super-observations with the same key (several profiles in one
    cell and slot), the one of most raw values is kept.
    """
    sub = superobs[superobs["quantity"] == quantity].copy()
    if "visible_error" not in sub:
        sub["visible_error"] = sub["error"]
    sub["time_end"] = sub["time_end"].astype("datetime64[ns]").astype("int64")
    out = None
    for sensor in sensors:
        part = sub[sub["sensor"] == sensor].sort_values("count", ascending=False, kind="stable")
        part = part.drop_duplicates(list(MATCH_KEYS), keep="first")
        part = part.assign(visible=part["visible_error"])
        keep = list(MATCH_KEYS) + ["value", "error", "visible"] + (["time"] if out is None else [])
        part = part[keep].rename(columns={"value": f"value_{sensor}", "error": f"error_{sensor}",
                                          "visible": f"visible_{sensor}"})
        out = part if out is None else out.merge(part, on=list(MATCH_KEYS), how="inner")
    return out


def visible_error(error, representation, representation_common: bool) -> np.ndarray:
    """The part of the assigned error (1-sigma) that differences between sensors see:
    sqrt(error^2 - representation^2) when the representation error is common to all sensors,
    else the whole error (module docstring); NaN representation counts as 0."""
    error = np.asarray(error, dtype=np.float64)
    if not representation_common:
        return error
    representation = np.nan_to_num(np.asarray(representation, dtype=np.float64), nan=0.0)
    return np.sqrt(np.maximum(error * error - representation * representation, 0.0))


def pair_statistics(a, b, sigma_a, sigma_b, blocks: Blocks) -> dict:
    """Statistics of the differences of collocated values.

    Parameters
    ----------
    a, b : arrays of collocated values (same units)
    sigma_a, sigma_b : the errors the differences see (1-sigma, :func:`visible_error`)
    blocks : where each pair lies (:class:`obsprep.audit.uncertainty.Blocks`)

    Returns
    -------
    dict
        ``n``; ``mean_difference`` and its block standard error; ``var_difference``
        (ddof = 1); ``expected_var`` = mean(sigma_a^2 + sigma_b^2); ``ratio`` =
        var_difference / expected_var with its block standard error ``ratio_se``;
        ``estimate``, the :class:`~obsprep.audit.uncertainty.BlockedEstimate` of the ratio.
    """
    d = np.asarray(a, float) - np.asarray(b, float)
    n = d.size
    expected_terms = np.asarray(sigma_a, float) ** 2 + np.asarray(sigma_b, float) ** 2
    expected = float(np.mean(expected_terms)) if n else np.nan
    if n < 3:
        return {"n": n, "mean_difference": np.nan, "mean_difference_se": np.nan,
                "var_difference": np.nan, "expected_var": expected, "ratio": np.nan,
                "ratio_se": np.nan, "estimate": None}
    centred = centred_squares(d)
    ratio = blocked_ratio(centred, expected_terms, blocks)
    # Gaussian floor of its standard error, at the sample variance of every difference
    ratio = with_floor(ratio, gaussian_floor(np.full(n, centred.mean()), expected_terms))
    mean = blocked_ratio(d, np.ones(n), blocks)
    return {"n": n, "mean_difference": float(d.mean()), "mean_difference_se": mean.se,
            "var_difference": float(centred.mean()), "expected_var": expected,
            "ratio": ratio.value, "ratio_se": ratio.se, "estimate": ratio}


def collocation_table(superobs: pd.DataFrame, min_pairs: int = 2) -> pd.DataFrame:
    """One row per quantity and pair of sensors with at least ``min_pairs`` collocations."""
    rows = []
    for quantity, sensors in sensors_by_quantity(superobs).items():
        for a, b in combinations(sensors, 2):
            pairs = matched(superobs, quantity, [a, b])
            if len(pairs) < min_pairs:
                continue
            stats = pair_statistics(pairs[f"value_{a}"], pairs[f"value_{b}"],
                                    pairs[f"visible_{a}"], pairs[f"visible_{b}"],
                                    Blocks.from_table(pairs))
            stats.pop("estimate")
            rows.append({"quantity": quantity, "sensor_a": a, "sensor_b": b, **stats})
    columns = ["quantity", "sensor_a", "sensor_b", "n", "mean_difference", "mean_difference_se",
               "var_difference", "expected_var", "ratio", "ratio_se"]
    return pd.DataFrame(rows, columns=columns)
