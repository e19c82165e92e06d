"""Question (i) of the audit: is the raw pixel noise consistent with the spread inside cells?

Inside one super-observation the raw values scatter by the *uncorrelated* part of their errors
and by the true variability inside the cell.  For n_g values of assigned raw error sigma_g with a
within-group correlation rho, E[s_g^2] = sigma_g^2 (1 - rho) for equicorrelated errors
(textbook), so over the super-observations g of a sensor and quantity

.. math::
    r^2 = \\frac{\\sum_g \\nu_g\\, s_g^2}{(1 - \\rho) \\sum_g \\nu_g\\, \\sigma_g^2}

with nu_g the degrees of freedom of the spread: n_g - 1 at the surface, n_g - p_g below it where
the spread is taken about the fit in depth of p_g parameters (3 from four values on, 2 from
three, 1 from two: :func:`obsprep.superobs.layers.fit_in_depth`).  Its standard error is the
block standard error (:mod:`obsprep.audit.uncertainty`).

The check is one-sided: sub-cell variability only adds to the spread, so r clearly below 1 says
the raw noise is overstated, while r above 1 says the noise is understated *or* the truth varies
inside cells, which the spread cannot tell apart.  It says nothing about the errors correlated
between values (they do not spread), so it never decides whether the super-observation error is
right: that is question (ii), :mod:`obsprep.audit.verdict`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from obsprep.audit.uncertainty import Blocks, blocked_ratio
from obsprep.model.quantities import QUANTITIES

#: one-sided confidence of the check's statements
NOISE_CONFIDENCE = 0.95


def fit_parameters(count) -> np.ndarray:
    """Parameters of the depth fit of a layer with ``count`` values (module docstring)."""
    count = np.asarray(count, dtype=np.float64)
    return np.where(count >= 4, 3.0, np.where(count >= 3, 2.0, 1.0))


def raw_noise_check(group: pd.DataFrame, quantity: str, correlation: float = 0.0,
                    tolerance: float = 1.5) -> dict:
    """The raw-noise check of one sensor and quantity (see the module docstring).

    Returns ``noise_ratio`` r with ``noise_ratio_low``/``noise_ratio_high`` (one-sided bounds
    at :data:`NOISE_CONFIDENCE`), ``noise_dof`` (pooled degrees of freedom), ``noise_check``
    (``consistent``, ``overstated``, ``spread_exceeds_noise``, ``inconclusive`` or
    ``not_enough_values``) and
    ``noise_reason`` (one sentence)."""
    profile = not QUANTITIES[quantity].surface
    count = group["count"].to_numpy(dtype=float)
    spread = group["spread_detrended" if profile else "spread"].to_numpy(dtype=float)
    raw = group["error_raw_rms"].to_numpy(dtype=float)
    dof = count - (fit_parameters(count) if profile else 1.0)
    use = (dof >= 1) & np.isfinite(spread) & np.isfinite(raw) & (raw > 0)
    out = {"noise_ratio": np.nan, "noise_ratio_low": np.nan, "noise_ratio_high": np.nan,
           "noise_dof": float(dof[use].sum()), "noise_check": "not_enough_values",
           "noise_reason": "too few super-observations of two or more raw values"}
    if correlation >= 1.0 or use.sum() < 3:
        return out
    estimate = blocked_ratio(dof[use] * spread[use] ** 2,
                             (1.0 - correlation) * dof[use] * raw[use] ** 2,
                             Blocks.from_table(group[use]))
    if not estimate.usable:
        return out
    t = stats.t.ppf(NOISE_CONFIDENCE, estimate.dof)
    ratio_sq, se = estimate.value, estimate.se
    low, high = np.sqrt(max(ratio_sq - t * se, 0.0)), np.sqrt(ratio_sq + t * se)
    ratio = float(np.sqrt(ratio_sq))
    out.update(noise_ratio=ratio, noise_ratio_low=low, noise_ratio_high=high)
    described = (f"the spread inside cells is {ratio:.3g} times the assigned uncorrelated raw "
                 f"noise ({low:.3g} to {high:.3g}, {out['noise_dof']:.0f} degrees of freedom)")
    if high < 1.0 / tolerance:
        out.update(noise_check="overstated",
                   noise_reason=f"raw noise overstated: {described}")
    elif low > tolerance:
        out.update(noise_check="spread_exceeds_noise",
                   noise_reason=f"{described}: the raw noise is understated or the truth varies "
                                f"inside cells (the spread cannot tell which)")
    elif low >= 1.0 / tolerance and high <= tolerance:
        out.update(noise_check="consistent", noise_reason=described)
    else:
        out.update(noise_check="inconclusive", noise_reason=f"not enough evidence: {described}")
    return out
