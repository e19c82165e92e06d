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


def error_from_spread(spread, n, correlation=0.0):
    """Spread-based error of the mean of n values: the sample spread scaled to the mean.

    For n values whose errors have a common variance :math:`\\sigma^2` and a common pairwise
    correlation :math:`\\rho`, the sample variance has expectation
    :math:`E[s^2] = \\sigma^2 (1 - \\rho)` (the shared part of the errors does not spread the
    values), and the mean has variance :math:`\\sigma^2 [1 + (n - 1)\\rho] / n` (equicorrelated
    variables, any statistics textbook; from memory, checked by Monte Carlo in the tests), so

    .. math::
        \\sigma_{spread} = s \\sqrt{\\frac{1 + (n - 1)\\rho}{n (1 - \\rho)}}

    which is the familiar :math:`s / \\sqrt{n}` for :math:`\\rho = 0`.  The spread also holds the
    variability of the true values inside the group, so this estimates the error of the group
    mean as an estimate of the group's average truth plus that variability.

    Parameters
    ----------
    spread : array_like
        Sample standard deviation s (ddof = 1, or ddof = 2 about a fitted line), units of the
        value; NaN where undefined.
    n : array_like
        Number of values.
    correlation : float or array_like
        Common pairwise error correlation rho, 0..1.

    Returns
    -------
    numpy.ndarray
        Units of the value; NaN where the spread is NaN, n < 2 or rho = 1 (a fully shared
        error leaves no trace in the spread).
    """
    rho = _check_correlation(correlation)
    spread = np.asarray(spread, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.sqrt((1.0 + (n - 1.0) * rho) / (n * (1.0 - rho)))
    return np.where((n >= 2) & (rho < 1.0), spread * scale, np.nan)


def spread_about_depth_line(value_m2, depth_m2, depth_value_c2, n):
    """Residual standard deviation of the values about a straight line fitted against depth.

    With :math:`S_{vv} = \\sum (v - \\bar v)^2`, :math:`S_{dd} = \\sum (d - \\bar d)^2`,
    :math:`S_{dv} = \\sum (d - \\bar d)(v - \\bar v)`, the least-squares residual sum of squares
    is :math:`S_{vv} - S_{dv}^2 / S_{dd}` with n - 2 degrees of freedom (simple linear
    regression, any statistics textbook):

    .. math:: s_{line} = \\sqrt{\\frac{S_{vv} - S_{dv}^2 / S_{dd}}{n - 2}}

    For a profile layer the value is the layer mean at the mean depth, the intercept of that
    line, whose standard error is :math:`s_{line} / \\sqrt n`: the vertical structure inside
    the layer is not noise.  Where all depths are equal (:math:`S_{dd} = 0`) there is no line
    and the plain spread :math:`\\sqrt{S_{vv}/(n - 1)}` is returned.

    Parameters
    ----------
    value_m2, depth_m2, depth_value_c2 : array_like
        :math:`S_{vv}` (units of the value squared), :math:`S_{dd}` (m²), :math:`S_{dv}`.
    n : array_like
        Number of values.

    Returns
    -------
    numpy.ndarray
        Units of the value; NaN for n < 3 (n < 2 with equal depths).
    """
    value_m2 = np.asarray(value_m2, dtype=np.float64)
    depth_m2 = np.asarray(depth_m2, dtype=np.float64)
    c2 = np.asarray(depth_value_c2, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    # depths equal to rounding: no line to fit
    flat = depth_m2 <= 1e-12 * np.maximum(n, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        residual = np.maximum(value_m2 - c2 * c2 / depth_m2, 0.0)
        line = np.where(n >= 3, np.sqrt(residual / (n - 2.0)), np.nan)
        plain = np.where(n >= 2, np.sqrt(value_m2 / (n - 1.0)), np.nan)
    return np.where(flat, plain, line)


#: ``error_basis`` codes: which term set a super-observation's total error
ERROR_BASIS = {"instrument": 0, "spread": 1, "floor": 2}
#: the rules of :func:`combine_instrument_and_spread` (``superobs.spread_combination``)
COMBINATION_RULES = ("instrument", "max", "spread_when_n_ge")


def combine_instrument_and_spread(instrument, spread_error, count, rule="instrument",
                                  min_count=5):
    """The observation part of a super-observation error, from the instrument-based and the
    spread-based estimates.

    Rules (``superobs.spread_combination``):

    - ``"instrument"``: the instrument-based error alone (the spread is only reported);
    - ``"max"``: :math:`\\max(\\sigma_{instrument}, \\sigma_{spread})` where count >= min_count
      and the spread error is defined, else the instrument-based error (an error is never
      claimed smaller than the scatter of the data shows; common practice);
    - ``"spread_when_n_ge"``: the spread-based error where count >= min_count and it is
      defined, else the instrument-based error (for sensors whose stated errors are not
      trusted but which come in dense groups).

    Parameters
    ----------
    instrument, spread_error : array_like
        Instrument-based and spread-based errors, units of the value (spread NaN = undefined).
    count : array_like
        Number of raw values per group.
    rule : str
        One of the rules above.
    min_count : int
        Smallest count for which the spread-based error is used (>= 2).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        The chosen error (units of the value) and the basis code per group
        (:data:`ERROR_BASIS`: 0 instrument, 1 spread).
    """
    instrument = np.asarray(instrument, dtype=np.float64)
    spread_error = np.asarray(spread_error, dtype=np.float64)
    usable = (np.asarray(count) >= max(int(min_count), 2)) & np.isfinite(spread_error)
    if rule == "instrument":
        use_spread = np.zeros(instrument.shape, dtype=bool)
    elif rule == "max":
        use_spread = usable & (spread_error > instrument)
    elif rule == "spread_when_n_ge":
        use_spread = usable
    else:
        raise ValueError(f"spread combination rule must be one of {', '.join(COMBINATION_RULES)}; "
                         f"got {rule!r}")
    chosen = np.where(use_spread, spread_error, instrument)
    return chosen, np.where(use_spread, ERROR_BASIS["spread"], ERROR_BASIS["instrument"])
