"""What to configure: the within-group error correlation and the representation error of a sensor,
estimated from how its innovation variance changes with the number of raw values.

For a super-observation made of n raw values of error sigma_o with a within-group correlation
rho, a representation error sigma_r and an ensemble-mean background error of variance
(1 + 1/N) sigma_ens^2 (:mod:`obsprep.audit.innovations`), the innovation variance is

.. math::
    E[(d - \\bar d)^2] = (1 + 1/N)\\,\\sigma_{ens}^2 + \\sigma_r^2
        + \\sigma_o^2 \\frac{1 + (n - 1)\\rho}{n}

(the variance of a mean of n equicorrelated errors, [Cochran1977] (from memory), plus the
independent terms).  Taking the assigned raw error sigma_o as right (the raw-noise check,
:mod:`obsprep.audit.noise`, tells whether it is), this is linear in the unknowns:

.. math::
    y = (d - \\bar d)^2 \\frac{m}{m-1} - (1 + 1/N)\\,\\sigma_{ens}^2 - \\frac{\\sigma_o^2}{n}
      = \\sigma_r^2 \\cdot 1 + \\rho \\cdot \\sigma_o^2 \\left(1 - \\frac{1}{n}\\right)

(m super-observations; with the sampling representation model the assigned sampling variance
of each super-observation, its own and not common, is subtracted from y as well and taken as
right), fitted by least squares with block standard errors
(:func:`obsprep.audit.uncertainty.blocked_least_squares`): first unweighted, then weighted by
1 / E[d^2]^2 from that fit, since a squared Gaussian innovation has variance 2 E[d^2]^2
(textbook), which differs by an order of magnitude between n = 1 and n = 40.  The two are told apart only when n
varies between super-observations; otherwise the fit is refused.  sigma_r^2 here is every
error independent of n (representation, and any error the model shares with no raw value).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.audit.innovations import ensemble_mean_error_factor
from obsprep.audit.uncertainty import Blocks, blocked_least_squares, centred_squares

#: fewest super-observations with more than one raw value the fit needs
MIN_MULTIPLE = 30


def estimate_correlation_and_representation(group: pd.DataFrame, members: int,
                                            representation_common: bool = True) -> dict:
    """Estimate rho and sigma_r of one sensor and quantity (see the module docstring).

    ``group``: its super-observations with innovations (columns innovation, model_variance,
    error_raw_rms, count, i, j, time, and error_representation); ``members``: the ensemble
    size N; ``representation_common``: False for the sampling representation model.

    Returns ``estimated_correlation`` and ``estimated_correlation_se`` (dimensionless),
    ``estimated_representation_error`` and its ``_se`` (units of the value; the square root of
    the fitted variance, 0 where the fit is negative) and ``estimate_note`` (why not, when the
    fit is refused)."""
    nan = float("nan")
    out = {"estimated_correlation": nan, "estimated_correlation_se": nan,
           "estimated_representation_error": nan, "estimated_representation_error_se": nan,
           "estimate_note": ""}
    if members < 2 or "innovation" not in group:
        out["estimate_note"] = "needs an ensemble"
        return out
    d = group["innovation"].to_numpy(dtype=float)
    spread = group["model_variance"].to_numpy(dtype=float)
    raw2 = group["error_raw_rms"].to_numpy(dtype=float) ** 2
    n = group["count"].to_numpy(dtype=float)
    sampling2 = np.zeros(len(group))
    if not representation_common and "error_representation" in group:
        sampling2 = np.nan_to_num(group["error_representation"].to_numpy(dtype=float), nan=0.0) ** 2
    use = np.isfinite(d) & np.isfinite(spread) & np.isfinite(raw2) & (n >= 1)
    m = int(use.sum())
    if m < MIN_MULTIPLE or int((n[use] > 1).sum()) < MIN_MULTIPLE:
        out["estimate_note"] = "too few super-observations of several raw values"
        return out
    d, spread, raw2, n, sampling2 = d[use], spread[use], raw2[use], n[use], sampling2[use]
    centred = centred_squares(d)
    response = centred - ensemble_mean_error_factor(members) * spread - raw2 / n - sampling2
    design = np.stack([np.ones(m), raw2 * (1.0 - 1.0 / n)], axis=1)
    if np.std(design[:, 1]) < 0.05 * np.mean(design[:, 1]):
        out["estimate_note"] = ("the number of raw values hardly varies between "
                                "super-observations: correlation and representation error "
                                "cannot be told apart")
        return out
    where = Blocks.from_table(group[use])
    beta, _, _ = blocked_least_squares(design, response, where)
    expected = (centred - response) + design @ beta       # E[d^2] from the first fit
    weights = 1.0 / np.maximum(expected, 0.1 * float(np.mean(centred))) ** 2
    beta, covariance, blocks = blocked_least_squares(design, response, where, weights)
    if not blocks.usable or not np.isfinite(covariance).all():
        out["estimate_note"] = "not enough independent blocks"
        return out
    representation_variance, rho = float(beta[0]), float(beta[1])
    representation = float(np.sqrt(max(representation_variance, 0.0)))
    variance_se = float(np.sqrt(covariance[0, 0]))
    # se of sqrt(v): se(v) / (2 sqrt(v)) by the delta method, or sqrt(se(v)) where v ~ 0
    representation_se = variance_se / (2.0 * representation) if representation > \
        np.sqrt(variance_se) else float(np.sqrt(variance_se))
    out.update(estimated_correlation=rho, estimated_correlation_se=float(np.sqrt(covariance[1, 1])),
               estimated_representation_error=representation,
               estimated_representation_error_se=representation_se)
    return out


def configuration_lines(summary: pd.DataFrame, source_sensors: dict) -> str:
    """TOML lines that would set the estimated correlations and representation errors.

    ``source_sensors``: output sensor -> the configured source sensors written under it.
    Only estimates that differ from 0 by more than two standard errors are suggested; the
    representation error is per quantity, so the inverse-variance mean over sensors is given."""
    lines = []
    representation = {}
    for _, row in summary.iterrows():  # one row per sensor and quantity
        rho, rho_se = row.get("estimated_correlation", np.nan), row.get("estimated_correlation_se", np.nan)
        if np.isfinite(rho) and np.isfinite(rho_se) and abs(rho) > 2.0 * rho_se:
            for source in source_sensors.get(row["sensor"], [row["sensor"]]):
                lines.append(f"# [[sources]] with sensor = \"{source}\" ({row['quantity']}): "
                             f"estimated {rho:.3g} ± {rho_se:.2g}")
                lines.append(f"correlation = {min(max(rho, 0.0), 0.99):.2f}")
        sigma = row.get("estimated_representation_error", np.nan)
        sigma_se = row.get("estimated_representation_error_se", np.nan)
        if np.isfinite(sigma) and np.isfinite(sigma_se) and sigma > 2.0 * sigma_se and sigma_se > 0:
            representation.setdefault(row["quantity"], []).append((sigma, sigma_se))
    if representation:
        lines.append("[superobs.representation_error]")
        for quantity, values in sorted(representation.items()):
            w = np.array([1.0 / s ** 2 for _, s in values])
            mean = float(np.sum(w * np.array([v for v, _ in values])) / w.sum())
            lines.append(f"{quantity} = {mean:.3g}  # from {len(values)} sensor(s)")
    return "\n".join(lines)
