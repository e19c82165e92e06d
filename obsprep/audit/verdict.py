"""Question (ii) of the audit: is the super-observation error right?  The verdict per sensor.

One convention everywhere: F is the factor by which the assigned super-observation error should
be multiplied (F > 1: the assigned errors are too small; F < 1: too large).  The evidence is a
set of estimates of F^2, each a ratio of sums with a block standard error that allows for
correlated neighbours (:mod:`obsprep.audit.uncertainty`):

- innovations against an ensemble (:mod:`obsprep.audit.innovations`);
- triple collocation, against the part of the error differences see
  (:mod:`obsprep.audit.triple`);
- pair collocation with a partner whose own F is known from its innovations
  (:func:`pair_estimate`);
- the analysis-residual estimate, only when the analyses were made with the errors being
  tested (the fixed point of its iteration, [Desroziers2005]); otherwise it is biased toward the
  assigned errors and is listed as a diagnostic, never deciding.

Combination: the generalised least-squares mean of the K estimates e_k, F^2 = 1^T V^-1 e /
1^T V^-1 1 with standard error (1^T V^-1 1)^(-1/2), V their covariance (standard errors se_k and
the correlations of estimates made from the same super-observations, from the block sums of
their influences, :func:`obsprep.audit.uncertainty.joint_correlation`), and the test of their
agreement Q = (e - F^2)^T V^-1 (e - F^2) against chi-square with K - 1 degrees of freedom
(Cochran's Q, [Cochran1954]; for independent estimates the inverse-variance weighted mean and
Q = sum (e_k - F^2)^2 / se_k^2).  Each se_k is taken at the combined value F^2, not at its own
estimate
(:meth:`obsprep.audit.uncertainty.BlockedEstimate.se_at`; solved by fixed-point iteration from
the plain weights): the uncertainty of a variance estimate grows with the variance, so weights
from each estimate's own value would favour the estimates that came out low by chance and pull
the combination down.  With p(Q) below :data:`AGREEMENT_LEVEL` the estimates disagree: the
verdict is ``inconclusive`` ("estimates disagree", each shown) unless every one of them, on its
own, shows the errors wrong in the same direction by the rule below (they then disagree on how
wrong, not on whether: the flag is given, with the interval spanning theirs).  Otherwise, with
t the Student quantile for the fewest blocks behind any estimate ([CameronMiller2015]) and
tolerance T:

- ``too_small`` when F^2 - se > T^2 (beyond the tolerance by more than its uncertainty) and
  F^2 - t_0.95 se > 1 (wrong with one-sided 95 % confidence);
- ``too_large`` when F^2 + se < 1 / T^2 and F^2 + t_0.95 se < 1;
- ``ok`` when the two-sided 95 % interval F^2 +- t_0.975 se lies inside [1 / T^2, T^2];
- else ``inconclusive`` ("not enough evidence"), never ``ok``;
- ``no_evidence`` when no estimate exists at all (the reason says why).

In the two flag tests se is the larger of the standard error at the combined value and the
one at the boundary being rejected (T^2 or 1 / T^2 for the first condition, 1 for the second;
:func:`combined_se_at`).  The spread of a variance estimate grows with the variance, so an
estimate that came out low by chance also has a small standard error: tested with it alone,
a sensor whose errors are too small could be flagged too large (seen on the calibration
benchmark: 2 % of trials at F = 1.5 with 30 super-observations).  At the boundary the
standard error is the one the estimate would have if the errors were just acceptable, which
is the question the test asks (a score-type test, common practice).

With a single background instead of an ensemble only an upper bound of F^2 exists; it can show
errors too large, never too small or right.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy import stats

from obsprep.audit.uncertainty import (
    MIN_BLOCKS,
    BlockedEstimate,
    blocked_ratio,
    gaussian_floor,
    joint_correlation,
    with_floor,
)

#: Cochran's Q below this p-value: the estimates disagree
AGREEMENT_LEVEL = 0.01
#: one-sided confidence that a flagged error is wrong (besides being beyond the tolerance by
#: more than one standard error), and two-sided confidence of an "ok"
FLAG_CONFIDENCE = 0.95
OK_CONFIDENCE = 0.95

FLAGS = ("ok", "too_small", "too_large", "inconclusive", "no_evidence")


@dataclass(frozen=True)
class Evidence:
    """One estimate of F^2 for a sensor and quantity.

    ``name``: short label (``innovations``, ``triple collocation with a b``, ...); ``kind``:
    ``estimate`` (combined and deciding), ``upper`` (an upper bound only) or ``diagnostic``
    (shown, never deciding); ``estimate``: its value and block standard error."""

    name: str
    kind: str
    estimate: BlockedEstimate

    @property
    def factor(self) -> float:
        """F = sqrt(max(F^2, 0))."""
        return float(np.sqrt(max(self.estimate.value, 0.0)))

    def describe(self) -> str:
        e = self.estimate
        spread = f"F^2 = {e.value:.3g} ± {e.se:.2g}" if np.isfinite(e.se) else f"F^2 = {e.value:.3g}"
        blocks = (f"{e.n} super-observations in {e.blocks} blocks of {e.block_cells} cells"
                  if e.blocks else f"{e.n} super-observations")
        levelled = "" if e.levelled or not e.blocks else \
            "; its uncertainty may be too small: errors correlated over the whole sampled area"
        prefix = {"upper": "upper bound from ", "diagnostic": "diagnostic, "}.get(self.kind, "")
        return f"{prefix}{self.name}: F = {self.factor:.3g} ({spread}; {blocks}{levelled})"


def pair_estimate(centred_difference, visible_own, visible_partner, partner: BlockedEstimate,
                  blocks) -> BlockedEstimate:
    """F^2 of a sensor from its differences with a partner whose F_p^2 is known (``partner``,
    the estimate from its innovations):

    .. math:: F^2 = \\frac{\\sum (d - \\bar d)^2 n/(n-1) - F_p^2 \\sum \\sigma_{vis,p}^2}
                          {\\sum \\sigma_{vis}^2}

    (collocation variance, :mod:`obsprep.audit.collocation`), with the block standard error of
    this ratio and the partner's uncertainty added in quadrature,
    se^2 += (sum sigma_vis,p^2 / sum sigma_vis^2)^2 se(F_p^2)^2 (delta method); its influence
    includes the partner's, scaled likewise, so that its correlation with the sensor's own
    innovations (which share the background errors with the partner's) is counted."""
    own2 = np.asarray(visible_own, dtype=np.float64) ** 2
    partner2 = np.asarray(visible_partner, dtype=np.float64) ** 2
    centred = np.asarray(centred_difference, dtype=np.float64)
    ratio = blocked_ratio(centred - partner.value * partner2, own2, blocks)
    if not np.isfinite(ratio.value):
        return ratio
    # Gaussian floor (obsprep.audit.uncertainty.with_floor), at the sample variance of d
    ratio = with_floor(ratio, gaussian_floor(np.full(centred.size, centred.mean()), own2))
    scale = float(partner2.sum() / own2.sum())
    fixed = scale * partner.se
    # at a true F^2 = x a term varies as var(d^2) = 2 (x s + F_p^2 s_p)^2 (Gaussian d)
    known = partner.value * partner2
    ratio = ratio.with_variance_model(np.sum(own2 * own2), 2.0 * np.sum(own2 * known),
                                      np.sum(known * known))
    influence = ratio.influence
    if influence is not None and partner.influence is not None:
        influence = influence.plus(partner.influence, -scale)
    return replace(ratio, se=float(np.hypot(ratio.se, fixed)), se_fixed=float(fixed),
                   influence=influence)


def _interval(value, se, dof, confidence, two_sided):
    q = stats.t.ppf(1.0 - (1.0 - confidence) / 2.0 if two_sided else confidence, max(dof, 1))
    return value - q * se, value + q * se


def _as_factor(value_sq) -> float:
    return float(np.sqrt(max(value_sq, 0.0)))


def _beyond(value, se, dof, tolerance, se_at=None) -> tuple[bool, bool]:
    """(too small, too large) by the rule of the module docstring, for F^2 = value +- se.

    ``se_at(x)``: the standard error if the true F^2 were x; each test then takes the larger of
    ``se`` and the standard error at the boundary it rejects (T^2 or 1 / T^2, and 1)."""
    at = se_at if se_at is not None else (lambda x: se)

    def spread(boundary):
        return max(se, at(boundary))

    low_flag, high_flag = _interval(value, spread(1.0), dof, FLAG_CONFIDENCE, two_sided=False)
    small = value - spread(tolerance ** 2) > tolerance ** 2 and low_flag > 1.0
    large = value + spread(1.0 / tolerance ** 2) < 1.0 / tolerance ** 2 and high_flag < 1.0
    return bool(small), bool(large)


#: fixed-point iterations of :func:`combined` (it settles in a few; the cap guards a cycle)
COMBINE_ITERATIONS = 50


def _inverse_covariance(correlation, ses) -> np.ndarray:
    """V^-1 for V = D R D, D = diag(ses), R = ``correlation``."""
    return np.linalg.inv(correlation * np.outer(ses, ses))


def combined(deciding: list[Evidence], correlation=None) -> tuple[float, float, float]:
    """The combined F^2, its standard error and Cochran's Q (module docstring).

    Generalised least squares with V = D R D, D the standard errors se_k(F^2) at the combined
    value and R the estimates' correlation (:func:`obsprep.audit.uncertainty.joint_correlation`:
    estimates from the same super-observations are not independent):
    F^2 = 1^T V^-1 e / 1^T V^-1 1, se = (1^T V^-1 1)^(-1/2), Q = (e - F^2)^T V^-1 (e - F^2).
    Starts from the estimates' own standard errors and iterates until F^2 changes by less
    than 1e-9 relative.  ``correlation``: R when the caller has it already."""
    values = np.array([e.estimate.value for e in deciding])
    if len(deciding) == 1:
        return float(values[0]), float(deciding[0].estimate.se), 0.0
    if correlation is None:
        correlation = joint_correlation([e.estimate for e in deciding])
    ones = np.ones(len(deciding))

    def solve(ses):
        inverse = _inverse_covariance(correlation, ses)
        weights = inverse @ ones
        return float(weights @ values / weights.sum()), inverse

    value, inverse = solve(np.array([e.estimate.se for e in deciding]))
    for _ in range(COMBINE_ITERATIONS):
        following, inverse = solve(np.array([e.estimate.se_at(value) for e in deciding]))
        settled = abs(following - value) <= 1e-9 * max(abs(value), 1e-12)
        value = following
        if settled:
            break
    _, inverse = solve(np.array([e.estimate.se_at(value) for e in deciding]))
    residual = values - value
    return value, float(1.0 / np.sqrt(ones @ inverse @ ones)), float(residual @ inverse @ residual)


def combined_se_at(deciding: list[Evidence], x: float, correlation=None) -> float:
    """The standard error of the combined F^2 (:func:`combined`) if the true F^2 were ``x``:
    (1^T V(x)^-1 1)^(-1/2), V(x) = D(x) R D(x), D(x) the estimates' se_k(x); ``correlation``:
    R when the caller has it already."""
    if len(deciding) == 1:
        return deciding[0].estimate.se_at(x)
    if correlation is None:
        correlation = joint_correlation([e.estimate for e in deciding])
    ses = np.array([e.estimate.se_at(x) for e in deciding])
    return float(1.0 / np.sqrt(_inverse_covariance(correlation, ses).sum()))


def decide(evidence: list[Evidence], tolerance: float = 1.5) -> dict:
    """Flag, conclusion, factor F with its 95 % interval and the reason, for one sensor and
    quantity (see the module docstring).

    Returns a dict: ``flag`` (one of :data:`FLAGS`), ``conclusion`` (readable),
    ``factor``, ``factor_se``, ``factor_low``, ``factor_high``, ``agreement_p``, ``evidence``
    (names of the deciding estimates) and ``reason`` (one line)."""
    usable = [e for e in evidence if e.estimate.usable]
    deciding = [e for e in usable if e.kind == "estimate"]
    upper = [e for e in usable if e.kind == "upper"]
    shown = "; ".join(e.describe() for e in usable)
    unusable = [e.name for e in evidence if not e.estimate.usable]
    if unusable and usable:
        shown += f"; not used (fewer than {MIN_BLOCKS} independent blocks): {', '.join(unusable)}"
    nan = float("nan")
    result = {"flag": "no_evidence", "conclusion": "no evidence", "factor": nan, "factor_se": nan,
              "factor_low": nan, "factor_high": nan, "agreement_p": nan, "evidence": "",
              "reason": ""}
    if not deciding:
        if upper:
            bound = min(upper, key=lambda e: e.estimate.value)
            e = bound.estimate
            low, high = _interval(e.value, e.se, e.dof, FLAG_CONFIDENCE, two_sided=False)
            result.update(factor_high=_as_factor(high), evidence=bound.name)
            if high < 1.0 / tolerance ** 2:
                result.update(flag="too_large", conclusion="too large",
                              reason=f"errors look too large: even with a perfect background F is "
                                     f"at most {_as_factor(high):.3g} ({shown})")
            else:
                result.update(flag="inconclusive", conclusion="inconclusive: not enough evidence",
                              reason=f"a single background bounds F from above only, at "
                                     f"{_as_factor(high):.3g}, which does not show the errors too "
                                     f"large ({shown})")
            return result
        why = (f"estimates with fewer than {MIN_BLOCKS} independent blocks: {', '.join(unusable)}"
               if unusable else "no model equivalents and no three collocated sensors")
        result["reason"] = why + (f" ({shown})" if shown else "")
        return result
    # the estimates' correlation, computed once for the combination and the flag tests
    correlation = (joint_correlation([e.estimate for e in deciding]) if len(deciding) > 1
                   else None)
    value, se, q = combined(deciding, correlation)
    dof = min(e.estimate.dof for e in deciding)
    p_agree = float(stats.chi2.sf(q, len(deciding) - 1)) if len(deciding) >= 2 else nan
    low_ok, high_ok = _interval(value, se, dof, OK_CONFIDENCE, two_sided=True)
    beyond_small, beyond_large = _beyond(value, se, dof, tolerance,
                                         lambda x: combined_se_at(deciding, x, correlation))
    disagree = bool(np.isfinite(p_agree) and p_agree < AGREEMENT_LEVEL)
    if disagree:
        # each estimate alone, at its own standard error: do they all point the same way?
        alone = [_beyond(e.estimate.value, e.estimate.se, e.estimate.dof, tolerance,
                         e.estimate.se_at) for e in deciding]
        beyond_small = all(small for small, _ in alone)
        beyond_large = all(large for _, large in alone)
        if beyond_small or beyond_large:  # the interval spans every estimate's
            bounds = [_interval(e.estimate.value, e.estimate.se, e.estimate.dof, OK_CONFIDENCE,
                                two_sided=True) for e in deciding]
            low_ok, high_ok = min(b[0] for b in bounds), max(b[1] for b in bounds)
    factor = _as_factor(value)
    result.update(factor=factor, factor_se=se / (2.0 * factor) if factor > 0 else nan,
                  factor_low=_as_factor(low_ok), factor_high=_as_factor(high_ok),
                  agreement_p=p_agree, evidence=", ".join(e.name for e in deciding))
    interval = f"F = {factor:.3g} ({_as_factor(low_ok):.3g} to {_as_factor(high_ok):.3g}, 95 %)"
    if disagree and (beyond_small or beyond_large):
        way = "small" if beyond_small else "large"
        interval = (f"F = {factor:.3g} ({_as_factor(low_ok):.3g} to {_as_factor(high_ok):.3g}, "
                    f"the 95 % intervals of all estimates)")
        result.update(flag=f"too_{way}", conclusion=f"too {way}",
                      reason=f"errors look too {way}: every estimate alone says so, though they "
                             f"disagree on how much (p = {p_agree:.2g}): {interval}; {shown}")
    elif disagree:
        result.update(flag="inconclusive", conclusion="inconclusive: estimates disagree",
                      reason=f"estimates disagree (p = {p_agree:.2g}): {shown}")
    elif beyond_small:
        result.update(flag="too_small", conclusion="too small",
                      reason=f"errors look too small: {interval}; {shown}")
    elif beyond_large:
        result.update(flag="too_large", conclusion="too large",
                      reason=f"errors look too large: {interval}; {shown}")
    elif low_ok >= 1.0 / tolerance ** 2 and high_ok <= tolerance ** 2:
        result.update(flag="ok", conclusion="ok",
                      reason=f"consistent within a factor {tolerance:g}: {interval}; {shown}")
    else:
        result.update(flag="inconclusive", conclusion="inconclusive: not enough evidence",
                      reason=f"not enough evidence to say the errors are right or wrong within a "
                             f"factor {tolerance:g}: {interval}; {shown}")
    return result
