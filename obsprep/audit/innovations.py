"""Innovation statistics per sensor: observation minus model, against the assigned errors.

With the innovation d = y - H(x_mean) of a super-observation of assigned error sigma_o and the
ensemble variance sigma_ens^2 of H(x) at it, a consistent system has ([Desroziers2005],
Q. J. R. Meteorol. Soc. 131, 3385-3396, for d = y - H(x_b): E[d d^T] = H B H^T + R)

.. math:: E[d^2] = \\sigma_o^2 + \\sigma_{ens}^2

if the ensemble variance represents the background error variance and the two errors are
independent.  Per sensor and quantity, over n super-observations:

- ``mean`` = mean(d) (bias), standard error std(d)/sqrt(n);
- ``ratio`` = var(d) / mean(sigma_o^2 + sigma_ens^2) (1 when consistent), with the Gaussian
  standard error ratio sqrt(2 / (n - 1));
- ``factor``: the scale alpha of the assigned observation errors that makes them consistent,
  var(d) = alpha^2 mean(sigma_o^2) + mean(sigma_ens^2), i.e.
  alpha = sqrt((var(d) - mean(sigma_ens^2)) / mean(sigma_o^2)) (NaN when the ensemble
  variance alone exceeds var(d)); standard error se(var d) / (2 alpha mean(sigma_o^2));
- ``sensitivity`` = mean(sigma_o^2) / mean(sigma_o^2 + sigma_ens^2): how much of the innovation
  variance the observation error accounts for.  Where it is small, alpha is poorly determined
  (its standard error grows as 1 / sensitivity) and any unmodelled model error lands in it.

With a single background (no ensemble) the background error is unknown: ``factor_upper`` =
sqrt(var(d) / mean(sigma_o^2)) is an upper bound of alpha (background error >= 0).

With an analysis as well, the residual d_a = y - H(x_a) gives the estimate
E[d_a d] = sigma_o^2 ([Desroziers2005], for an analysis using the true error
statistics): ``desroziers_factor`` = sqrt(mean(d_a d) / mean(sigma_o^2)).

The standard errors assume independent innovations; neighbouring super-observations share
background errors, so they are lower bounds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def innovation_statistics(d, sigma_o, sigma_ens2=None, d_analysis=None) -> dict:
    """Statistics of innovations d with assigned errors sigma_o (see the module docstring).

    Parameters
    ----------
    d : array
        Innovations y - H(x_mean), units of the value.
    sigma_o : array
        Assigned observation errors (1-sigma), same units.
    sigma_ens2 : array, optional
        Ensemble variance of H(x) at each observation (units squared); None for a single
        background.
    d_analysis : array, optional
        Analysis residuals y - H(x_a).

    Returns
    -------
    dict of floats
    """
    d = np.asarray(d, dtype=np.float64)
    sigma_o2 = np.asarray(sigma_o, dtype=np.float64) ** 2
    n = d.size
    out = {"n": n, "mean": np.nan, "mean_se": np.nan, "std": np.nan, "mean_sigma_o2": np.nan,
           "mean_sigma_ens2": np.nan, "ratio": np.nan, "ratio_se": np.nan, "factor": np.nan,
           "factor_se": np.nan, "sensitivity": np.nan, "factor_upper": np.nan,
           "desroziers_factor": np.nan}
    if n < 3:
        return out
    var = float(np.var(d, ddof=1))
    var_se = var * float(np.sqrt(2.0 / (n - 1)))
    mean_o2 = float(sigma_o2.mean())
    out.update(n=n, mean=float(d.mean()), mean_se=float(np.sqrt(var / n)), std=float(np.sqrt(var)),
               mean_sigma_o2=mean_o2, factor_upper=float(np.sqrt(var / mean_o2)))
    if sigma_ens2 is not None:
        mean_e2 = float(np.mean(sigma_ens2))
        expected = mean_o2 + mean_e2
        out.update(mean_sigma_ens2=mean_e2, ratio=var / expected,
                   ratio_se=var_se / expected, sensitivity=mean_o2 / expected)
        excess = var - mean_e2
        if excess > 0:
            factor = float(np.sqrt(excess / mean_o2))
            out.update(factor=factor, factor_se=var_se / (2.0 * factor * mean_o2))
    if d_analysis is not None:
        cross = float(np.mean(np.asarray(d_analysis, dtype=np.float64) * d))
        out["desroziers_factor"] = float(np.sqrt(cross / mean_o2)) if cross > 0 else np.nan
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


def innovation_table(table: pd.DataFrame, with_spread: bool = True) -> pd.DataFrame:
    """One row of :func:`innovation_statistics` per sensor and quantity with model
    equivalents (``table`` from :func:`add_innovations`)."""
    rows = []
    usable = table[np.isfinite(table["innovation"])]
    for (sensor, quantity), group in usable.groupby(["sensor", "quantity"], sort=True):
        residual = group["analysis_residual"].to_numpy()
        stats = innovation_statistics(
            group["innovation"].to_numpy(), group["error"].to_numpy(),
            group["model_variance"].to_numpy() if with_spread else None,
            residual if np.isfinite(residual).all() else None)
        stats["median_time_gap_h"] = float(np.nanmedian(group["time_gap"])) / 3600.0 \
            if np.isfinite(group["time_gap"]).any() else np.nan
        rows.append({"sensor": sensor, "quantity": quantity, **stats})
    columns = ["sensor", "quantity", "n", "mean", "mean_se", "std", "mean_sigma_o2",
               "mean_sigma_ens2", "ratio", "ratio_se", "factor", "factor_se", "sensitivity",
               "factor_upper", "desroziers_factor", "median_time_gap_h"]
    return pd.DataFrame(rows, columns=columns)
