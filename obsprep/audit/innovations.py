"""Innovation statistics per sensor: observation minus model, against the assigned errors.

With the innovation d = y - H(x_mean) of a super-observation of assigned error sigma_o, and an
ensemble of N members whose variance of H(x) there is sigma_ens^2, a consistent system has
([Desroziers2005], Q. J. R. Meteorol. Soc. 131, 3385-3396, for d = y - H(x_b):
E[d d^T] = H B H^T + R)

.. math:: E[(d - \\bar d)^2] = F^2 \\sigma_o^2 + (1 + 1/N)\\, \\sigma_{ens}^2

where F is the factor by which the assigned error should be multiplied (1 when right) and
(1 + 1/N) sigma_ens^2 the error variance of the ensemble mean when the truth is statistically
one more member (the mean of N exchangeable draws misses a further draw by
sigma^2 + sigma^2 / N; [Murphy1988], from memory).  Per sensor and quantity, over n
super-observations:

- ``mean`` = mean(d) (bias), with its block standard error (:mod:`obsprep.audit.uncertainty`);
- ``ratio`` = var(d) / mean(sigma_o^2 + (1 + 1/N) sigma_ens^2) (1 when consistent);
- ``factor_sq``: the estimate of F^2 from (d - mean d)^2 n / (n - 1) - (1 + 1/N) sigma_ens^2
  against sigma_o^2, weighted toward the informative innovations (:func:`weighted_factor`),
  a ratio of sums whose standard error ``factor_sq_se`` allows for
  the correlation of neighbouring innovations (block standard error, never below that of
  independent Gaussian innovations, sqrt(2 sum E[d^2]^2) / sum sigma_o^2); it may be negative when
  the ensemble variance alone exceeds the innovation variance (then the assigned errors, or the
  ensemble spread, are too large);
- ``sensitivity`` = mean(sigma_o^2) / mean(sigma_o^2 + (1 + 1/N) sigma_ens^2): the share of the
  innovation variance the observation error accounts for.  Where it is small, F is poorly
  determined; this shows in its standard error (no threshold is applied).

With a single background (no ensemble) the background error is unknown: ``upper_sq`` =
sum (d - mean d)^2 n / (n - 1) / sum sigma_o^2 bounds F^2 from above (background error >= 0).

With an analysis as well, the residual d_a = y - H(x_a) gives E[d_a d] = R for an analysis made
with the true error statistics ([Desroziers2005]): ``desroziers_sq`` = sum d_a d / sum
sigma_o^2.  Made with other errors, one step is biased toward the assigned ones (their
iteration converges to the right R only as the analyses are redone with the updated errors), so
it is a diagnostic unless the analysis was made with updated errors (see
:mod:`obsprep.audit.verdict`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.audit.uncertainty import (
    NOT_ESTIMATED,
    Blocks,
    blocked_ratio,
    centred_squares,
    gaussian_floor,
    with_floor,
)


def ensemble_mean_error_factor(members: int) -> float:
    """1 + 1/N: the error variance of an N-member ensemble mean in units of the ensemble
    variance, when the truth is statistically one more member (module docstring); NaN for fewer
    than 2 members."""
    return 1.0 + 1.0 / members if members >= 2 else np.nan


#: fewest super-observations for the quadratic fit of :func:`smooth_background`
SMOOTH_BACKGROUND_MIN = 30


def smooth_background(background, blocks: Blocks) -> np.ndarray:
    """The background term b (units squared) as a smooth field over the grid, for weights:
    exp of the least-squares quadratic in the grid indices (1, u, v, uv, u^2, v^2; u, v the
    indices scaled to 0..1) fitted to log b, each value fitted without its own point (leave
    one out), so that it does not carry that point's sampling error.  The mean of b where there are fewer than
    :data:`SMOOTH_BACKGROUND_MIN` values, b is not positive, or the fit is degenerate."""
    b = np.asarray(background, dtype=np.float64)
    mean = np.full(b.shape, float(b.mean()))
    if b.size < SMOOTH_BACKGROUND_MIN or not np.all(b > 0):
        return mean
    u = (blocks.i - blocks.i.min()) / max(float(np.ptp(blocks.i)), 1.0)
    v = (blocks.j - blocks.j.min()) / max(float(np.ptp(blocks.j)), 1.0)
    design = np.column_stack([np.ones(b.size), u, v, u * v, u * u, v * v])
    coefficients, _, rank, _ = np.linalg.lstsq(design, np.log(b), rcond=None)
    if rank < design.shape[1]:
        return mean
    # leave-one-out fitted values (y_hat_i - h_ii y_i) / (1 - h_ii), h the hat matrix's
    # diagonal (textbook): even the small share h_ii of b_i's own noise, times the large
    # b / sigma_o^2 where the background dominates, biased F^2 by a few per cent
    q, _ = np.linalg.qr(design)
    leverage = np.sum(q * q, axis=1)
    log_b = np.log(b)
    fitted = design @ coefficients
    return np.exp((fitted - leverage * log_b) / (1.0 - leverage))


def weighted_factor(centred, sigma_o2, background, blocks: Blocks):
    """F^2 from the squared innovations with weights that favour the informative ones:

    .. math::
        F^2 = \\frac{\\sum_i w_i (d_i^2 - b_i)}{\\sum_i w_i \\sigma_{o,i}^2}, \\quad
        w_i = \\frac{\\sigma_{o,i}^2}{(\\sigma_{o,i}^2 + \\tilde b_i)^2}

    (b_i the background term): the estimating equation whose weights are the inverse variances
    2 E[d_i^2]^2 of Gaussian squared innovations times their sensitivity to F^2 (weighted least
    squares for a variance, textbook), at the errors under test (F = 1): efficient when they
    are right, unbiased whatever F is (weights from an estimate of F made from the same data
    would correlate with it: F^2 5 % high in the Monte Carlo test).  Where the background error
    dwarfs the observation error, those innovations carry noise and no information on F and weigh little.  In the weights b~_i is the smooth
    field of :func:`smooth_background`, not the ensemble's own variance at i: d_i is independent
    of the sample variance there (mean and variance of a Gaussian sample are independent), so
    weights that are large where the sample variance came out low by chance would make
    E[w (d^2 - b)] exceed E[w] F^2 sigma_o^2 (measured on the calibration benchmark: F^2 5-15 %
    too high).  Block standard error, never below the Gaussian one of independent innovations
    (:func:`obsprep.audit.uncertainty.with_floor`), and its variance model: a term's variance
    2 w_i^2 (F^2 sigma_o,i^2 + b_i)^2 at a true F^2
    (:meth:`obsprep.audit.uncertainty.BlockedEstimate.se_at`).
    """
    if centred.size < 2 or not np.sum(sigma_o2) > 0:
        return blocked_ratio(centred - background, sigma_o2, blocks)
    weights = sigma_o2 / (sigma_o2 + smooth_background(background, blocks)) ** 2
    factor = blocked_ratio(weights * (centred - background), weights * sigma_o2, blocks)
    expected = max(factor.value, 0.0) * sigma_o2 + background
    factor = with_floor(factor, gaussian_floor(weights * expected, weights * sigma_o2))
    # at a true F^2 = x a term varies as w^2 var(d^2) = 2 w^2 (x sigma_o^2 + b)^2 (Gaussian d)
    w2 = weights * weights
    return factor.with_variance_model(np.sum(w2 * sigma_o2 * sigma_o2),
                                      2.0 * np.sum(w2 * sigma_o2 * background),
                                      np.sum(w2 * background * background))


def innovation_statistics(d, sigma_o, blocks: Blocks, sigma_ens2=None, members: int = 0,
                          d_analysis=None) -> dict:
    """Statistics of innovations d with assigned errors sigma_o (see the module docstring).

    Parameters
    ----------
    d : array
        Innovations y - H(x_mean), units of the value.
    sigma_o : array
        Assigned observation errors (1-sigma), same units.
    blocks : :class:`obsprep.audit.uncertainty.Blocks` of the rows
    sigma_ens2 : array, optional
        Ensemble variance (ddof = 1) of H(x) at each observation (units squared); None for a
        single background.
    members : int
        Ensemble size N.
    d_analysis : array, optional
        Analysis residuals y - H(x_a).

    Returns
    -------
    dict: floats, and the :class:`~obsprep.audit.uncertainty.BlockedEstimate` of F^2
    (``factor_estimate``), of its upper bound (``upper_estimate``) and of the Desroziers estimate
    (``desroziers_estimate``).
    """
    d = np.asarray(d, dtype=np.float64)
    sigma_o2 = np.asarray(sigma_o, dtype=np.float64) ** 2
    n = d.size
    out = {"n": n, "mean": np.nan, "mean_se": np.nan, "std": np.nan, "mean_sigma_o2": np.nan,
           "mean_sigma_ens2": np.nan, "members": members, "ratio": np.nan, "factor_sq": np.nan,
           "factor_sq_se": np.nan, "factor_blocks": 0, "factor_block_cells": 0,
           "factor_levelled": False, "sensitivity": np.nan, "upper_sq": np.nan,
           "upper_sq_se": np.nan, "desroziers_sq": np.nan, "desroziers_sq_se": np.nan,
           "factor_estimate": NOT_ESTIMATED, "upper_estimate": NOT_ESTIMATED,
           "desroziers_estimate": NOT_ESTIMATED}
    if n < 3:
        return out
    centred = centred_squares(d)
    bias = blocked_ratio(d, np.ones(n), blocks)
    mean_o2 = float(sigma_o2.mean())
    upper = blocked_ratio(centred, sigma_o2, blocks)
    out.update(mean=float(d.mean()), mean_se=bias.se, std=float(np.sqrt(centred.mean())),
               mean_sigma_o2=mean_o2, upper_sq=upper.value, upper_sq_se=upper.se,
               upper_estimate=upper)
    if sigma_ens2 is not None and members >= 2:
        background = ensemble_mean_error_factor(members) * np.asarray(sigma_ens2, dtype=np.float64)
        expected = mean_o2 + float(background.mean())
        factor = weighted_factor(centred, sigma_o2, background, blocks)
        out.update(mean_sigma_ens2=float(np.mean(sigma_ens2)), ratio=float(centred.mean()) / expected,
                   sensitivity=mean_o2 / expected, factor_sq=factor.value, factor_sq_se=factor.se,
                   factor_blocks=factor.blocks, factor_block_cells=factor.block_cells,
                   factor_levelled=factor.levelled, factor_estimate=factor)
    if d_analysis is not None:
        desroziers = blocked_ratio(np.asarray(d_analysis, dtype=np.float64) * d, sigma_o2, blocks)
        out.update(desroziers_sq=desroziers.value, desroziers_sq_se=desroziers.se,
                   desroziers_estimate=desroziers)
    return out


def normalised_innovations(d, sigma_o, sigma_ens2=None) -> np.ndarray:
    """d / sqrt(sigma_o^2 + sigma_ens^2): standard normal when the errors are right."""
    total = np.asarray(sigma_o, dtype=np.float64) ** 2
    if sigma_ens2 is not None:
        total = total + np.asarray(sigma_ens2, dtype=np.float64)
    return np.asarray(d, dtype=np.float64) / np.sqrt(total)


def add_innovations(superobs: pd.DataFrame, equivalents: dict, analysis: dict | None = None,
                    with_spread: bool = True) -> pd.DataFrame:
    """Copy of ``superobs`` with columns ``model`` (ensemble mean of H(x)), ``model_variance``,
    ``innovation``, ``normalised_innovation``, ``time_gap`` (s) and, with an analysis,
    ``analysis_residual``; NaN where no model equivalent exists."""
    out = superobs.copy()
    n = len(out)
    for col in ("model", "model_variance", "innovation", "normalised_innovation", "time_gap",
                "analysis_residual"):
        out[col] = np.full(n, np.nan)
    for quantity, eq in equivalents.items():
        rows = np.flatnonzero((out["quantity"] == quantity).to_numpy())
        out.iloc[rows, out.columns.get_loc("model")] = eq.mean
        variance = eq.variance if with_spread else np.full(rows.size, np.nan)
        out.iloc[rows, out.columns.get_loc("model_variance")] = variance
        out.iloc[rows, out.columns.get_loc("time_gap")] = eq.time_gap
        if analysis and quantity in analysis:
            values = out["value"].to_numpy()[rows] - analysis[quantity].mean
            out.iloc[rows, out.columns.get_loc("analysis_residual")] = values
    out["innovation"] = out["value"] - out["model"]
    spread = out["model_variance"].fillna(0.0) if with_spread else 0.0
    out["normalised_innovation"] = out["innovation"] / np.sqrt(out["error"] ** 2 + spread)
    return out


INNOVATION_COLUMNS = ["sensor", "quantity", "n", "mean", "mean_se", "std", "mean_sigma_o2",
                      "mean_sigma_ens2", "members", "ratio", "factor_sq", "factor_sq_se",
                      "factor_blocks", "factor_block_cells", "factor_levelled", "sensitivity",
                      "upper_sq", "upper_sq_se", "desroziers_sq", "desroziers_sq_se",
                      "median_time_gap_h"]


def innovation_table(table: pd.DataFrame, members: int = 0) -> tuple[pd.DataFrame, dict]:
    """Innovation statistics per sensor and quantity with model equivalents (``table`` from
    :func:`add_innovations`; ``members`` the ensemble size, 0 or 1 for a single background).

    Returns the table (:data:`INNOVATION_COLUMNS`) and {(sensor, quantity): the statistics with
    their block estimates}."""
    rows, estimates = [], {}
    if "innovation" not in table:
        return pd.DataFrame(columns=INNOVATION_COLUMNS), estimates
    usable = table[np.isfinite(table["innovation"].to_numpy(dtype=float))]
    for (sensor, quantity), group in usable.groupby(["sensor", "quantity"], sort=True):
        residual = group["analysis_residual"].to_numpy(dtype=float) \
            if "analysis_residual" in group else np.full(len(group), np.nan)
        spread = group["model_variance"].to_numpy(dtype=float)
        with_spread = members >= 2 and np.isfinite(spread).all()
        stats = innovation_statistics(
            group["innovation"].to_numpy(dtype=float), group["error"].to_numpy(dtype=float),
            Blocks.from_table(group), spread if with_spread else None, members,
            residual if np.isfinite(residual).all() else None)
        gap = group["time_gap"].to_numpy(dtype=float) if "time_gap" in group else np.array([np.nan])
        stats["median_time_gap_h"] = float(np.nanmedian(gap)) / 3600.0 \
            if np.isfinite(gap).any() else np.nan
        estimates[(sensor, quantity)] = stats
        rows.append({"sensor": sensor, "quantity": quantity,
                     **{k: stats[k] for k in INNOVATION_COLUMNS[2:]}})
    return pd.DataFrame(rows, columns=INNOVATION_COLUMNS), estimates
