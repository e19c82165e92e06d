"""Error standard deviations of super-observations.

All errors are 1-sigma standard deviations in the units of the observed value.  The functions
take the mergeable sums kept by :class:`obsprep.superobs.accumulate.Accumulator`, so they work on
one group or on arrays of groups alike (numpy broadcasting).

The correlation model is the simplest one in use: every pair of raw observations in a group has
the same error correlation rho.  Neighbouring pixels of one sensor share errors (cloud-clearing,
retrieval, atmospheric correction), so rho = 0 overstates how much averaging helps.
Representation error is not reduced by averaging and is added afterwards in quadrature.
"""

from __future__ import annotations

import numpy as np


def _check_correlation(correlation):
    rho = np.asarray(correlation, dtype=np.float64)
    bad = ~((rho >= 0.0) & (rho <= 1.0))
    if np.any(bad):
        first = rho[bad].flat[0] if rho.ndim else rho.item()
        raise ValueError(
            f"correlation: expected a common pairwise error correlation in 0..1, "
            f"found {int(np.count_nonzero(bad))} value(s) outside it (e.g. {first!r})")
    return rho


def error_of_mean(sum_var, sum_sigma, n, correlation=0.0):
    """Error of the equally weighted mean of n values with a common pairwise error correlation.

    For :math:`\\bar x = \\frac1n \\sum_i x_i` with error covariance
    :math:`C_{ii} = \\sigma_i^2`, :math:`C_{ij} = \\rho\\,\\sigma_i \\sigma_j` (i != j):

    .. math::
        \\operatorname{var}(\\bar x) = \\frac{1}{n^2} \\sum_{i,j} C_{ij}
        = \\frac{\\sum_i \\sigma_i^2
          + \\rho\\left[\\left(\\sum_i \\sigma_i\\right)^2 - \\sum_i \\sigma_i^2\\right]}{n^2}

    since :math:`\\sum_{i \\ne j} \\sigma_i \\sigma_j = (\\sum_i \\sigma_i)^2 - \\sum_i \\sigma_i^2`.
    For equal :math:`\\sigma` this is :math:`\\sigma^2 [1 + (n - 1)\\rho] / n` (variance of a
    sum of equicorrelated variables, any statistics textbook): with rho = 0 the familiar
    :math:`\\sigma^2/n`, with rho = 1 no gain at all.

    Parameters
    ----------
    sum_var : array_like
        :math:`\\sum_i \\sigma_i^2`, units of the value squared.
    sum_sigma : array_like
        :math:`\\sum_i \\sigma_i`, units of the value.
    n : array_like
        Number of values (>= 1).
    correlation : float or array_like
        Common pairwise error correlation rho, 0..1 (dimensionless).

    Returns
    -------
    numpy.ndarray
        Standard deviation of the mean's error, units of the value.
    """
    rho = _check_correlation(correlation)
    sum_var = np.asarray(sum_var, dtype=np.float64)
    sum_sigma = np.asarray(sum_sigma, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    # The bracket is >= 0 exactly; rounding may make it a hair negative for n = 1.
    cross = np.maximum(sum_sigma * sum_sigma - sum_var, 0.0)
    return np.sqrt(sum_var + rho * cross) / n


def error_of_weighted_mean(sum_inv_var, sum_inv_sigma, correlation=0.0):
    """Error of the inverse-variance weighted mean with a common pairwise error correlation.

    Weights :math:`w_i = 1/\\sigma_i^2`, :math:`W = \\sum_i w_i`, estimate
    :math:`\\hat x = \\sum_i w_i x_i / W`.  With :math:`C_{ii} = \\sigma_i^2` and
    :math:`C_{ij} = \\rho\\,\\sigma_i\\sigma_j`:

    .. math::
        \\operatorname{var}(\\hat x) = \\frac{1}{W^2}\\sum_{i,j} w_i w_j C_{ij}
        = \\frac{1}{W^2}\\Big[\\sum_i \\frac{\\sigma_i^2}{\\sigma_i^4}
          + \\rho \\sum_{i \\ne j} \\frac{\\sigma_i \\sigma_j}{\\sigma_i^2 \\sigma_j^2}\\Big]
        = \\frac{W + \\rho\\left[\\left(\\sum_i 1/\\sigma_i\\right)^2 - W\\right]}{W^2}

    using :math:`\\sum_{i \\ne j} a_i a_j = (\\sum_i a_i)^2 - \\sum_i a_i^2` with
    :math:`a_i = 1/\\sigma_i`.  For rho = 0 this is the textbook
    :math:`1 / \\sum_i \\sigma_i^{-2}` (inverse-variance weighting).  For rho > 0 these weights
    are no longer the optimal ones, but the formula is still the exact error of this estimate.

    Parameters
    ----------
    sum_inv_var : array_like
        :math:`W = \\sum_i \\sigma_i^{-2}`, inverse units of the value squared.
    sum_inv_sigma : array_like
        :math:`\\sum_i \\sigma_i^{-1}`, inverse units of the value.
    correlation : float or array_like
        Common pairwise error correlation rho, 0..1 (dimensionless).

    Returns
    -------
    numpy.ndarray
        Standard deviation of the weighted mean's error, units of the value.
    """
    rho = _check_correlation(correlation)
    weight = np.asarray(sum_inv_var, dtype=np.float64)
    sum_inv_sigma = np.asarray(sum_inv_sigma, dtype=np.float64)
    cross = np.maximum(sum_inv_sigma * sum_inv_sigma - weight, 0.0)
    return np.sqrt(weight + rho * cross) / weight


def combine_in_quadrature(*parts):
    """Total error of independent error sources.

    .. math::
        \\sigma = \\sqrt{\\sum_k \\sigma_k^2}

    (variances of independent errors add; any statistics textbook).

    Parameters
    ----------
    *parts : array_like
        Standard deviations in the same units; broadcast against each other.

    Returns
    -------
    numpy.ndarray
        Standard deviation, same units.
    """
    if not parts:
        raise ValueError("combine_in_quadrature: expected at least one error term, got none")
    total = np.zeros(np.broadcast_shapes(*(np.shape(p) for p in parts)))
    for part in parts:  # loop over error terms (a handful), not over observations
        part = np.asarray(part, dtype=np.float64)
        total = total + part * part
    return np.sqrt(total)


def apply_floor(error, floor):
    """Raise errors to a minimum value: ``max(floor, error)``.

    A floor keeps a super-observation of many raw values from claiming more accuracy than the
    analysis can use (common practice).  NaN errors stay NaN.

    Parameters
    ----------
    error : array_like
        Standard deviations, units of the value.
    floor : float or array_like
        Minimum standard deviation (>= 0), same units.

    Returns
    -------
    numpy.ndarray
    """
    floor = np.asarray(floor, dtype=np.float64)
    if np.any(~(floor >= 0.0)):
        raise ValueError(f"floor: expected error floors >= 0 in the units of the value, "
                         f"found {floor[~(floor >= 0.0)].flat[0] if floor.ndim else floor.item()!r}")
    return np.maximum(np.asarray(error, dtype=np.float64), floor)
