"""Tests of obsprep.superobs: accumulator, error formulas, spherical means.

Every check names its reference beside it: numpy Monte Carlo, scipy/pandas as reference
implementations of grouped statistics, pyproj geodesics, or a textbook formula.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import binned_statistic_dd

from obsprep.superobs import (
    Accumulator,
    apply_floor,
    combine_in_quadrature,
    error_of_mean,
    error_of_weighted_mean,
    mean_position,
    merge_accumulators,
    unit_vectors,
)
from obsprep.superobs.accumulate import _packed_code  # to assert which grouping path runs

STAT_COLUMNS = ["count", "value", "spread", "value_min", "value_max", "time", "lon", "lat",
                "depth", "error_instrument", "error_representation", "error"]


def random_observations(rng, n, *, key_ranges=(3, 4, 5), value_offset=0.0):
    """Invented observations: integer keys, values, errors, times, positions, depths."""
    keys = {f"k{i}": rng.integers(0, r, n).astype(np.int64) for i, r in enumerate(key_ranges)}
    return dict(
        keys=keys,
        value=value_offset + rng.normal(0.0, 2.0, n),
        error=rng.uniform(0.1, 1.0, n),
        time=rng.uniform(-3 * 3600.0, 3 * 3600.0, n),
        lon=rng.uniform(10.0, 11.0, n),
        lat=rng.uniform(60.0, 61.0, n),
        depth=rng.uniform(0.0, 500.0, n),
        score=rng.integers(0, 4, n).astype(np.float64),  # coarse: many ties
        tiebreak=rng.permutation(n).astype(np.int64),
    )


def subset(data, rows):
    out = {name: value[rows] for name, value in data.items() if name != "keys"}
    out["keys"] = {name: key[rows] for name, key in data["keys"].items()}
    return out


def accumulate(data, with_score=True):
    return Accumulator.from_observations(
        data["keys"], data["value"], data["error"], data["time"], data["lon"], data["lat"],
        data["depth"],
        score=data["score"] if with_score else None,
        tiebreak=data["tiebreak"] if with_score else None)


def assert_frames_close(a, b, *, rtol=1e-10, atol=1e-10):
    assert list(a.columns) == list(b.columns)
    for column in a.columns:
        np.testing.assert_allclose(a[column].to_numpy(dtype=float), b[column].to_numpy(dtype=float),
                                   rtol=rtol, atol=atol, equal_nan=True, err_msg=column)


# ----------------------------------------------------------------------------------------------
# error formulas

def monte_carlo_errors(sigma, rho, n_samples, seed):
    """Sample variance of the equal-weight and 1/sigma^2-weighted means of correlated errors."""
    sigma = np.asarray(sigma, dtype=float)
    correlation = np.full((len(sigma), len(sigma)), rho)
    np.fill_diagonal(correlation, 1.0)
    covariance = correlation * np.outer(sigma, sigma)
    draws = np.random.default_rng(seed).multivariate_normal(
        np.zeros(len(sigma)), covariance, size=n_samples)
    weights = 1.0 / sigma**2
    equal = draws.mean(axis=1)
    weighted = draws @ weights / weights.sum()
    return np.var(equal, ddof=1), np.var(weighted, ddof=1)


# Standard error of a sample variance of N normal draws: var * sqrt(2 / (N - 1)) (textbook
# sampling distribution of s^2, chi-square with N - 1 degrees of freedom). 5 standard errors
# leave a false-alarm chance below 1e-6 for each check.
N_MONTE_CARLO = 200_000
MC_RELATIVE_TOLERANCE = 5.0 * np.sqrt(2.0 / (N_MONTE_CARLO - 1))


@pytest.mark.parametrize("rho", [0.0, 0.3])
@pytest.mark.parametrize("sigma", [[0.5] * 6, [0.2, 0.3, 0.5, 0.8, 1.0, 1.5]],
                         ids=["equal", "unequal"])
def test_error_of_mean_matches_monte_carlo(sigma, rho):
    # Reference: numpy Monte Carlo of a multivariate normal with C_ij = rho sigma_i sigma_j.
    mc_equal, _ = monte_carlo_errors(sigma, rho, N_MONTE_CARLO, seed=11)
    sigma = np.asarray(sigma)
    predicted = error_of_mean(np.sum(sigma**2), np.sum(sigma), len(sigma), rho) ** 2
    assert abs(predicted - mc_equal) <= MC_RELATIVE_TOLERANCE * predicted


@pytest.mark.parametrize("rho", [0.0, 0.3])
@pytest.mark.parametrize("sigma", [[0.5] * 6, [0.2, 0.3, 0.5, 0.8, 1.0, 1.5]],
                         ids=["equal", "unequal"])
def test_error_of_weighted_mean_matches_monte_carlo(sigma, rho):
    # Reference: numpy Monte Carlo, same tolerance as above.
    _, mc_weighted = monte_carlo_errors(sigma, rho, N_MONTE_CARLO, seed=12)
    sigma = np.asarray(sigma)
    predicted = error_of_weighted_mean(np.sum(sigma**-2.0), np.sum(1.0 / sigma), rho) ** 2
    assert abs(predicted - mc_weighted) <= MC_RELATIVE_TOLERANCE * predicted


def test_error_of_mean_equal_sigma_textbook_closed_form():
    # Textbook: var of the mean of n equicorrelated values = sigma^2 [1 + (n - 1) rho] / n.
    sigma, n = 0.4, np.arange(1, 50)
    for rho in (0.0, 0.1, 0.5, 1.0):
        expected = sigma * np.sqrt((1.0 + (n - 1) * rho) / n)
        np.testing.assert_allclose(error_of_mean(n * sigma**2, n * sigma, n, rho), expected,
                                   rtol=1e-13)


def test_error_of_weighted_mean_uncorrelated_is_inverse_variance_sum():
    # Textbook: var of the inverse-variance weighted mean = 1 / sum sigma^-2.
    sigma = np.array([0.1, 0.25, 0.7, 2.0])
    expected = 1.0 / np.sqrt(np.sum(sigma**-2.0))
    assert error_of_weighted_mean(np.sum(sigma**-2.0), np.sum(1 / sigma), 0.0) == \
        pytest.approx(expected, rel=1e-14)


def test_combine_in_quadrature_and_floor():
    # Textbook: independent errors add in variance; 3-4-5 right triangle.
    assert combine_in_quadrature(3.0, 4.0) == pytest.approx(5.0, rel=1e-15)
    np.testing.assert_allclose(combine_in_quadrature(np.array([3.0, 5.0]), 4.0, 0.0),
                               [5.0, np.sqrt(41.0)], rtol=1e-15)
    np.testing.assert_array_equal(apply_floor([0.1, 0.5, np.nan], 0.3), [0.3, 0.5, np.nan])
    with pytest.raises(ValueError, match="floor"):
        apply_floor([0.1], -1.0)
    with pytest.raises(ValueError, match="at least one"):
        combine_in_quadrature()


def test_correlation_outside_unit_interval_is_refused():
    with pytest.raises(ValueError, match="correlation"):
        error_of_mean(1.0, 1.0, 1, 1.5)
    with pytest.raises(ValueError, match="correlation"):
        error_of_weighted_mean(1.0, 1.0, np.array([0.2, -0.1]))


# ----------------------------------------------------------------------------------------------
# grouped statistics against reference implementations

def test_grouped_statistics_match_scipy_binned_statistic_dd():
    rng = np.random.default_rng(1)
    data = random_observations(rng, 3000)
    result = accumulate(data).finalize()
    sample = np.column_stack([data["keys"][name] for name in ("k0", "k1", "k2")]).astype(float)
    edges = [np.arange(r + 1) - 0.5 for r in (3, 4, 5)]  # one bin per integer key

    def reference(statistic):
        # Reference: scipy.stats.binned_statistic_dd.
        return binned_statistic_dd(sample, data["value"], statistic=statistic,
                                   bins=edges).statistic[
            result["k0"].to_numpy(), result["k1"].to_numpy(), result["k2"].to_numpy()]

    count = result["count"].to_numpy()
    np.testing.assert_array_equal(count, reference("count"))
    np.testing.assert_allclose(result["value"], reference("mean"), rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(result["value_min"], reference("min"))
    np.testing.assert_array_equal(result["value_max"], reference("max"))
    # scipy's "std" is the population standard deviation (ddof = 0).
    population = result["spread"].to_numpy() * np.sqrt((count - 1) / count)
    many = count > 1
    np.testing.assert_allclose(population[many], reference("std")[many], rtol=1e-10)
    assert np.isnan(result["spread"].to_numpy()[~many]).all()
    assert count.sum() == 3000


def test_grouped_statistics_match_pandas_groupby():
    rng = np.random.default_rng(2)
    data = random_observations(rng, 4000, key_ranges=(2, 7, 9))
    result = accumulate(data).finalize()
    names = list(data["keys"])
    frame = pd.DataFrame({**data["keys"], "value": data["value"], "time": data["time"],
                          "depth": data["depth"], "var": data["error"] ** 2,
                          "w": data["error"] ** -2.0,
                          "wx": data["value"] * data["error"] ** -2.0})
    # Reference: pandas.DataFrame.groupby (sorted by the keys in order).
    grouped = frame.groupby(names, sort=True)
    reference = grouped.agg(count=("value", "size"), mean=("value", "mean"),
                            std=("value", "std"), vmin=("value", "min"), vmax=("value", "max"),
                            time=("time", "mean"), depth=("depth", "mean"),
                            sum_var=("var", "sum"), w=("w", "sum"),
                            wx=("wx", "sum")).reset_index()
    for name in names:  # canonical order: lexicographic in the given key order
        np.testing.assert_array_equal(result[name], reference[name])
    np.testing.assert_array_equal(result["count"], reference["count"])
    np.testing.assert_allclose(result["value"], reference["mean"], rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(result["spread"], reference["std"], rtol=1e-10, equal_nan=True)
    np.testing.assert_array_equal(result["value_min"], reference["vmin"])
    np.testing.assert_array_equal(result["value_max"], reference["vmax"])
    np.testing.assert_allclose(result["time"], reference["time"], rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(result["depth"], reference["depth"], rtol=1e-12)
    # rho = 0, equal weights: var = sum sigma^2 / n^2 (textbook), sums from pandas.
    np.testing.assert_allclose(result["error_instrument"],
                               np.sqrt(reference["sum_var"]) / reference["count"], rtol=1e-12)

    weighted = accumulate(data).finalize(mode="weighted")
    # Weighted mean sum(w x)/sum(w) and its error 1/sqrt(sum w) (textbook), sums from pandas.
    np.testing.assert_allclose(weighted["value"], reference["wx"] / reference["w"], rtol=1e-12,
                               atol=1e-12)
    np.testing.assert_allclose(weighted["error_instrument"], 1.0 / np.sqrt(reference["w"]),
                               rtol=1e-12)


@pytest.mark.parametrize("layout", ["packed", "ranked", "lexsort"])
def test_every_grouping_path_matches_pandas(layout):
    # The keys are packed into one int64 when they fit; wide-ranging keys are ranked first;
    # keys whose combined cardinality overflows int64 fall back to a lexicographic sort.
    rng = np.random.default_rng(3)
    n = 3000
    if layout == "packed":
        keys = {"a": rng.integers(-5, 5, n), "b": rng.integers(100, 104, n)}
    elif layout == "ranked":
        keys = {"a": rng.choice([-2**62, 0, 2**62], n), "b": rng.integers(0, 3, n),
                "c": rng.choice([-2**63, 2**63 - 1], n)}
    else:
        # 8 keys of ~400 distinct values each: 400^8 combinations overflow int64; rows are
        # drawn with replacement from 1000 distinct ones so that groups repeat
        distinct = rng.integers(0, 400, (1000, 8)) * 2**20
        rows = distinct[rng.integers(0, 1000, n)]
        keys = {f"k{i}": rows[:, i] for i in range(8)}
    keys = {k: v.astype(np.int64) for k, v in keys.items()}
    packed = _packed_code(list(keys.values()))
    assert (packed is None) == (layout == "lexsort")
    value = rng.normal(size=n)
    ones = np.ones(n)
    result = Accumulator.from_observations(keys, value, ones, ones, ones, ones, ones).finalize()
    # Reference: pandas.DataFrame.groupby, sorted.
    reference = (pd.DataFrame({**keys, "value": value}).groupby(list(keys), sort=True)["value"]
                 .agg(["size", "mean"]).reset_index())
    assert len(result) == len(reference)
    for name in keys:
        np.testing.assert_array_equal(result[name], reference[name])
    np.testing.assert_array_equal(result["count"], reference["size"])
    np.testing.assert_allclose(result["value"], reference["mean"], rtol=1e-12, atol=1e-12)


# ----------------------------------------------------------------------------------------------
# merging

def random_chunks(rng, n, n_chunks):
    cuts = np.sort(rng.integers(0, n + 1, n_chunks - 1))
    permutation = rng.permutation(n)
    return np.split(permutation, cuts)


@pytest.mark.parametrize("with_score", [True, False])
def test_split_and_merge_equals_all_at_once(with_score):
    rng = np.random.default_rng(4)
    data = random_observations(rng, 5000)
    whole = accumulate(data, with_score)
    chunks = random_chunks(rng, 5000, 9) + [np.zeros(0, dtype=int)]  # one empty chunk too
    parts = [accumulate(subset(data, rows), with_score) for rows in chunks]
    # merge of merges (tree order) must agree too
    tree = merge_accumulators([Accumulator.merge(parts[:4]), Accumulator.merge(parts[4:])])
    merged = [Accumulator.merge([parts[i] for i in rng.permutation(len(parts))])
              for trial in range(3)] + [tree]
    # Reference: the same statistics computed in one batch.
    for mode in ("mean", "weighted"):
        expected = whole.finalize(mode=mode, correlation=0.25)
        for accumulator in merged:
            assert_frames_close(accumulator.finalize(mode=mode, correlation=0.25), expected)
    if with_score:
        merged_thin = Accumulator.merge(parts).finalize(mode="thin")
        whole_thin = whole.finalize(mode="thin")
        assert_frames_close(merged_thin, whole_thin)
        # the representative itself is the same raw observation, bit for bit
        picked = ["count", "value", "time", "lon", "lat", "depth", "error_instrument"]
        pd.testing.assert_frame_equal(merged_thin[picked], whole_thin[picked], check_exact=True)


def test_merging_the_same_list_twice_is_bitwise_identical():
    rng = np.random.default_rng(5)
    data = random_observations(rng, 4000, value_offset=273.15)
    chunks = random_chunks(rng, 4000, 6)
    first = Accumulator.merge([accumulate(subset(data, rows)) for rows in chunks])
    second = Accumulator.merge([accumulate(subset(data, rows)) for rows in chunks])
    for name, array in first.state.items():
        assert np.array_equal(array, second.state[name], equal_nan=True), name
        assert array.dtype == second.state[name].dtype
    for mode in ("mean", "weighted", "thin"):
        pd.testing.assert_frame_equal(first.finalize(mode=mode, correlation=0.2),
                                      second.finalize(mode=mode, correlation=0.2),
                                      check_exact=True)


observation_sets = st.integers(min_value=1, max_value=60).flatmap(
    lambda n: st.tuples(
        st.lists(st.integers(0, 3), min_size=n, max_size=n),
        st.lists(st.integers(0, 2), min_size=n, max_size=n),
        st.lists(st.floats(-1e3, 1e3, allow_nan=False), min_size=n, max_size=n),
        st.lists(st.floats(0.01, 10.0), min_size=n, max_size=n),
        st.lists(st.integers(0, n), min_size=0, max_size=5),
        st.randoms(use_true_random=False),
    ))


@settings(max_examples=80, deadline=None)
@given(observation_sets)
def test_properties_counts_bounds_and_merge_order(args):
    key_a, key_b, values, errors, cuts, random = args
    n = len(values)
    data = dict(keys={"a": np.array(key_a, dtype=np.int64), "b": np.array(key_b, dtype=np.int64)},
                value=np.array(values), error=np.array(errors), time=np.arange(n, dtype=float),
                lon=np.linspace(-179.0, 179.0, n), lat=np.linspace(-80.0, 80.0, n),
                depth=np.zeros(n), score=np.array(values), tiebreak=np.arange(n, dtype=np.int64))
    chunks = np.split(np.arange(n), sorted(cuts))
    parts = [accumulate(subset(data, rows)) for rows in chunks]
    merged = Accumulator.merge(parts)
    order = list(range(len(parts)))
    random.shuffle(order)
    reordered = Accumulator.merge([parts[i] for i in order])

    result = merged.finalize()
    # counts are conserved and match numpy's count of unique key pairs (reference: np.unique)
    assert result["count"].sum() == n
    _, unique_counts = np.unique(np.column_stack([key_a, key_b]), axis=0, return_counts=True)
    np.testing.assert_array_equal(result["count"], unique_counts)
    # a mean lies within [min, max] up to rounding of a few units in the last place
    scale = 1e-12 * np.maximum(1.0, np.abs(result[["value_min", "value_max"]]).max(axis=1))
    for mode in ("mean", "weighted"):
        value = merged.finalize(mode=mode)["value"]
        assert (value >= result["value_min"] - scale).all()
        assert (value <= result["value_max"] + scale).all()
    # merge order does not matter (to rounding)
    other = reordered.finalize()
    for column in ("count", "value", "value_min", "value_max", "time", "lat", "error_instrument"):
        np.testing.assert_allclose(other[column], result[column], rtol=1e-9, atol=1e-9)
    # longitudes as angles: a mean on the antimeridian is 180 or -180 by rounding, one meridian
    lon_difference = (other["lon"] - result["lon"] + 180.0) % 360.0 - 180.0
    np.testing.assert_allclose(lon_difference, 0.0, atol=1e-9)
    # compare variances, not spreads: sqrt would magnify rounding of a zero variance
    variance_scale = 1e-12 * (1.0 + np.abs(result["value_max"]) + np.abs(result["value_min"]))**2
    np.testing.assert_allclose(other["spread"] ** 2, result["spread"] ** 2, rtol=1e-9,
                               atol=variance_scale.max(), equal_nan=True)
    # the representative is the lowest value (score = value here), independent of the split
    thin = merged.finalize(mode="thin")
    np.testing.assert_array_equal(thin["value"], result["value_min"])
    picked = ["count", "value", "time", "lon", "lat", "depth", "error_instrument"]
    pd.testing.assert_frame_equal(thin[picked], reordered.finalize(mode="thin")[picked],
                                  check_exact=True)


# ----------------------------------------------------------------------------------------------
# numerical stability

def test_spread_is_exact_for_kelvin_values():
    rng = np.random.default_rng(6)
    offsets = 1e-3 * rng.normal(size=20_000)
    n = len(offsets)
    keys = {"cell": np.zeros(n, dtype=np.int64)}
    ones = np.ones(n)
    values = 273.15 + offsets
    single = Accumulator.from_observations(keys, values, ones, ones, ones, ones, ones)
    chunks = np.array_split(np.arange(n), 7)
    merged = Accumulator.merge([Accumulator.from_observations(
        {"cell": keys["cell"][rows]}, values[rows], ones[rows], ones[rows], ones[rows],
        ones[rows], ones[rows]) for rows in chunks])
    # Reference: np.std of the offsets themselves (no large offset, so exact to rounding);
    # storing 273.15 + offset rounds each value by <= 2.8e-14 K, i.e. ~3e-11 of the spread.
    expected = np.std(offsets, ddof=1)
    for accumulator in (single, merged):
        result = accumulator.finalize()
        assert result["spread"].iloc[0] == pytest.approx(expected, rel=1e-8)
        assert result["value"].iloc[0] == pytest.approx(273.15 + offsets.mean(), abs=1e-12)


def test_spread_and_mean_are_exact_for_epoch_seconds():
    rng = np.random.default_rng(7)
    offsets = rng.uniform(0.0, 5.0, 20_000)  # seconds
    n = len(offsets)
    seconds = 1.7e9 + offsets
    # The test has teeth: a naive sum of raw squares loses the spread entirely here
    # (x^2 ~ 3e18, one unit in the last place ~ 512 s^2 against a variance of ~2 s^2).
    naive = (np.sum(seconds**2) - np.sum(seconds) ** 2 / n) / (n - 1)
    assert abs(np.sqrt(abs(naive)) - np.std(offsets, ddof=1)) > 0.1
    keys = {"cell": np.zeros(n, dtype=np.int64)}
    ones = np.ones(n)
    chunks = np.array_split(np.arange(n), 5)
    parts = [Accumulator.from_observations({"cell": keys["cell"][rows]}, seconds[rows],
                                           ones[rows], seconds[rows], ones[rows], ones[rows],
                                           ones[rows]) for rows in chunks]
    result = Accumulator.merge(parts).finalize()
    # Reference: np.std / np.mean of the small offsets (exact); storing 1.7e9 + offset rounds
    # each value by <= 1.2e-7 s.
    assert result["spread"].iloc[0] == pytest.approx(np.std(offsets, ddof=1), rel=1e-6)
    assert result["value"].iloc[0] - 1.7e9 == pytest.approx(offsets.mean(), abs=1e-6)
    assert result["time"].iloc[0] - 1.7e9 == pytest.approx(offsets.mean(), abs=1e-6)


def test_spread_is_exact_for_groups_far_from_the_batch_mean():
    # One batch, two groups a million units apart: the batch is accumulated about one shift
    # (its mean), which is 5e5 from both groups.  A one-pass M2 about that shift would lose
    # every digit of the millimetre spread of group 1 (n (mean - shift)^2 ~ 2.5e14 n against
    # M2 ~ 1e-6 n); the accumulator must notice and use the two-pass sums for it.
    rng = np.random.default_rng(8)
    n = 5000
    cell = np.repeat(np.array([0, 1], dtype=np.int64), n)
    small = rng.normal(0.0, 1.0, n)
    far = 1e6 + 1e-3 * rng.normal(size=n)
    values = np.concatenate([small, far])
    ones = np.ones(2 * n)
    result = Accumulator.from_observations({"cell": cell}, values, ones, ones, ones, ones,
                                           ones).finalize()
    # Reference: np.std / np.mean of each group's own values (two-pass in numpy), and of the
    # offsets 1e-3 * normal for the far group (storing 1e6 + x rounds x by <= 1.2e-10).
    assert result["spread"].iloc[0] == pytest.approx(np.std(small, ddof=1), rel=1e-12)
    assert result["spread"].iloc[1] == pytest.approx(np.std(far - 1e6, ddof=1), rel=1e-6)
    assert result["value"].iloc[1] - 1e6 == pytest.approx(np.mean(far - 1e6), abs=1e-9)


# ----------------------------------------------------------------------------------------------
# positions on the sphere

def normalised_mean_unit_vector(lon, lat):
    """Direct numpy reference: mean of Cartesian unit vectors, normalised, back to degrees."""
    lon, lat = np.radians(lon), np.radians(lat)
    vector = np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)]).mean(1)
    vector /= np.linalg.norm(vector)
    return np.degrees(np.arctan2(vector[1], vector[0])), np.degrees(np.arcsin(vector[2]))


def angular_difference(a, b):
    return np.abs((np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0)


def test_mean_across_the_dateline():
    lon, lat = np.array([179.9, -179.9]), np.array([10.0, 10.0])
    mean_lon, mean_lat = mean_position(*[np.sum(c) for c in unit_vectors(lon, lat)])
    assert angular_difference(mean_lon, 180.0) < 1e-9  # not 0, the arithmetic mean
    assert -180.0 <= mean_lon <= 180.0
    ref_lon, ref_lat = normalised_mean_unit_vector(lon, lat)  # reference: direct numpy
    assert angular_difference(mean_lon, ref_lon) < 1e-9
    assert mean_lat == pytest.approx(ref_lat, abs=1e-9)


def test_mean_of_two_points_is_the_great_circle_midpoint():
    # Reference: pyproj.Geod on a sphere (GeographicLib, [Karney2013]): half-way along the
    # geodesic equals the direction of the summed unit vectors.
    pyproj = pytest.importorskip("pyproj")
    sphere = pyproj.Geod(a=6_371_000.0, b=6_371_000.0)
    rng = np.random.default_rng(8)
    lon1, lon2 = rng.uniform(-180, 180, 50), rng.uniform(-180, 180, 50)
    lat1, lat2 = rng.uniform(-89.9, 89.9, 50), rng.uniform(-89.9, 89.9, 50)
    lon1[:3], lon2[:3] = [179.95, -179.5, 170.0], [-179.95, 179.5, -170.0]  # across dateline
    lat1[3:5], lat2[3:5] = [89.99, -89.9], [89.95, -89.99]  # near the poles
    azimuth, _, distance = sphere.inv(lon1, lat1, lon2, lat2)
    mid_lon, mid_lat, _ = sphere.fwd(lon1, lat1, azimuth, distance / 2)
    x1, y1, z1 = unit_vectors(lon1, lat1)
    x2, y2, z2 = unit_vectors(lon2, lat2)
    lon, lat = mean_position(x1 + x2, y1 + y2, z1 + z2)
    np.testing.assert_allclose(lat, mid_lat, atol=1e-8)
    # longitude is ill-defined at the pole: compare the position error in degrees of arc
    assert (angular_difference(lon, mid_lon) * np.cos(np.radians(lat)) < 1e-8).all()


def test_unit_vectors_equal_the_textbook_formula():
    # Reference: x = cos(lat) cos(lon), y = cos(lat) sin(lon), z = sin(lat) with numpy's sin
    # and cos (spherical to Cartesian coordinates); obsprep uses the tangent half-angle
    # identities, which must agree to a few units in the last place, at any longitude range
    # (no wrapping), at the dateline and at the poles.
    rng = np.random.default_rng(21)
    lon = np.concatenate([rng.uniform(-720.0, 720.0, 100_000),
                          [180.0, -180.0, 540.0, 0.0, 90.0, -90.0, 359.999999, 1e-12]])
    lat = np.concatenate([rng.uniform(-90.0, 90.0, 100_000),
                          [90.0, -90.0, 0.0, 45.0, -45.0, 89.999999, -89.999999, 0.0]])
    x, y, z = unit_vectors(lon, lat)
    lon_rad, lat_rad = np.radians(lon), np.radians(lat)
    np.testing.assert_allclose(x, np.cos(lat_rad) * np.cos(lon_rad), rtol=0, atol=2e-15)
    np.testing.assert_allclose(y, np.cos(lat_rad) * np.sin(lon_rad), rtol=0, atol=2e-15)
    np.testing.assert_allclose(z, np.sin(lat_rad), rtol=0, atol=2e-15)


def test_mean_near_the_pole():
    rng = np.random.default_rng(9)
    lon = rng.uniform(-180.0, 180.0, 200)
    lat = rng.uniform(89.8, 90.0, 200)
    x, y, z = unit_vectors(lon, lat)
    mean_lon, mean_lat = mean_position(x.sum(), y.sum(), z.sum())
    ref_lon, ref_lat = normalised_mean_unit_vector(lon, lat)  # reference: direct numpy
    # arcsin in the reference loses accuracy near 90 degrees: ~sqrt(eps) rad ~ 1e-6 degrees
    assert mean_lat == pytest.approx(ref_lat, abs=1e-6)
    assert angular_difference(mean_lon, ref_lon) * np.cos(np.radians(mean_lat)) < 1e-6
    assert mean_lat > 89.8  # the arithmetic mean of the same latitudes bounds it from below
    # exactly at the pole from several longitudes: latitude 90 (symmetry)
    x, y, z = unit_vectors([0.0, 90.0, 180.0, -90.0], [90.0] * 4)
    assert mean_position(x.sum(), y.sum(), z.sum())[1] == pytest.approx(90.0, abs=1e-12)


def test_mean_position_of_cancelling_vectors_is_undefined():
    lon, lat = mean_position(np.array([0.0, 1.0]), np.array([0.0, 0.0]), np.array([0.0, 0.0]))
    assert np.isnan(lon[0]) and np.isnan(lat[0])
    assert lon[1] == 0.0 and lat[1] == 0.0


def test_accumulator_positions_use_the_spherical_mean():
    lon = np.array([179.9, -179.9, 179.8, 10.0, 12.0])
    lat = np.array([-60.0, -60.0, -60.2, 89.9, 89.9])
    keys = {"cell": np.array([0, 0, 0, 1, 1], dtype=np.int64)}
    ones = np.ones(5)
    result = Accumulator.from_observations(keys, ones, ones, ones, lon, lat, ones).finalize()
    for cell, rows in ((0, slice(0, 3)), (1, slice(3, 5))):
        ref_lon, ref_lat = normalised_mean_unit_vector(lon[rows], lat[rows])  # direct numpy
        assert angular_difference(result["lon"].iloc[cell], ref_lon) < 1e-9
        assert result["lat"].iloc[cell] == pytest.approx(ref_lat, abs=1e-9)
    assert ((result["lon"] >= -180.0) & (result["lon"] <= 180.0)).all()


# ----------------------------------------------------------------------------------------------
# thinning

def test_thinning_picks_lowest_score_then_lowest_tiebreak():
    # scores 3, 1, 1, 2: rows 1 and 2 tie; tiebreaks 7 and 5, so row 2 wins
    keys = {"cell": np.zeros(4, dtype=np.int64)}
    value = np.array([10.0, 11.0, 12.0, 13.0])
    error = np.array([0.1, 0.2, 0.3, 0.4])
    time = np.array([-60.0, 0.0, 60.0, 120.0])
    lon, lat, depth = np.array([1.0, 2, 3, 4]), np.array([50.0, 51, 52, 53]), np.array([0.0, 5, 10, 15])
    score = np.array([3.0, 1.0, 1.0, 2.0])
    tiebreak = np.array([0, 7, 5, 1], dtype=np.int64)
    accumulator = Accumulator.from_observations(keys, value, error, time, lon, lat, depth,
                                                score=score, tiebreak=tiebreak)
    thin = accumulator.finalize(mode="thin", representation_error=0.4)
    row = thin.iloc[0]
    assert row["count"] == 4  # still the number of raw observations in the cell
    assert (row["value"], row["time"], row["lon"], row["lat"], row["depth"],
            row["error_instrument"]) == (12.0, 60.0, 3.0, 52.0, 10.0, 0.3)
    assert row["error"] == pytest.approx(0.5, rel=1e-15)  # 3-4-5 in quadrature (textbook)
    # the same pick whatever the split and the merge order
    for split in ([[0, 1], [2, 3]], [[2], [0, 3], [1]], [[3, 2], [1, 0]]):
        for order in (1, -1):
            parts = [Accumulator.from_observations(
                {"cell": keys["cell"][rows]}, value[rows], error[rows], time[rows], lon[rows],
                lat[rows], depth[rows], score=score[rows], tiebreak=tiebreak[rows])
                for rows in split[::order]]
            assert Accumulator.merge(parts).finalize(mode="thin")["value"].iloc[0] == 12.0


def test_thinning_matches_pandas_sort_and_first():
    rng = np.random.default_rng(10)
    data = random_observations(rng, 3000)
    thin = accumulate(data).finalize(mode="thin")
    names = list(data["keys"])
    frame = pd.DataFrame({**data["keys"], "score": data["score"], "tiebreak": data["tiebreak"],
                          "value": data["value"], "time": data["time"]})
    # Reference: pandas sort by (keys, score, tiebreak) and take the first row of each group.
    reference = (frame.sort_values(names + ["score", "tiebreak"]).groupby(names, sort=True)
                 .first().reset_index())
    np.testing.assert_array_equal(thin["value"], reference["value"])
    np.testing.assert_array_equal(thin["time"], reference["time"])


def test_thinning_without_tiebreak_takes_the_first_row():
    keys = {"cell": np.zeros(3, dtype=np.int64)}
    value = np.array([1.0, 2.0, 3.0])
    ones = np.ones(3)
    accumulator = Accumulator.from_observations(keys, value, ones, ones, ones, ones, ones,
                                                score=np.array([5.0, 1.0, 1.0]))
    assert accumulator.finalize(mode="thin")["value"].iloc[0] == 2.0


# ----------------------------------------------------------------------------------------------
# finalize: errors

def test_finalize_errors_correlation_representation_and_floor():
    # 4 observations of sigma 0.5 with rho 0.3: sigma sqrt([1 + 3 rho]/4) (textbook).
    keys = {"cell": np.array([0, 0, 0, 0, 1, 1], dtype=np.int64)}
    value = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 5.0])
    error = np.array([0.5, 0.5, 0.5, 0.5, 0.2, 0.2])
    ones = np.ones(6)
    accumulator = Accumulator.from_observations(keys, value, error, ones, ones, ones, ones)
    result = accumulator.finalize(correlation=np.array([0.3, 0.0]),
                                  representation_error=np.array([0.2, 0.0]),
                                  floor=np.array([0.0, 0.5]))
    instrument = 0.5 * np.sqrt((1 + 3 * 0.3) / 4)
    np.testing.assert_allclose(result["error_instrument"], [instrument, 0.2 / np.sqrt(2)],
                               rtol=1e-14)
    np.testing.assert_allclose(result["error"], [np.hypot(instrument, 0.2), 0.5], rtol=1e-14)
    np.testing.assert_array_equal(result["error_representation"], [0.2, 0.0])
    # sample standard deviation with ddof = 1 (reference: numpy)
    assert result["spread"].iloc[0] == pytest.approx(np.std([1.0, 2, 3, 4], ddof=1), rel=1e-14)
    assert result["spread"].iloc[1] == 0.0
    assert list(result.columns) == ["cell"] + STAT_COLUMNS


def test_finalize_columns_and_single_observation_spread():
    ones = np.ones(1)
    result = Accumulator.from_observations({"q": np.array([2]), "i": np.array([7])}, ones * 3,
                                           ones, ones, ones, ones, ones).finalize()
    assert list(result.columns) == ["q", "i"] + STAT_COLUMNS
    assert np.isnan(result["spread"].iloc[0])
    assert result["count"].dtype == np.int64 and result["q"].dtype == np.int64


def test_keys_and_n_groups_are_exposed_before_finalize():
    keys = {"q": np.array([1, 0, 1, 0], dtype=np.int64), "i": np.array([5, 5, 3, 5])}
    ones = np.ones(4)
    accumulator = Accumulator.from_observations(keys, ones, ones, ones, ones, ones, ones)
    assert accumulator.n_groups == 3
    np.testing.assert_array_equal(accumulator.keys["q"], [0, 1, 1])
    np.testing.assert_array_equal(accumulator.keys["i"], [5, 3, 5])
    np.testing.assert_array_equal(accumulator.count, [2, 1, 1])
    with pytest.raises(ValueError):  # state is read-only
        accumulator.count[0] = 9


# ----------------------------------------------------------------------------------------------
# bad input

def test_bad_input_gives_clear_errors():
    ones = np.ones(3)
    keys = {"cell": np.zeros(3, dtype=np.int64)}
    with pytest.raises(ValueError, match="'error' must be finite and > 0.*index 1"):
        Accumulator.from_observations(keys, ones, np.array([1.0, 0.0, 1.0]), ones, ones, ones, ones)
    with pytest.raises(ValueError, match="'value' must be finite.*index 2"):
        Accumulator.from_observations(keys, np.array([1.0, 1.0, np.nan]), ones, ones, ones, ones,
                                      ones)
    with pytest.raises(ValueError, match="'lat'"):
        Accumulator.from_observations(keys, ones, ones, ones, ones, ones * 91, ones)
    with pytest.raises(ValueError, match="'time' has shape"):
        Accumulator.from_observations(keys, ones, ones, np.ones(2), ones, ones, ones)
    with pytest.raises(ValueError, match="key 'b' has length 2"):
        Accumulator.from_observations({"a": np.zeros(3, int), "b": np.zeros(2, int)}, ones, ones,
                                      ones, ones, ones, ones)
    with pytest.raises(TypeError, match="key 'a' must hold integers"):
        Accumulator.from_observations({"a": np.zeros(3)}, ones, ones, ones, ones, ones, ones)
    with pytest.raises(ValueError, match="output columns"):
        Accumulator.from_observations({"count": np.zeros(3, int)}, ones, ones, ones, ones, ones,
                                      ones)
    with pytest.raises(ValueError, match="'tiebreak' given without 'score'"):
        Accumulator.from_observations(keys, ones, ones, ones, ones, ones, ones,
                                      tiebreak=np.zeros(3, int))
    plain = Accumulator.from_observations(keys, ones, ones, ones, ones, ones, ones)
    with pytest.raises(ValueError, match="mode 'thin' needs a thinning score"):
        plain.finalize(mode="thin")
    with pytest.raises(ValueError, match="mode must be one of"):
        plain.finalize(mode="median")
    with pytest.raises(ValueError, match="'correlation' must be a scalar or an array"):
        plain.finalize(correlation=np.zeros(5))
    with pytest.raises(ValueError, match="'floor' must be within"):
        plain.finalize(floor=-1.0)


def test_merge_refuses_mismatched_accumulators():
    ones = np.ones(2)
    a = Accumulator.from_observations({"i": np.zeros(2, int)}, ones, ones, ones, ones, ones, ones)
    b = Accumulator.from_observations({"j": np.zeros(2, int)}, ones, ones, ones, ones, ones, ones)
    c = Accumulator.from_observations({"i": np.zeros(2, int)}, ones, ones, ones, ones, ones, ones,
                                      score=ones)
    with pytest.raises(ValueError, match=r"item 1 has keys \['j'\], expected \['i'\]"):
        Accumulator.merge([a, b])
    with pytest.raises(ValueError, match="thinning representative"):
        Accumulator.merge([a, c])
    with pytest.raises(ValueError, match="at least one"):
        Accumulator.merge([])
    with pytest.raises(TypeError, match="item 1 is a dict"):
        Accumulator.merge([a, {}])


def test_empty_batches():
    empty = np.zeros(0)
    keys = {"i": np.zeros(0, dtype=np.int64)}
    nothing = Accumulator.from_observations(keys, empty, empty, empty, empty, empty, empty,
                                            score=empty)
    assert nothing.n_groups == 0
    assert len(nothing.finalize()) == 0 and len(nothing.finalize(mode="thin")) == 0
    ones = np.ones(2)
    some = Accumulator.from_observations({"i": np.array([0, 0])}, ones, ones, ones, ones, ones,
                                         ones)
    # an empty batch merges with any other, with or without a representative
    assert Accumulator.merge([nothing, some, nothing]).finalize()["count"].tolist() == [2]
    assert Accumulator.merge([nothing, nothing]).n_groups == 0


# ----------------------------------------------------------------------------------------------
# property-based: any grouping of merges

def _merge_in_tree(parts, shape):
    """Merge ``parts`` (in order) following ``shape``: a list of cut positions per level."""
    level = list(parts)
    for cut in shape:
        if len(level) < 2:
            break
        at = 1 + cut % (len(level) - 1)
        level = [Accumulator.merge(level[:at])] + level[at:]
        level = level[:1] + ([Accumulator.merge(level[1:])] if len(level) > 2 else level[1:])
    return Accumulator.merge(level)


merge_trees = st.integers(min_value=1, max_value=80).flatmap(
    lambda n: st.tuples(
        st.lists(st.integers(0, 4), min_size=n, max_size=n),           # key a
        st.lists(st.floats(-50.0, 50.0, allow_nan=False), min_size=n, max_size=n),  # values
        st.lists(st.floats(0.05, 5.0), min_size=n, max_size=n),        # errors
        st.lists(st.integers(0, n), min_size=0, max_size=7),            # cuts into parts
        st.lists(st.integers(0, 1000), min_size=0, max_size=6),         # tree shape
        st.booleans(),                                                  # wide keys (sort path)
        st.randoms(use_true_random=False),
    ))


@settings(max_examples=60, deadline=None)
@given(merge_trees)
def test_properties_any_grouping_of_merges_matches_one_batch(args):
    key_a, values, errors, cuts, shape, wide, random = args
    n = len(values)
    a = np.array(key_a, dtype=np.int64)
    # wide keys leave the direct-index range and take the sorting path of the grouping
    a = a * np.int64(10**15) if wide else a
    data = dict(keys={"a": a, "b": np.arange(n, dtype=np.int64) % 2},
                value=273.15 + np.array(values), error=np.array(errors),
                time=np.linspace(-3600.0, 0.0, n), lon=np.linspace(-179.5, 179.5, n),
                lat=np.linspace(-85.0, 85.0, n), depth=np.linspace(0.0, 100.0, n),
                score=np.array(errors), tiebreak=np.arange(n, dtype=np.int64))
    chunks = np.split(np.arange(n), sorted(cuts))
    parts = [accumulate(subset(data, rows)) for rows in chunks]
    random.shuffle(parts)  # any order ...
    merged = _merge_in_tree(parts, shape)  # ... and any grouping
    whole = accumulate(data)
    # Reference: the same observations accumulated in one batch; counts and extremes exact
    for name in ("count", "value_min", "value_max"):
        np.testing.assert_array_equal(merged.state[name], whole.state[name], err_msg=name)
    assert merged.count.sum() == n  # conserved
    for mode in ("mean", "weighted"):
        got, expected = merged.finalize(mode=mode), whole.finalize(mode=mode)
        for column in ("value", "time", "lon", "lat", "depth", "error_instrument"):
            np.testing.assert_allclose(got[column], expected[column], rtol=1e-9, atol=1e-9,
                                       err_msg=f"{mode} {column}")
        # a mean lies within [min, max] up to a few units in the last place of 273 K
        assert (got["value"] >= got["value_min"] - 1e-10).all()
        assert (got["value"] <= got["value_max"] + 1e-10).all()
    variance = merged.finalize()["spread"] ** 2
    np.testing.assert_allclose(variance, whole.finalize()["spread"] ** 2, rtol=1e-8, atol=1e-9,
                               equal_nan=True)
    # the thinning representative is the same raw observation whatever the grouping
    picked = ["count", "value", "time", "lon", "lat", "depth", "error_instrument"]
    pd.testing.assert_frame_equal(merged.finalize(mode="thin")[picked],
                                  whole.finalize(mode="thin")[picked], check_exact=True)
