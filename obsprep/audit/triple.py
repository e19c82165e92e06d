"""Triple collocation: each sensor's error from three collocated sensors of one quantity.

For three collocated estimates x_k = t + e_k of the same truth t with mutually independent
errors, independent of t, and a common calibration ([Stoffelen1998], J. Geophys. Res. 103(C4),
7755-7766):

.. math::
    \\sigma_1^2 = \\langle (x_1 - x_2)(x_1 - x_3) \\rangle, \\quad
    \\sigma_2^2 = \\langle (x_2 - x_1)(x_2 - x_3) \\rangle, \\quad
    \\sigma_3^2 = \\langle (x_3 - x_1)(x_3 - x_2) \\rangle

since (x_1 - x_2)(x_1 - x_3) = (e_1 - e_2)(e_1 - e_3), whose expectation is E[e_1^2].  Here the
average is the sample covariance of u = x_1 - x_2 and v = x_1 - x_3 (means removed, ddof = 1),
which also removes constant biases between the sensors.

Sampling uncertainty: the sample covariance c of n independent pairs (u, v) has the asymptotic
variance (mu_22 - c^2) / n with mu_22 = E[(u - u_mean)^2 (v - v_mean)^2] (the delta method for
a sample covariance; for Gaussian (u, v) this is (var u var v + c^2) / n, textbook moments).
The standard error of sigma = sqrt(c) follows as se(c) / (2 sigma).

Against the assigned errors.  A representation error common to the three sensors cancels in the
differences (:func:`obsprep.audit.collocation.visible_error`), so the triple-collocation variance
is compared with the visible part of the assigned error: F^2 = sum (u - u_mean)(v - v_mean)
n / (n - 1) / sum sigma_vis^2, the factor by which the assigned error should be multiplied, with
the block standard error of this ratio (:mod:`obsprep.audit.uncertainty`), which allows for
neighbouring triplets sharing errors, never below the Gaussian one of independent triplets,
sqrt(n (var u var v + c^2)) / sum sigma_vis^2.  Errors correlated *between* the sensors (one product
derived from another) make the variance too small; the audit cannot see that and the report
says so.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd

from obsprep.audit.collocation import matched, sensors_by_quantity
from obsprep.audit.uncertainty import Blocks, blocked_ratio, with_floor


def covariance_with_standard_error(u, v) -> tuple[float, float]:
    """Sample covariance (ddof = 1) of u and v and its asymptotic standard error
    sqrt((mean(u'^2 v'^2) - c^2) / n), u', v' the centred values."""
    u = np.asarray(u, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    n = u.size
    if n < 3:
        return np.nan, np.nan
    du, dv = u - u.mean(), v - v.mean()
    c = float(np.sum(du * dv) / (n - 1))
    fourth = float(np.mean(du * du * dv * dv))
    return c, float(np.sqrt(max(fourth - c * c, 0.0) / n))


def triple_collocation(x1, x2, x3) -> dict:
    """Error variances of three collocated series ([Stoffelen1998], with standard errors.

    Parameters
    ----------
    x1, x2, x3 : arrays of the same length, same units

    Returns
    -------
    dict
        ``n``, ``variance`` (3 values, units squared; may be negative from sampling when an
        error is small), ``variance_se``, ``sigma`` (sqrt of the variance, NaN where it is not
        positive) and ``sigma_se`` = variance_se / (2 sigma).
    """
    x = [np.asarray(a, dtype=np.float64) for a in (x1, x2, x3)]
    variance, variance_se = [], []
    for k in range(3):  # the three cyclic estimates
        own, first, second = x[k], x[(k + 1) % 3], x[(k + 2) % 3]
        c, se = covariance_with_standard_error(own - first, own - second)
        variance.append(c)
        variance_se.append(se)
    variance = np.array(variance)
    variance_se = np.array(variance_se)
    with np.errstate(invalid="ignore", divide="ignore"):
        sigma = np.where(variance > 0, np.sqrt(np.abs(variance)), np.nan)
        sigma_se = variance_se / (2.0 * sigma)
    return {"n": int(x[0].size), "variance": variance, "variance_se": variance_se,
            "sigma": sigma, "sigma_se": sigma_se}


def _with_triplet_variance_model(factor, u, v, own2, partner2):
    """``factor`` with its variance model (:meth:`obsprep.audit.uncertainty.BlockedEstimate.se_at`):
    for Gaussian (u, v) a triplet's term varies as var u var v + cov(u, v)^2, with at a true
    F^2 = x: cov = x s, var u = x s + p_1, var v = x s + p_2 (s the sensor's visible error
    variance, p_k the partner's share of the difference variance, each partner's visible
    variance scaled to what the data show, mean(u'^2) - F^2 mean(s), kept >= 0), so
    2 s^2 x^2 + s (p_1 + p_2) x + p_1 p_2."""
    shares = []
    for difference, partner in zip((u, v), partner2):
        excess = float(np.mean((difference - difference.mean()) ** 2)
                       - max(factor.value, 0.0) * np.mean(own2))
        shares.append(partner * max(excess, 0.0) / float(np.mean(partner)))
    p1, p2 = shares
    return factor.with_variance_model(2.0 * np.sum(own2 * own2), np.sum(own2 * (p1 + p2)),
                                      np.sum(p1 * p2))


TRIPLE_COLUMNS = ["quantity", "sensor", "with", "n", "variance", "variance_se", "sigma",
                  "sigma_se", "assigned", "assigned_visible", "factor_sq", "factor_sq_se",
                  "factor_blocks", "factor_levelled", "ratio", "ratio_se"]


def triple_collocation_table(superobs: pd.DataFrame, min_triplets: int = 10) -> tuple[pd.DataFrame, dict]:
    """Per quantity with three or more sensors, one row per sensor of every triple of sensors
    with at least ``min_triplets`` collocations: the triple-collocation error, the assigned
    error over the triplets (root mean square; ``assigned_visible`` its part differences see),
    the estimate of F^2 with its block standard error, and the ratio sigma / assigned_visible.

    Returns the table (:data:`TRIPLE_COLUMNS`) and {(sensor, quantity): [(partners, block
    estimate of F^2), ...]}."""
    rows, estimates = [], {}
    for quantity, sensors in sensors_by_quantity(superobs).items():
        for triple in combinations(sensors, 3):
            table = matched(superobs, quantity, list(triple))
            if len(table) < min_triplets:
                continue
            result = triple_collocation(*(table[f"value_{s}"] for s in triple))
            blocks = Blocks.from_table(table)
            n = len(table)
            for k, sensor in enumerate(triple):
                others = [s for s in triple if s != sensor]
                own = table[f"value_{sensor}"].to_numpy(float)
                u = own - table[f"value_{others[0]}"].to_numpy(float)
                v = own - table[f"value_{others[1]}"].to_numpy(float)
                visible2 = table[f"visible_{sensor}"].to_numpy(float) ** 2
                factor = blocked_ratio((u - u.mean()) * (v - v.mean()) * (n / (n - 1.0)), visible2,
                                       blocks)
                # Gaussian floor: var((u - u_mean)(v - v_mean)) = var u var v + cov^2 per triplet
                floor = np.sqrt(n * (u.var() * v.var() + factor.value ** 2 * np.mean(visible2) ** 2))
                factor = with_floor(factor, float(floor / visible2.sum()))
                factor = _with_triplet_variance_model(factor, u, v, visible2, [
                    table[f"visible_{s}"].to_numpy(float) ** 2 for s in others])
                assigned = float(np.sqrt(np.mean(table[f"error_{sensor}"] ** 2)))
                assigned_visible = float(np.sqrt(np.mean(visible2)))
                with_ = " ".join(others)
                estimates.setdefault((sensor, quantity), []).append((with_, factor))
                rows.append({
                    "quantity": quantity, "sensor": sensor, "with": with_,
                    "n": result["n"], "variance": result["variance"][k],
                    "variance_se": result["variance_se"][k], "sigma": result["sigma"][k],
                    "sigma_se": result["sigma_se"][k], "assigned": assigned,
                    "assigned_visible": assigned_visible, "factor_sq": factor.value,
                    "factor_sq_se": factor.se, "factor_blocks": factor.blocks,
                    "factor_levelled": factor.levelled,
                    "ratio": result["sigma"][k] / assigned_visible,
                    "ratio_se": result["sigma_se"][k] / assigned_visible,
                })
    return pd.DataFrame(rows, columns=TRIPLE_COLUMNS), estimates
