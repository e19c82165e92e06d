"""Error standard deviations of super-observations.

All errors are 1-sigma standard deviations in the units of the observed value.  The functions
take the mergeable sums kept by :class:`obsprep.superobs.accumulate.Accumulator`, so they work on
one group or on arrays of groups alike (numpy broadcasting).

Errors are correlated within an error group (one pass, granule or profile: pixels of one
granule share cloud screening, retrieval and calibration errors), as a constant rho or as
rho0 exp(-d/L) in the distance d (:mod:`obsprep.superobs.pairs`), and by a configurable
(default 0) correlation across groups; rho = 0 overstates how much averaging helps.
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


def variance_of_mean(sum_variance, count, within_pairs, sum_sigma, sum_group_sigma_squared,
                     across_correlation=0.0):
    """Error variance of the equally weighted mean of n values made of error groups.

    Values i, j of the same error group g (one pass, granule or profile) have error covariance
    :math:`\\rho_{ij}\\sigma_i\\sigma_j`; values of different groups
    :math:`\\rho_x\\sigma_i\\sigma_j`.  With :math:`S_g = \\sum_{i \\in g}\\sigma_i`,
    :math:`S = \\sum_g S_g` and the within-group pair sum
    :math:`P = \\sum_g \\sum_{i \\ne j \\in g} \\rho_{ij}\\sigma_i\\sigma_j`:

    .. math::
        \\operatorname{var}(\\bar x) = \\frac{1}{n^2}\\sum_{i,j} C_{ij}
        = \\frac{\\sum_i \\sigma_i^2 + P + \\rho_x\\left(S^2 - \\sum_g S_g^2\\right)}{n^2}

    since the pairs of different groups sum to :math:`S^2 - \\sum_g S_g^2` (variance of a sum
    of correlated variables, any statistics textbook).  One group with a constant rho gives
    :math:`P = \\rho(S^2 - \\sum\\sigma_i^2)` and the familiar
    :math:`\\sigma^2[1 + (n - 1)\\rho]/n` for equal sigma.

    Parameters
    ----------
    sum_variance : array_like
        :math:`\\sum_i \\sigma_i^2`, units of the value squared.
    count : array_like
        n.
    within_pairs : array_like
        P, units of the value squared.
    sum_sigma, sum_group_sigma_squared : array_like
        S (units of the value) and :math:`\\sum_g S_g^2` (units squared).
    across_correlation : float or array_like
        :math:`\\rho_x`, 0..1.

    Returns
    -------
    numpy.ndarray
        Variance, units of the value squared.
    """
    return _variance_of_grouped_sum(sum_variance, within_pairs, sum_sigma,
                                    sum_group_sigma_squared, across_correlation, count)


def variance_of_weighted_mean(sum_inverse_variance, within_pairs_inverse, sum_inverse_sigma,
                              sum_group_inverse_sigma_squared, across_correlation=0.0):
    """Error variance of the inverse-variance weighted mean of values made of error groups.

    Weights :math:`w_i = 1/\\sigma_i^2`, :math:`W = \\sum_i w_i`, estimate
    :math:`\\hat x = \\sum_i w_i x_i / W`; covariances as in :func:`variance_of_mean`.  Since
    :math:`w_i w_j \\rho_{ij}\\sigma_i\\sigma_j = \\rho_{ij}/(\\sigma_i\\sigma_j)`, with
    :math:`A_g = \\sum_{i \\in g} 1/\\sigma_i`, :math:`A = \\sum_g A_g` and
    :math:`Q = \\sum_g \\sum_{i \\ne j \\in g} \\rho_{ij}/(\\sigma_i\\sigma_j)`:

    .. math::
        \\operatorname{var}(\\hat x) = \\frac{1}{W^2}\\sum_{i,j} w_i w_j C_{ij}
        = \\frac{W + Q + \\rho_x\\left(A^2 - \\sum_g A_g^2\\right)}{W^2}

    For rho = 0 everywhere the textbook :math:`1/\\sum_i\\sigma_i^{-2}`.  With correlation
    these weights are not the optimal ones, but the formula is the exact error of this
    estimate.

    Parameters
    ----------
    sum_inverse_variance : array_like
        W, inverse units of the value squared.
    within_pairs_inverse : array_like
        Q, inverse units squared.
    sum_inverse_sigma, sum_group_inverse_sigma_squared : array_like
        A and :math:`\\sum_g A_g^2`.
    across_correlation : float or array_like
        :math:`\\rho_x`, 0..1.

    Returns
    -------
    numpy.ndarray
        Variance, units of the value squared.
    """
    return _variance_of_grouped_sum(sum_inverse_variance, within_pairs_inverse,
                                    sum_inverse_sigma, sum_group_inverse_sigma_squared,
                                    across_correlation, sum_inverse_variance)


def _variance_of_grouped_sum(diagonal, within_pairs, total, sum_group_squared, across_correlation,
                             normaliser):
    """``(diagonal + within_pairs + rho_x (total^2 - sum_group_squared)) / normaliser^2``, the
    one formula behind :func:`variance_of_mean` and :func:`variance_of_weighted_mean`."""
    across = _check_correlation(across_correlation)
    total = np.asarray(total, dtype=np.float64)
    between = np.maximum(total * total - np.asarray(sum_group_squared, dtype=np.float64), 0.0)
    normaliser = np.asarray(normaliser, dtype=np.float64)
    return (np.asarray(diagonal, dtype=np.float64) + np.asarray(within_pairs)
            + across * between) / (normaliser * normaliser)


def constant_correlation_pairs(total, sum_of_squares, correlation):
    """Pair sum of one error group with a constant correlation rho:
    :math:`\\sum_{i \\ne j} \\rho a_i a_j = \\rho[(\\sum a_i)^2 - \\sum a_i^2]`, from the
    group's ``total`` :math:`\\sum a_i` and ``sum_of_squares`` :math:`\\sum a_i^2`
    (:math:`a = \\sigma` for the mean, :math:`1/\\sigma` for the weighted mean).  The bracket is
    >= 0 exactly; rounding may make it a hair negative for one value, so it is kept >= 0."""
    total = np.asarray(total, dtype=np.float64)
    return correlation * np.maximum(total * total - np.asarray(sum_of_squares), 0.0)


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
    within = constant_correlation_pairs(sum_sigma, sum_var, rho)   # one error group
    return np.sqrt(variance_of_mean(sum_var, n, within, sum_sigma, sum_sigma * sum_sigma))


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
    within = constant_correlation_pairs(sum_inv_sigma, weight, rho)   # one error group
    return np.sqrt(variance_of_weighted_mean(weight, within, sum_inv_sigma,
                                             sum_inv_sigma * sum_inv_sigma))


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


def expected_residual_of_mean(sum_variance, count, variance_of_estimate):
    """Expected sum of squared residuals about the equally weighted mean, per unit of the
    assigned error variance.

    For a linear estimate :math:`\\hat x = \\sum_j c_j x_j` (:math:`\\sum c_j = 1`) of values
    with error covariance C, the residual sum :math:`R = \\sum_i d_i (x_i - \\hat x)^2` has
    expectation (expanding the quadratic form, any statistics textbook)

    .. math:: E[R] = \\sum_i d_i C_{ii} - 2 \\sum_i d_i (C c)_i + \\left(\\sum_i d_i\\right) c^T C c

    For the mean (:math:`d_i = 1`, :math:`c_i = 1/n`): :math:`\\sum_i \\sigma_i^2 - n V`,
    V = var of the mean (:func:`variance_of_mean`).  A shared error leaves no trace in the
    residuals: one group with rho = 1 gives 0.  Units of the value squared.
    """
    return np.asarray(sum_variance, dtype=np.float64) - np.asarray(count) * np.asarray(
        variance_of_estimate)


def expected_residual_of_weighted_mean(count, sum_inverse_variance, variance_of_estimate):
    """Expected :math:`\\sum_i w_i (x_i - \\hat x_w)^2` about the inverse-variance weighted mean
    under the assigned errors: with :math:`d_i = w_i = 1/\\sigma_i^2`, :math:`c_i = w_i/W` in
    :func:`expected_residual_of_mean`'s expansion, :math:`n - W V`, V = var of the weighted
    mean (:func:`variance_of_weighted_mean`).  Dimensionless; n - 1 for independent errors."""
    return np.asarray(count, dtype=np.float64) - np.asarray(sum_inverse_variance) * np.asarray(
        variance_of_estimate)


def residual_variance_factor(residual_sum, expected_residual_sum):
    """The factor :math:`\\hat k^2 = R / E[R]` by which the residuals say the assigned error
    variances should be multiplied (unbiased for :math:`k^2` when the assigned errors are right
    up to a common factor k: :math:`E[R] \\propto k^2`).  NaN where the expectation is not
    positive (one value, or fully shared errors)."""
    expected = np.asarray(expected_residual_sum, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(expected > 0, np.asarray(residual_sum) / expected, np.nan)


def max_rule_normaliser(dof):
    """:math:`m(\\nu) = E[\\max(1, Y/\\nu)]` for :math:`Y \\sim \\chi^2_\\nu`.

    Splitting at Y = nu and using :math:`y f_\\nu(y) = \\nu f_{\\nu + 2}(y)` for the chi-square
    densities (from memory; checked by Monte Carlo in the tests):

    .. math:: m(\\nu) = P(\\chi^2_\\nu \\le \\nu) + P(\\chi^2_{\\nu + 2} > \\nu)

    m(4) = 1.271: taking max(1, k^2) alone raises the variance of a right error by 27 % (the
    error by 13 %) at five values.
    """
    from scipy.stats import chi2

    nu = np.asarray(dof, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        return chi2.cdf(nu, nu) + chi2.sf(nu, nu + 2.0)


#: ``error_basis`` codes: which term set a super-observation's total error
ERROR_BASIS = {"instrument": 0, "spread": 1, "floor": 2}
#: the rules of :func:`combine_instrument_and_spread` (``superobs.spread_combination``)
COMBINATION_RULES = ("instrument", "max", "spread_when_n_ge")


def combine_instrument_and_spread(instrument, variance_factor, dof, count, rule="instrument",
                                  min_count=5, prior_dof=4.0):
    """The observation part of a super-observation error from the instrument-based error and
    the residual variance factor :math:`\\hat k^2` (:func:`residual_variance_factor`).

    Rules (``superobs.spread_combination``), where count >= min_count and the factor is
    defined (else the instrument-based error):

    - ``"instrument"``: the instrument-based error alone (the spread is only reported);
    - ``"max"``: :math:`\\sigma_{instrument}\\sqrt{\\max(1, \\hat k^2) / m(\\nu)}`, the larger of
      the two estimates divided by its expectation when the assigned errors are right
      (:func:`max_rule_normaliser`), so that the rule is unbiased for right errors in variance
      and still follows the spread where it is larger (by a factor up to sqrt(1/m));
    - ``"spread_when_n_ge"``: the spread-based error with a small-sample shrinkage toward the
      instrument error, :math:`\\sigma_{instrument}\\sqrt{(\\nu_0 + \\nu \\hat k^2) / (\\nu_0 + \\nu)}`:
      the scale of a scaled-inverse-chi-square conjugate prior for a normal variance with
      :math:`\\nu_0` prior degrees of freedom centred on the instrument error, updated by
      :math:`\\nu` residual degrees of freedom [Gelman2013] (from memory).  It keeps
      E[sigma^2 / sigma_hat^2] finite and near 1 for small groups and never gives 0 for
      identical values.

    Parameters
    ----------
    instrument : array_like
        Instrument-based error, units of the value.
    variance_factor : array_like
        :math:`\\hat k^2` (NaN: undefined).
    dof : array_like
        Residual degrees of freedom :math:`\\nu` (n minus the fitted parameters).
    count : array_like
        Number of raw values per group.
    rule : str
        One of :data:`COMBINATION_RULES`.
    min_count : int
        Smallest count for which the spread is used (>= 2).
    prior_dof : float
        :math:`\\nu_0` (> 0), ``superobs.spread_prior_dof``.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        The chosen error (units of the value) and the basis code per group
        (:data:`ERROR_BASIS`: 0 instrument, 1 spread).
    """
    instrument = np.asarray(instrument, dtype=np.float64)
    factor = np.asarray(variance_factor, dtype=np.float64)
    nu = np.asarray(dof, dtype=np.float64)
    usable = (np.asarray(count) >= max(int(min_count), 2)) & np.isfinite(factor) & (nu >= 1)
    if rule == "instrument":
        return instrument, np.full(instrument.shape, ERROR_BASIS["instrument"])
    if rule == "max":
        scale = np.maximum(1.0, factor) / max_rule_normaliser(np.where(usable, nu, 1.0))
        basis = usable & (factor > 1.0)
    elif rule == "spread_when_n_ge":
        if not prior_dof > 0:
            raise ValueError(f"prior_dof: expected > 0 prior degrees of freedom, got {prior_dof!r}")
        scale = (prior_dof + nu * factor) / (prior_dof + nu)
        basis = usable
    else:
        raise ValueError(f"spread combination rule must be one of {', '.join(COMBINATION_RULES)}; "
                         f"got {rule!r}")
    chosen = np.where(usable, instrument * np.sqrt(np.where(usable, scale, 1.0)), instrument)
    return chosen, np.where(basis, ERROR_BASIS["spread"], ERROR_BASIS["instrument"])
