"""The complete super-observation error: spread-based error, the fit in depth, the
combination rules, representation-error fields, checked against numpy Monte Carlo, numpy's
least-squares polynomial fit (reference implementation) and hand computations.

Monte Carlo tolerances: a mean of T independent draws is compared with its expectation within
5 standard errors (sample std / sqrt(T)), so a correct formula fails with probability below
1e-6, while a formula off by a few percent fails."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import QUANTITY_NAMES
from obsprep.settings.config import load_config
from obsprep.superobs import Accumulator
from obsprep.superobs.errors import (
    combine_instrument_and_spread,
    expected_residual_of_mean,
    max_rule_normaliser,
    residual_variance_factor,
    variance_of_mean,
)
from obsprep.superobs.finalize import finalize_superobs
from obsprep.superobs.layers import fit_in_depth

STANDARD_ERRORS = 5.0


def equicorrelated_errors(rng, trials, n, sigma, rho):
    """Errors with variance sigma^2 and pairwise correlation rho: sigma (sqrt(rho) z0 +
    sqrt(1 - rho) z_i) (a shared and an own standard normal part)."""
    shared = rng.standard_normal((trials, 1))
    own = rng.standard_normal((trials, n))
    return sigma * (np.sqrt(rho) * shared + np.sqrt(1.0 - rho) * own)


def assert_mean_close(samples, expected, label):
    samples = np.asarray(samples, dtype=float)
    se = samples.std(ddof=1) / np.sqrt(samples.size)
    assert abs(samples.mean() - expected) < STANDARD_ERRORS * se, (label, samples.mean(), expected, se)


@pytest.mark.parametrize("rho", [0.0, 0.3])
def test_spread_based_error_matches_the_variance_of_the_mean(rho):
    rng = np.random.default_rng(11)
    n, sigma, trials = 8, 0.5, 40000
    errors = equicorrelated_errors(rng, trials, n, sigma, rho)
    m2 = ((errors - errors.mean(1, keepdims=True)) ** 2).sum(1)
    variance = variance_of_mean(n * sigma**2, n, rho * (n**2 - n) * sigma**2, n * sigma,
                                (n * sigma) ** 2)
    estimate = variance * residual_variance_factor(m2, expected_residual_of_mean(
        n * sigma**2, n, variance))
    # E[estimate] = var(mean) = sigma^2 (1 + (n-1) rho) / n (textbook), and the Monte Carlo
    # variance of the means must agree with both
    expected = sigma**2 * (1 + (n - 1) * rho) / n
    np.testing.assert_allclose(variance, expected, rtol=1e-12)
    assert_mean_close(estimate, expected, "spread-based")
    assert_mean_close(errors.mean(axis=1) ** 2, expected, "Monte Carlo of the mean")


def test_spread_factor_is_undefined_for_single_values_and_full_correlation():
    # one value: E[R] = sigma^2 - 1 * sigma^2 = 0; rho = 1: the residuals see nothing
    assert np.isnan(residual_variance_factor(0.0, expected_residual_of_mean(0.09, 1, 0.09)))
    assert np.isnan(residual_variance_factor(0.1, expected_residual_of_mean(5 * 0.09, 5, 0.09)))
    # s / sqrt(n) for independent equal errors, by hand: R = 8 s^2, E[R] = 8 sigma^2
    variance = 0.09 / 9
    factor = residual_variance_factor(8 * 0.3**2, expected_residual_of_mean(9 * 0.09, 9, variance))
    np.testing.assert_allclose(np.sqrt(variance * factor), 0.1)


def test_quadratic_fit_in_depth_equals_numpy_polyfit_and_merges():
    rng = np.random.default_rng(3)
    groups, per_group = 40, 12
    group = np.repeat(np.arange(groups), per_group)
    depth = rng.uniform(20.0, 50.0, group.size)
    value = 1.0 + 0.05 * depth - 4e-4 * depth**2 + rng.normal(0.0, 0.01, group.size) + group * 0.1
    keys = {"g": group.astype(np.int64)}

    def accumulate(rows):
        return Accumulator.from_observations({"g": keys["g"][rows]}, value[rows],
                                             np.full(rows.size, 0.01), np.zeros(rows.size),
                                             np.zeros(rows.size), np.zeros(rows.size), depth[rows])
    half = rng.permutation(group.size)
    merged = Accumulator.merge([accumulate(np.sort(half[: group.size // 2])),
                                accumulate(np.sort(half[group.size // 2:]))])
    reference_depth = np.linspace(25.0, 45.0, groups)
    for acc in (accumulate(np.arange(group.size)), merged):
        fit = fit_in_depth(acc.state, reference_depth)
        assert (fit.parameters == 3).all()
        for g in range(groups):     # reference: numpy least squares of degree 2 (numpy.polyfit)
            rows = group == g
            coefficients = np.polyfit(depth[rows], value[rows], 2)
            residual = value[rows] - np.polyval(coefficients, depth[rows])
            np.testing.assert_allclose(fit.value[g], np.polyval(coefficients, reference_depth[g]),
                                       rtol=1e-9)
            np.testing.assert_allclose(fit.residual[g], np.sum(residual**2), rtol=1e-6)
            # sum of squared coefficients of the fitted value: from the design matrix (numpy)
            design = np.vander(depth[rows], 3)
            c = np.vander([reference_depth[g]], 3) @ np.linalg.pinv(design)
            np.testing.assert_allclose(fit.coefficient_squares[g], np.sum(c**2), rtol=1e-8)


def test_residual_about_the_fit_estimates_the_noise_by_monte_carlo():
    rng = np.random.default_rng(5)
    trials, n, sigma = 20000, 6, 0.02
    depth = rng.uniform(0.0, 100.0, (trials, n))
    value = 3.0 - 0.01 * depth + 2e-4 * depth**2 + sigma * rng.standard_normal((trials, n))
    group = np.repeat(np.arange(trials), n)
    acc = Accumulator.from_observations({"g": group}, value.ravel(), np.full(group.size, sigma),
                                        np.zeros(group.size), np.zeros(group.size),
                                        np.zeros(group.size), depth.ravel())
    fit = fit_in_depth(acc.state, acc.state["depth_mean"])
    assert (fit.parameters == 3).all()
    assert_mean_close(fit.residual / (n - 3), sigma**2, "residual variance")  # E[SSR/(n-3)]


def test_combination_rules_by_hand():
    instrument = np.array([0.1, 0.1, 0.1, 0.1])
    factor = np.array([4.0, 0.25, np.nan, 9.0])
    count = np.array([10, 10, 10, 3])
    dof = count - 1
    m9 = max_rule_normaliser(9.0)
    chosen, basis = combine_instrument_and_spread(instrument, factor, dof, count, "max", 5)
    np.testing.assert_allclose(chosen, [0.2 / np.sqrt(m9), 0.1 / np.sqrt(m9), 0.1, 0.1])
    np.testing.assert_array_equal(basis, [1, 0, 0, 0])
    chosen, basis = combine_instrument_and_spread(instrument, factor, dof, count,
                                                  "spread_when_n_ge", 5, prior_dof=4.0)
    # shrinkage (4 + 9 k^2) / 13 by hand
    np.testing.assert_allclose(chosen, [0.1 * np.sqrt(40 / 13), 0.1 * np.sqrt(6.25 / 13), 0.1, 0.1])
    np.testing.assert_array_equal(basis, [1, 1, 0, 0])
    chosen, _ = combine_instrument_and_spread(instrument, factor, dof, count, "instrument", 5)
    np.testing.assert_array_equal(chosen, instrument)
    with pytest.raises(ValueError, match="spread combination"):
        combine_instrument_and_spread(instrument, factor, dof, count, "median", 5)


CONFIG = """
[window]
date = "2026-11-20"
analysis_time = "{{date}}T00:00:00"
[grid]
type = "regular"
lon_min = 0.0
lat_min = 0.0
dlon = 1.0
dlat = 1.0
nlon = 4
nlat = 3
[[sources]]
sensor = "sst_a"
paths = ["none.nc"]
correlation = {rho}
[sources.error]
rule = "constant"
value = 0.3
[superobs]
spread_combination = "{rule}"
spread_min_count = 5
representation_error_file = "rep.nc"
representation_error_variables = {{ sea_surface_temperature = "sst_rep" }}
# a floor far below every error here, so that the test sees the formula, not the floor
error_floor = {{ sea_surface_temperature = 0.001 }}
"""


def write_representation(path, field, units="K", name="sst_rep"):
    xr.Dataset({name: (("lat", "lon"), field, {"units": units})}).to_netcdf(path)


def synthetic_groups(rng, representation, n=6, slots=400, sigma=0.3, rho=0.2):
    """Groups of n raw SST values per cell and slot: cell truth 0, the group's true mean off by
    N(0, representation[j, i]^2), raw errors equicorrelated (sigma, rho)."""
    ny, nx = representation.shape
    jj, ii, ss = np.meshgrid(np.arange(ny), np.arange(nx), np.arange(slots), indexing="ij")
    jj, ii, ss = (a.ravel() for a in (jj, ii, ss))
    groups = jj.size
    offset = representation[jj, ii] * rng.standard_normal(groups)
    values = offset[:, None] + equicorrelated_errors(rng, groups, n, sigma, rho)
    rows = np.repeat(np.arange(groups), n)
    zeros = np.zeros(rows.size, dtype=np.int64)
    keys = {"quantity": np.full(rows.size, QUANTITY_NAMES.index("sea_surface_temperature")),
            "sensor": zeros, "slot": ss[rows].astype(np.int64), "j": jj[rows].astype(np.int64),
            "i": ii[rows].astype(np.int64), "k": zeros, "profile": zeros - 1, "t_start": zeros,
            "t_end": zeros}
    acc = Accumulator.from_observations(keys, values.ravel(), np.full(rows.size, sigma),
                                        np.zeros(rows.size), 0.5 + ii[rows], 0.5 + jj[rows], 0.0)
    return acc


@pytest.mark.parametrize("rule", ["instrument", "spread_when_n_ge"])
def test_total_error_with_a_representation_field_by_monte_carlo(tmp_path, rule):
    rng = np.random.default_rng(21)
    representation = np.array([[0.0, 0.05, 0.1, 0.2], [0.3, 0.02, 0.15, 0.25],
                               [0.08, 0.12, 0.04, 0.5]])
    write_representation(tmp_path / "rep.nc", representation)
    (tmp_path / "c.toml").write_text(CONFIG.format(rho=0.2, rule=rule))
    cfg = load_config(tmp_path / "c.toml")
    out = finalize_superobs(cfg, synthetic_groups(rng, representation), ["sst_a"], {})
    j, i = out["j"].to_numpy(), out["i"].to_numpy()
    # looked up at (j, i); K -> degC as a difference (pint), so to rounding
    np.testing.assert_allclose(out["error_representation"], representation[j, i], atol=1e-12)
    # the error of the mean of 6 values, sigma 0.3, rho 0.2 (textbook formula)
    instrument = 0.3 * np.sqrt((1 + 5 * 0.2) / 6)
    np.testing.assert_allclose(out["error_instrument"], instrument, rtol=1e-12)
    assert (out["error_basis"] == (1 if rule == "spread_when_n_ge" else 0)).all()
    # Monte Carlo: the total error must describe the scatter of the values about the cell
    # truth (0): E[value^2] = instrument^2 + representation^2, per cell
    for cell in range(representation.size):
        rows = (j * 4 + i) == cell
        expected = instrument**2 + representation.flat[cell] ** 2
        assert_mean_close(out["value"][rows] ** 2, expected, f"cell {cell}")
        # the assigned total error, averaged, is that same variance (within its own sampling
        # for the spread-based rule)
        assert_mean_close(out["error"][rows] ** 2, expected, f"assigned, cell {cell}") \
            if rule == "spread_when_n_ge" else np.testing.assert_allclose(
                out["error"][rows] ** 2, expected, rtol=1e-12)
    assert set(out["error_origin"]) == {"constant"}


def test_representation_field_errors_name_file_and_variable(tmp_path):
    rng = np.random.default_rng(1)
    (tmp_path / "c.toml").write_text(CONFIG.format(rho=0.0, rule="instrument"))
    cfg = load_config(tmp_path / "c.toml")
    acc = synthetic_groups(rng, np.zeros((3, 4)), slots=2)
    write_representation(tmp_path / "rep.nc", np.zeros((4, 3)))
    with pytest.raises(InputFileError, match=r"rep\.nc, variable 'sst_rep': expected shape"):
        finalize_superobs(cfg, acc, ["sst_a"], {})
    field = np.zeros((3, 4))
    field[1, 2] = np.nan
    write_representation(tmp_path / "rep.nc", field)
    with pytest.raises(InputFileError, match=r"sst_rep.*first at j=1, i=2"):
        finalize_superobs(cfg, acc, ["sst_a"], {})
    write_representation(tmp_path / "rep.nc", np.zeros((3, 4)), name="other")
    with pytest.raises(InputFileError, match="no variable 'sst_rep'"):
        finalize_superobs(cfg, acc, ["sst_a"], {})
