"""Sub-surface super-observations in model layers: the value against depth inside a group.

A layer of a profile holds values at several depths.  Where the profile is curved inside the
layer (a thermocline), the mean of the values is not the value at their mean depth: with
:math:`v(d) = a + b\\,\\delta + c\\,\\delta^2`, :math:`\\delta = d - \\bar d`, the mean is
:math:`a + c\\,M_2/n` (:math:`M_2 = \\sum \\delta^2`) while the value at :math:`\\bar d` is a.
The least-squares quadratic in depth (simple polynomial regression, any statistics textbook),
from the group's central depth moments :math:`M_2, M_3, M_4` and the co-moments
:math:`C_1 = \\sum \\delta (v - \\bar v)`, :math:`C_2 = \\sum \\delta^2 (v - \\bar v)`, uses the
centred regressors :math:`u_1 = \\delta`, :math:`u_2 = \\delta^2 - M_2/n`:

.. math::
    \\begin{pmatrix} M_2 & M_3 \\\\ M_3 & M_4 - M_2^2/n \\end{pmatrix}
    \\begin{pmatrix} b \\\\ c \\end{pmatrix} = \\begin{pmatrix} C_1 \\\\ C_2 \\end{pmatrix},
    \\qquad v(d^*) = \\bar v + b\\,\\delta^* + c\\,(\\delta^{*2} - M_2/n)

with residual sum of squares :math:`S_{vv} - b C_1 - c C_2` on n - 3 degrees of freedom.  The
fitted value is a linear estimate :math:`\\sum_i c_i v_i` with :math:`\\sum c_i = 1` and
:math:`\\sum c_i^2 = q = 1/n + g^T S^{-1} g`, :math:`g = (\\delta^*, \\delta^{*2} - M_2/n)`.
With fewer than four values, or fewer than three distinct depths, a straight line (two
distinct depths, three values) or the plain mean is fitted instead.

``superobs.layer_value`` chooses what a sub-surface super-observation reports
(:data:`LAYER_VALUES`): ``"mean"`` the layer mean at the mean depth, with the curvature offset
:math:`c\\,M_2/n` added to the representation error where it is significant
(:func:`significant_curvature`); ``"fit"`` the fitted
value at the super-observation's depth (the mean depth; the weighted mean depth in weighted
mode), with the error of the fit (:func:`fit_variance`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: what a sub-surface super-observation reports (``superobs.layer_value``)
LAYER_VALUES = ("mean", "fit")
#: a fit is determined where its normal matrix's determinant exceeds this fraction of the
#: product of its diagonal (depths not all (nearly) on two or one levels)
_DETERMINED = 1e-9


@dataclass
class LayerFit:
    """Per group: the fitted value at the reference depth (units of the value), the residual
    sum of squares about the fit (units squared), the number of fitted parameters (1, 2 or 3),
    q = sum of the squared coefficients of the fitted value, the curvature offset (mean of the
    values minus the fitted value at the mean depth; 0 without a quadratic) and the variance of
    that estimated offset per unit of uncorrelated error variance of a value,
    :math:`(M_2/n)^2 M_2 / \\det S` (the (2, 2) element of the inverse normal matrix; 0 without
    a quadratic)."""

    value: np.ndarray
    residual: np.ndarray
    parameters: np.ndarray
    coefficient_squares: np.ndarray
    curvature_offset: np.ndarray
    curvature_offset_noise: np.ndarray


def fit_in_depth(state: dict, reference_depth) -> LayerFit:
    """The polynomial fit of value against depth of every group (module docstring).

    ``state``: an accumulator's state (:data:`obsprep.superobs.accumulate.STATE_FIELDS`);
    ``reference_depth``: where to evaluate the fit (m, positive down), one per group.
    """
    n = state["count"].astype(np.float64)
    mean_value = state["value_mean"]
    m2, m3, m4 = state["depth_m2"], state["depth_m3"], state["depth_m4"]
    c1, c2 = state["depth_value_c2"], state["depth2_value_c3"]
    svv = state["value_m2"]
    delta = np.asarray(reference_depth, dtype=np.float64) - state["depth_mean"]
    with np.errstate(invalid="ignore", divide="ignore"):
        s22 = m4 - m2 * m2 / n
        det = m2 * s22 - m3 * m3
        quadratic = (n >= 4) & (det > _DETERMINED * m2 * s22) & (m2 > 0)
        linear = ~quadratic & (n >= 3) & (m2 > 0)
        b_quadratic = (s22 * c1 - m3 * c2) / det
        c_quadratic = (m2 * c2 - m3 * c1) / det
        b_linear = c1 / m2
        g2 = delta * delta - m2 / n
        q_quadratic = 1.0 / n + (s22 * delta * delta - 2.0 * m3 * delta * g2 + m2 * g2 * g2) / det
        q_linear = 1.0 / n + delta * delta / m2
        value = np.where(quadratic, mean_value + b_quadratic * delta + c_quadratic * g2,
                         np.where(linear, mean_value + b_linear * delta, mean_value))
        residual = np.where(quadratic, svv - b_quadratic * c1 - c_quadratic * c2,
                            np.where(linear, svv - b_linear * c1, svv))
        q = np.where(quadratic, q_quadratic, np.where(linear, q_linear, 1.0 / n))
        offset = np.where(quadratic, c_quadratic * m2 / n, 0.0)
        offset_noise = np.where(quadratic, (m2 / n) ** 2 * m2 / det, 0.0)
    parameters = np.where(quadratic, 3, np.where(linear, 2, 1)).astype(np.int64)
    return LayerFit(value, np.maximum(residual, 0.0), parameters, q, offset, offset_noise)


#: a curvature offset counts where it exceeds this many standard errors of its estimate: 1, the
#: positive part of the unbiased estimate (a higher threshold leaves curved layers with errors
#: too small, the dangerous side: at 3 the build-level thermocline test has mean z^2 = 1.8)
CURVATURE_SIGNIFICANCE = 1.0


def significant_curvature(offset, offset_variance):
    """The curvature offset to add to the representation error (units of the value).

    Where the estimated offset :math:`\\hat o` exceeds :data:`CURVATURE_SIGNIFICANCE` standard
    errors of its own noise (variance ``offset_variance``, :math:`u (q - 1/n)`), its square less
    that noise, :math:`\\hat o^2 - \\operatorname{var}(\\hat o)` (an unbiased estimate of the
    squared offset, kept >= 0); else 0.  The positive part errs on the safe side: in a straight
    layer a noise-only estimate adds about half its variance (for a standard normal z,
    :math:`E[\\max(z^2 - 1, 0)] = 0.48`).
    """
    offset = np.asarray(offset, dtype=np.float64)
    noise = np.asarray(offset_variance, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        significant = offset * offset > CURVATURE_SIGNIFICANCE ** 2 * noise
        squared = np.where(significant, offset * offset - noise, 0.0)
    return np.sqrt(np.maximum(np.nan_to_num(squared), 0.0))


def fit_variance(mean_variance, uncorrelated_variance, coefficient_squares, count):
    """Error variance of a fitted value from the error variance of the group mean.

    For a linear estimate :math:`\\sum c_i v_i` (:math:`\\sum c_i = 1`) of values whose errors
    have a part common to the group and an uncorrelated part of variance u each, the common
    part passes through unchanged and the uncorrelated part scales with
    :math:`\\sum c_i^2 = q` instead of 1/n (equicorrelated errors, any statistics textbook):

    .. math:: \\operatorname{var}_{fit} = \\operatorname{var}(\\bar v) + u\\,(q - 1/n)

    ``mean_variance`` (units squared), ``uncorrelated_variance`` u (units squared, per value),
    ``coefficient_squares`` q and ``count`` n per group.
    """
    n = np.asarray(count, dtype=np.float64)
    return np.asarray(mean_variance) + np.asarray(uncorrelated_variance) * np.maximum(
        np.asarray(coefficient_squares) - 1.0 / n, 0.0)


__all__ = ["LAYER_VALUES", "LayerFit", "fit_in_depth", "fit_variance", "significant_curvature"]
