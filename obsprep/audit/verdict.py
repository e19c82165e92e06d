"""Question (ii) of the audit: is the super-observation error right?  The verdict per sensor.

One convention everywhere: F is the factor by which the assigned super-observation error should
be multiplied (F > 1: the assigned errors are too small; F < 1: too large).  The evidence is a
set of estimates of F^2, each a ratio of sums with a block standard error that allows for
correlated neighbours (:mod:`obsprep.audit.uncertainty`):

- innovations against an ensemble (:mod:`obsprep.audit.innovations`);
- triple collocation, against the part of the error differences see
  (:mod:`obsprep.audit.triple`);
- pair collocation with a partner whose own F is known from its innovations
  (:func:`pair_estimate`), for a sensor without innovations of its own;
- the analysis-residual estimate, only when the analyses were made with the errors being
  tested (the fixed point of its iteration, [Desroziers2005]); otherwise it is biased toward the
  assigned errors and is listed as a diagnostic, never deciding.

Combination: the inverse-variance weighted mean of the K estimates, F^2 = sum w_k e_k / sum w_k
with w_k = 1 / se_k^2 and standard error (sum w_k)^(-1/2), and the test of their agreement
Q = sum w_k (e_k - F^2)^2 against chi-square with K - 1 degrees of freedom (Cochran's Q,
[Cochran1954]).  With p(Q) below :data:`AGREEMENT_LEVEL` the verdict is ``inconclusive``
("estimates disagree", each shown).  Otherwise, with t the Student quantile for the fewest blocks
behind any estimate ([CameronMiller2015]) and tolerance T:

- ``too_small`` when F^2 - se > T^2 (beyond the tolerance by more than its uncertainty) and
  F^2 - t_0.95 se > 1 (wrong with one-sided 95 % confidence);
- ``too_large`` when F^2 + se < 1 / T^2 and F^2 + t_0.95 se < 1;
- ``ok`` when the two-sided 95 % interval F^2 +- t_0.975 se lies inside [1 / T^2, T^2];
- else ``inconclusive`` ("not enough evidence"), never ``ok``;
- ``no_evidence`` when no estimate exists at all (the reason says why).

With a single background instead of an ensemble only an upper bound of F^2 exists; it can show
errors too large, never too small or right.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from obsprep.audit.uncertainty import MIN_BLOCKS, BlockedEstimate, blocked_ratio, gaussian_floor, with_floor

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


def pair_estimate(centred_difference, visible_own, visible_partner, partner_factor_sq,
                  partner_factor_sq_se, blocks) -> BlockedEstimate:
    """F^2 of a sensor from its differences with a partner of known F_p^2 (its innovations):

    .. math:: F^2 = \\frac{\\sum (d - \\bar d)^2 n/(n-1) - F_p^2 \\sum \\sigma_{vis,p}^2}
                          {\\sum \\sigma_{vis}^2}

    (collocation variance, :mod:`obsprep.audit.collocation`), with the block standard error of
    this ratio and the partner's uncertainty added in quadrature,
    se^2 += (sum sigma_vis,p^2 / sum sigma_vis^2)^2 se(F_p^2)^2 (delta method)."""
    own2 = np.asarray(visible_own, dtype=np.float64) ** 2
    partner2 = np.asarray(visible_partner, dtype=np.float64) ** 2
    centred = np.asarray(centred_difference, dtype=np.float64)
    ratio = blocked_ratio(centred - partner_factor_sq * partner2, own2, blocks)
    if not np.isfinite(ratio.value):
        return ratio
    # Gaussian floor (obsprep.audit.uncertainty.with_floor), at the sample variance of d
    ratio = with_floor(ratio, gaussian_floor(np.full(centred.size, centred.mean()), own2))
    scale = float(partner2.sum() / own2.sum())
    se = float(np.hypot(ratio.se, scale * partner_factor_sq_se))
    return BlockedEstimate(ratio.value, se, ratio.blocks, ratio.dof, ratio.block_cells,
                           ratio.levelled, ratio.n)


def _interval(value, se, dof, confidence, two_sided):
    q = stats.t.ppf(1.0 - (1.0 - confidence) / 2.0 if two_sided else confidence, max(dof, 1))
    return value - q * se, value + q * se


def _as_factor(value_sq) -> float:
    return float(np.sqrt(max(value_sq, 0.0)))


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
    values = np.array([e.estimate.value for e in deciding])
    weights = np.array([1.0 / e.estimate.se ** 2 for e in deciding])
    value = float(np.sum(weights * values) / weights.sum())
    se = float(1.0 / np.sqrt(weights.sum()))
    dof = min(e.estimate.dof for e in deciding)
    p_agree = nan
    if len(deciding) >= 2:
        q = float(np.sum(weights * (values - value) ** 2))
        p_agree = float(stats.chi2.sf(q, len(deciding) - 1))
    low_ok, high_ok = _interval(value, se, dof, OK_CONFIDENCE, two_sided=True)
    low_flag, high_flag = _interval(value, se, dof, FLAG_CONFIDENCE, two_sided=False)
    beyond_small = value - se > tolerance ** 2 and low_flag > 1.0
    beyond_large = value + se < 1.0 / tolerance ** 2 and high_flag < 1.0
    factor = _as_factor(value)
    result.update(factor=factor, factor_se=se / (2.0 * factor) if factor > 0 else nan,
                  factor_low=_as_factor(low_ok), factor_high=_as_factor(high_ok),
                  agreement_p=p_agree, evidence=", ".join(e.name for e in deciding))
    interval = f"F = {factor:.3g} ({_as_factor(low_ok):.3g} to {_as_factor(high_ok):.3g}, 95 %)"
    if np.isfinite(p_agree) and p_agree < AGREEMENT_LEVEL:
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
