"""Monte-Carlo checks of the super-observation error formulas against the empirical error of
super-observations minus truth (numpy random draws are the reference): error groups with a
within-group and an across-group correlation, unequal raw errors, both weightings, the
spread-based error and its rules, the fit in depth in a thermocline.

Tolerance: with T independent trials the mean of z^2 = (estimate - truth)^2 / predicted
variance has a relative standard error sqrt(2 / T) for Gaussian errors (0.7 % at T = 40000);
the issue asks for agreement within 5 %, which is about 7 standard errors here, so a correct
formula does not fail by chance and a formula off by 5 % in variance does.
"""

from __future__ import annotations

import zlib

import numpy as np
import pytest

from obsprep.superobs import Accumulator
from obsprep.superobs.errors import (
    combine_instrument_and_spread,
    expected_residual_of_mean,
    expected_residual_of_weighted_mean,
    max_rule_normaliser,
    residual_variance_factor,
)
from obsprep.superobs.layers import fit_in_depth, fit_variance

TRIALS = 40000
WITHIN_5_PERCENT = 0.05


def structured_errors(rng, sigma, group, rho_within, rho_across, trials=TRIALS):
    """Errors of ``trials`` independent cells with the same layout: raw error sigma_i, error
    group g_i; covariance rho_within sigma_i sigma_j within a group, rho_across across groups
    (rho_across <= rho_within): a cell-wide, a group-wide and an own standard normal part."""
    n_groups = int(group.max()) + 1
    cell = rng.standard_normal((trials, 1))
    shared = rng.standard_normal((trials, n_groups))[:, group]
    own = rng.standard_normal((trials, sigma.size))
    return sigma * (np.sqrt(rho_across) * cell + np.sqrt(rho_within - rho_across) * shared
                    + np.sqrt(1.0 - rho_within) * own)


def collapsed(values, sigma, group, rho_within, depth=None, pair_correlation=None, lon=None,
              lat=None):
    """One cell per trial, collapsed over the error groups."""
    trials, n = values.shape
    cell = np.repeat(np.arange(trials, dtype=np.int64), n)
    keys = {"cell": cell, "error_group": np.tile(group.astype(np.int64), trials)}
    zeros = np.zeros(cell.size)
    acc = Accumulator.from_observations(
        keys, values.ravel(), np.tile(sigma, trials), zeros,
        zeros if lon is None else np.tile(lon, trials), zeros if lat is None else np.tile(lat, trials),
        zeros if depth is None else depth.ravel(), pair_correlation=pair_correlation)
    return acc.collapse("error_group", rho_within)


LAYOUTS = {
    # name: (sigma, group)
    "one group, equal sigma, n 8": (np.full(8, 0.3), np.zeros(8, dtype=int)),
    "one group, unequal sigma, n 5": (np.array([0.1, 0.2, 0.3, 0.5, 0.8]), np.zeros(5, dtype=int)),
    "three granules, unequal sigma": (np.linspace(0.2, 0.6, 12), np.repeat([0, 1, 2], 4)),
    "two passes of 3 and 9": (np.r_[np.full(3, 0.03), np.full(9, 0.05)], np.repeat([0, 1], [3, 9])),
}


@pytest.mark.parametrize("mode", ["mean", "weighted"])
@pytest.mark.parametrize("rho_within,rho_across", [(0.0, 0.0), (0.4, 0.0), (0.6, 0.2)])
@pytest.mark.parametrize("layout", list(LAYOUTS))
def test_instrument_error_matches_the_empirical_error(layout, rho_within, rho_across, mode):
    rng = np.random.default_rng(zlib.crc32(repr((layout, rho_within, mode)).encode()))
    sigma, group = LAYOUTS[layout]
    errors = structured_errors(rng, sigma, group, rho_within, rho_across)
    frame = collapsed(5.0 + errors, sigma, group, rho_within).finalize(
        mode=mode, across_correlation=rho_across)
    predicted = frame["error_instrument"].to_numpy()
    assert np.ptp(predicted) < 1e-12 * predicted[0]        # one layout: one predicted error
    z2 = ((frame["value"].to_numpy() - 5.0) / predicted) ** 2
    assert abs(z2.mean() - 1.0) < WITHIN_5_PERCENT, (z2.mean(), predicted[0])


def test_one_constant_correlation_for_every_pair_would_be_wrong_across_granules():
    """Three granules with independent errors across them: the structured error is right, the
    old single-correlation error (every pair rho) is too large by more than 5 %."""
    rng = np.random.default_rng(7)
    sigma, group = LAYOUTS["three granules, unequal sigma"]
    errors = structured_errors(rng, sigma, group, 0.5, 0.0)
    values = 1.0 + errors
    right = collapsed(values, sigma, group, 0.5).finalize()
    cells = np.repeat(np.arange(TRIALS, dtype=np.int64), sigma.size)
    zeros = np.zeros(cells.size)
    every_pair = Accumulator.from_observations({"cell": cells}, values.ravel(),
                                               np.tile(sigma, TRIALS), zeros, zeros, zeros,
                                               zeros).finalize(correlation=0.5)
    empirical = np.mean((right["value"].to_numpy() - 1.0) ** 2)
    assert abs(empirical / right["error_instrument"].iloc[0] ** 2 - 1) < WITHIN_5_PERCENT
    assert every_pair["error_instrument"].iloc[0] ** 2 / empirical > 1.3


def test_an_error_group_split_between_accumulators_collapses_like_the_whole():
    rng = np.random.default_rng(3)
    n = 40
    cell = rng.integers(0, 5, n).astype(np.int64)
    group = rng.integers(0, 3, n).astype(np.int64)
    value, sigma = rng.normal(size=n), rng.uniform(0.1, 0.5, n)
    zeros = np.zeros(n)

    def acc(rows):
        return Accumulator.from_observations({"cell": cell[rows], "error_group": group[rows]},
                                             value[rows], sigma[rows], zeros[rows], zeros[rows],
                                             zeros[rows], zeros[rows])
    whole = acc(np.arange(n)).collapse("error_group", 0.3)
    split = Accumulator.merge([acc(np.arange(0, 17)), acc(np.arange(17, n))]).collapse(
        "error_group", 0.3)
    for name, array in whole.state.items():
        np.testing.assert_allclose(split.state[name], array, rtol=1e-12, atol=1e-14, err_msg=name)
    # collapsed accumulators (different files, different error groups) merge by adding
    halves = Accumulator.merge([acc(np.flatnonzero(group == g)).collapse("error_group", 0.3)
                                for g in range(3)])
    for name in ("sum_group_sigma_squared", "within_pairs_sigma", "group_count", "count"):
        np.testing.assert_allclose(halves.state[name], whole.state[name], rtol=1e-12)


@pytest.mark.parametrize("mode", ["mean", "weighted"])
@pytest.mark.parametrize("layout", ["one group, unequal sigma, n 5", "three granules, unequal sigma"])
def test_spread_based_variance_is_unbiased_for_any_weights_and_structure(layout, mode):
    """E[var_instrument * R / E[R]] = the true variance when the assigned errors are right up to
    a common factor k (here k = 1.5: the assigned errors are too small)."""
    rng = np.random.default_rng(21)
    sigma, group = LAYOUTS[layout]
    rho = 0.3
    k = 1.5
    errors = k * structured_errors(rng, sigma, group, rho, 0.0)
    acc = collapsed(2.0 + errors, sigma, group, rho)
    frame = acc.finalize(mode=mode)
    s = acc.state
    variance = frame["error_instrument"].to_numpy() ** 2
    if mode == "mean":
        residual, expected = s["value_m2"], expected_residual_of_mean(s["sum_variance"],
                                                                      s["count"], variance)
    else:
        residual = s["weighted_m2"]
        expected = expected_residual_of_weighted_mean(s["count"], s["sum_inverse_variance"],
                                                      variance)
    estimate = variance * residual_variance_factor(residual, expected)
    true_variance = np.mean((frame["value"].to_numpy() - 2.0) ** 2)
    assert abs(estimate.mean() / true_variance - 1) < WITHIN_5_PERCENT
    assert abs(true_variance / (k**2 * variance[0]) - 1) < WITHIN_5_PERCENT


def test_equal_weight_spread_in_weighted_mode_is_far_off_the_issues_example():
    """The old spread rule s / sqrt(n) used as the weighted mean's error with unequal errors is
    several times off (n = 5, rho = 0); the residual rule is not."""
    rng = np.random.default_rng(5)
    sigma, group = LAYOUTS["one group, unequal sigma, n 5"]
    errors = structured_errors(rng, sigma, group, 0.0, 0.0)
    acc = collapsed(errors, sigma, group, 0.0)
    frame = acc.finalize(mode="weighted")
    true_error = np.sqrt(np.mean(frame["value"].to_numpy() ** 2))
    old = np.sqrt(np.mean(acc.state["value_m2"] / 4 / 5))
    assert old / true_error > 2.0   # 2.4 with these errors
    s = acc.state
    variance = frame["error_instrument"].to_numpy() ** 2
    new = np.sqrt(np.mean(variance * residual_variance_factor(
        s["weighted_m2"], expected_residual_of_weighted_mean(s["count"],
                                                             s["sum_inverse_variance"], variance))))
    assert abs(new / true_error - 1) < WITHIN_5_PERCENT


def test_max_rule_is_unbiased_when_the_assigned_errors_are_right():
    rng = np.random.default_rng(9)
    n = 5
    errors = rng.standard_normal((TRIALS, n))
    m2 = ((errors - errors.mean(1, keepdims=True)) ** 2).sum(1)
    factor = m2 / (n - 1)
    chosen, _ = combine_instrument_and_spread(np.full(TRIALS, 1 / np.sqrt(n)), factor,
                                              np.full(TRIALS, n - 1), np.full(TRIALS, n), "max", 5)
    # E[chosen^2] = 1/n (unbiased in variance); the plain max would be m(4) = 1.27 times that
    assert abs(np.mean(chosen**2) * n - 1) < WITHIN_5_PERCENT
    assert max_rule_normaliser(4.0) == pytest.approx(1 - 3 * np.exp(-2) + 5 * np.exp(-2), rel=1e-12)
    plain = np.mean(np.maximum(1.0, factor))
    assert abs(plain / max_rule_normaliser(4.0) - 1) < WITHIN_5_PERCENT


def test_shrunk_spread_error_keeps_small_groups_near_unit_normalised_error():
    """With the shrinkage the normalised error of five values has a standard deviation near 1,
    where the raw spread-based error gives sqrt(nu / (nu - 2)) = 1.41 (Student t, nu = 4)."""
    rng = np.random.default_rng(13)
    n = 5
    errors = rng.standard_normal((TRIALS, n))
    mean = errors.mean(1)
    factor = ((errors - mean[:, None]) ** 2).sum(1) / (n - 1)
    instrument = np.full(TRIALS, 1 / np.sqrt(n))
    shrunk, _ = combine_instrument_and_spread(instrument, factor, np.full(TRIALS, n - 1),
                                              np.full(TRIALS, n), "spread_when_n_ge", 5, 4.0)
    raw = instrument * np.sqrt(factor)
    assert np.std(mean / raw) > 1.3
    assert abs(np.std(mean / shrunk) - 1) < 0.1


def test_weighted_mode_weights_time_depth_and_position_like_the_value():
    rng = np.random.default_rng(4)
    n = 30
    cell = rng.integers(0, 4, n).astype(np.int64)
    sigma = rng.uniform(0.1, 1.0, n)
    value, time = rng.normal(size=n), rng.uniform(0, 3600, n)
    lon, lat, depth = rng.uniform(10, 10.5, n), rng.uniform(-60, -59.5, n), rng.uniform(0, 50, n)
    frame = Accumulator.from_observations({"cell": cell}, value, sigma, time, lon, lat,
                                          depth).finalize(mode="weighted")
    for c in range(4):  # reference: numpy.average with weights 1/sigma^2
        rows = cell == c
        w = sigma[rows] ** -2.0
        row = frame.loc[frame["cell"] == c].iloc[0]
        assert row["value"] == pytest.approx(np.average(value[rows], weights=w), rel=1e-12)
        assert row["time"] == pytest.approx(np.average(time[rows], weights=w), rel=1e-12)
        assert row["depth"] == pytest.approx(np.average(depth[rows], weights=w), rel=1e-12)
        # the weighted spherical mean: weighted mean of unit vectors (numpy)
        x = np.cos(np.radians(lat[rows])) * np.cos(np.radians(lon[rows]))
        y = np.cos(np.radians(lat[rows])) * np.sin(np.radians(lon[rows]))
        z = np.sin(np.radians(lat[rows]))
        vx, vy, vz = (np.average(a, weights=w) for a in (x, y, z))
        assert row["lon"] == pytest.approx(np.degrees(np.arctan2(vy, vx)), abs=1e-10)
        assert row["lat"] == pytest.approx(np.degrees(np.arctan2(vz, np.hypot(vx, vy))), abs=1e-10)


def thermocline(depth):
    """A tanh thermocline (degC): 2 degC below, 12 degC above, centred at 60 m, 15 m wide."""
    return 7.0 + 5.0 * np.tanh((60.0 - depth) / 15.0)


@pytest.mark.parametrize("rho", [0.0, 0.5])
def test_fit_in_depth_in_a_thermocline_matches_the_truth_at_the_reported_depth(rho):
    """A 46-54 m layer in a thermocline, six levels with noise 0.01 degC: the
    layer mean differs from the truth at the mean depth by many errors; the quadratic fit does
    not, and its error (fit_variance) matches the empirical error within 5 %."""
    rng = np.random.default_rng(17 + int(10 * rho))
    trials = 20000
    sigma = np.full(6, 0.01)
    group = np.zeros(6, dtype=int)
    depth = np.sort(rng.uniform(46.0, 54.0, (trials, 6)), axis=1)
    noise = structured_errors(rng, sigma, group, rho, 0.0, trials=trials)
    acc = collapsed(thermocline(depth) + noise, sigma, group, rho, depth=depth)
    frame = acc.finalize()
    s = acc.state
    truth = thermocline(frame["depth"].to_numpy())
    mean_variance = frame["error_instrument"].to_numpy() ** 2
    bias = frame["value"].to_numpy() - truth
    assert np.mean(np.abs(bias) / np.sqrt(mean_variance)) > 3   # the layer mean is biased
    fit = fit_in_depth(s, frame["depth"].to_numpy())
    uncorrelated = expected_residual_of_mean(s["sum_variance"], s["count"], mean_variance) / 5
    variance = fit_variance(mean_variance, uncorrelated, fit.coefficient_squares, s["count"])
    z = (fit.value - truth) / np.sqrt(variance)
    # the fit's own truncation (the cubic part of tanh) is far below the noise here
    assert abs(np.mean(z)) < 0.05
    assert abs(np.mean(z**2) - 1) < WITHIN_5_PERCENT


@pytest.mark.parametrize("n,cells", [(1, 100), (10, 100), (80, 100), (100, 100), (5, np.inf)])
def test_sampled_representation_error_matches_sampling_without_replacement(n, cells):
    """A cell of N footprints with sub-cell values of standard deviation 0.2 about their mean;
    n drawn without replacement (numpy): the error of their mean about the cell mean."""
    from obsprep.superobs.representation import sampled_representation_error

    rng = np.random.default_rng(int(n))
    trials = 20000
    if np.isinf(cells):  # an unbounded population: independent values of the field
        sample_mean = 0.2 * rng.standard_normal((trials, n)).mean(1)
    else:
        size = int(cells)
        field = rng.standard_normal((trials, size))
        field = 0.2 * (field - field.mean(1, keepdims=True)) / field.std(1, ddof=1, keepdims=True)
        picks = np.argsort(rng.random((trials, size)), axis=1)[:, :n]
        sample_mean = np.take_along_axis(field, picks, axis=1).mean(1)
    predicted = sampled_representation_error(0.2, n, 1e8, 0.0 if np.isinf(cells) else 1e8 / cells)
    empirical = np.sqrt(np.mean(sample_mean**2))
    if n == cells:
        assert predicted == 0.0 and empirical < 1e-12
    else:
        assert abs(empirical / predicted - 1) < WITHIN_5_PERCENT / 2   # rms: half of 5 % in variance


def test_cell_area_of_a_polar_stereographic_grid_matches_the_projection_scale_factor():
    """Ground area of a 10 km EPSG:3031 cell = (10 km / k)^2, k PROJ's point scale factor."""
    import pyproj

    from obsprep.geo.grid.projected import ProjectedGrid

    grid = ProjectedGrid("EPSG:3031", -2600000.0, 600000.0, 10000.0, 10000.0, 30, 20)
    i, j = np.array([3, 15, 28]), np.array([2, 10, 17])
    factors = pyproj.Proj("EPSG:3031").get_factors(grid.lon_center[j, i], grid.lat_center[j, i])
    expected = (10000.0 / np.asarray(factors.meridional_scale)) * (
        10000.0 / np.asarray(factors.parallel_scale))
    # the grid's widths are great-circle distances on the mean sphere, each within -0.45 % ..
    # +0.56 % of the WGS 84 geodesic (ModelGrid.cell_center_distance): the area within 1.2 %
    np.testing.assert_allclose(grid.cell_area(i, j), expected, rtol=1.2e-2)


def exponential_errors(rng, sigma, lon, lat, group, rho0, length_m, trials):
    """Errors with covariance rho0 exp(-d/L) sigma_i sigma_j within a group (d great-circle,
    pyproj.Geod on the sphere of the mean Earth radius), independent across groups: numpy
    Cholesky of the covariance."""
    import pyproj

    geod = pyproj.Geod(a=6371008.8, f=0.0)
    n = sigma.size
    a, b = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    _, _, distance = geod.inv(lon[a.ravel()], lat[a.ravel()], lon[b.ravel()], lat[b.ravel()])
    rho = rho0 * np.exp(-distance.reshape(n, n) / length_m)
    rho = np.where(group[:, None] == group[None, :], rho, 0.0)
    np.fill_diagonal(rho, 1.0)
    chol = np.linalg.cholesky(rho * np.outer(sigma, sigma))
    return rng.standard_normal((trials, n)) @ chol.T


@pytest.mark.parametrize("mode", ["mean", "weighted"])
@pytest.mark.parametrize("split", [False, True])
def test_distance_correlated_errors_match_the_empirical_error(mode, split):
    """Two granules of pixels 2 km apart in a 10 km cell, correlation 0.8 exp(-d / 5 km)
    within a granule; with ``split`` each granule's pixels come in two accumulators (parts of
    a file read in pieces), whose pairs are then taken at the parts' mean positions."""
    rng = np.random.default_rng(31 + int(split))
    side = np.arange(5) * 0.018        # about 2 km in latitude
    lat = np.repeat(-60.0 + side, 5)
    lon = np.tile(10.0 + side * 2.0, 5)   # about 2 km in longitude at 60 S
    lon, lat = np.r_[lon, lon + 0.004], np.r_[lat, lat + 0.002]
    group = np.repeat([0, 1], 25)
    sigma = rng.uniform(0.2, 0.4, 50)
    trials = 20000
    errors = exponential_errors(rng, sigma, lon, lat, group, 0.8, 5000.0, trials)
    cells = np.repeat(np.arange(trials, dtype=np.int64), 50)

    def acc(columns):
        rows = (cells.reshape(trials, 50)[:, columns]).ravel()
        picked = np.tile(columns, trials)
        return Accumulator.from_observations(
            {"cell": rows, "error_group": group[picked].astype(np.int64)},
            (errors[:, columns]).ravel(), sigma[picked], np.zeros(rows.size), lon[picked],
            lat[picked], np.zeros(rows.size), pair_correlation=(0.8, 5000.0))
    if split:
        first = np.r_[0:12, 25:37]
        parts = [acc(first), acc(np.setdiff1d(np.arange(50), first))]
        merged = Accumulator.merge(parts).collapse("error_group")
    else:
        merged = acc(np.arange(50)).collapse("error_group")
    frame = merged.finalize(mode=mode)
    predicted = frame["error_instrument"].to_numpy()
    z2 = (frame["value"].to_numpy() / predicted) ** 2
    # exact within one accumulator; parts at their mean positions: within the same 5 %
    assert abs(z2.mean() - 1.0) < WITHIN_5_PERCENT, (z2.mean(), predicted[0])


def test_curvature_offset_estimate_is_unbiased_in_a_straight_layer_and_a_curved_one():
    """ô^2 - u var-factor estimates the squared offset (mean minus value at the mean depth)
    without bias: 0 for a straight profile, the true offset^2 in a thermocline (numpy draws)."""
    rng = np.random.default_rng(23)
    trials, sigma = 40000, 0.01
    group = np.zeros(6, dtype=int)
    for shape in (lambda d: 3.0 - 0.01 * d, thermocline):
        depth = np.sort(rng.uniform(46.0, 54.0, (trials, 6)), axis=1)
        noise = structured_errors(rng, np.full(6, sigma), group, 0.0, 0.0, trials=trials)
        acc = collapsed(shape(depth) + noise, np.full(6, sigma), group, 0.0, depth=depth)
        fit = fit_in_depth(acc.state, acc.state["depth_mean"])
        estimate = fit.curvature_offset ** 2 - sigma**2 * fit.curvature_offset_noise
        clean = fit_in_depth(collapsed(shape(depth), np.full(6, sigma), group, 0.0,
                                       depth=depth).state, acc.state["depth_mean"])
        truth = clean.curvature_offset ** 2     # the noise-free fit's offset
        se = estimate.std() / np.sqrt(trials)
        assert abs(estimate.mean() - truth.mean()) < 5 * se, (estimate.mean(), truth.mean(), se)
