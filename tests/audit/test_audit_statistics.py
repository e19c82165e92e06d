"""Audit statistics on synthetic data of known errors: collocation of pairs, triple collocation
([Stoffelen1998], J. Geophys. Res. 103(C4), 7755-7766), the innovation identities of Desroziers
et al. (2005, Q. J. R. Meteorol. Soc. 131, 3385-3396), the raw-noise check, the ensemble-mean
error term and the estimate of what to configure.

Synthetic data are numpy Monte Carlo draws; each estimate is compared with the known value
within a stated number of its own standard errors (3 unless said otherwise), and the analytic
standard errors themselves against the Monte Carlo scatter of repeated estimates.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from obsprep.audit.collocation import collocation_table, pair_statistics, visible_error
from obsprep.audit.configure import estimate_correlation_and_representation
from obsprep.audit.innovations import innovation_statistics
from obsprep.audit.noise import raw_noise_check
from obsprep.audit.triple import triple_collocation, triple_collocation_table
from obsprep.audit.uncertainty import Blocks

ERRORS = (0.2, 0.4, 0.6)   # the check of the issue: three sensors of these errors


def three_sensors(rng, n, errors=ERRORS, biases=(0.0, 0.0, 0.0)):
    truth = rng.normal(10.0, 1.5, n)
    return truth, [truth + b + s * rng.standard_normal(n) for s, b in zip(errors, biases)]


def test_triple_collocation_recovers_known_errors_within_their_uncertainty():
    rng = np.random.default_rng(1998)
    _, x = three_sensors(rng, 20000)
    result = triple_collocation(*x)
    for k, sigma in enumerate(ERRORS):
        assert abs(result["sigma"][k] - sigma) < 3.0 * result["sigma_se"][k], (k, result)
        assert result["sigma_se"][k] < 0.05 * sigma       # and the estimate is informative


def test_triple_collocation_ignores_constant_biases():
    # the covariance form removes additive calibration offsets (means are subtracted)
    rng = np.random.default_rng(7)
    _, x = three_sensors(rng, 20000, biases=(0.0, 0.8, -1.5))
    result = triple_collocation(*x)
    for k, sigma in enumerate(ERRORS):
        assert abs(result["sigma"][k] - sigma) < 3.0 * result["sigma_se"][k]


def test_triple_collocation_standard_error_matches_the_monte_carlo_scatter():
    # the analytic standard error of the covariance estimate against the scatter of 300
    # independent estimates (the sample std of 300 draws is known to about 4 %, 1/sqrt(2*299))
    rng = np.random.default_rng(42)
    estimates, standard_errors = [], []
    for _ in range(300):
        _, x = three_sensors(rng, 1500)
        result = triple_collocation(*x)
        estimates.append(result["variance"])
        standard_errors.append(result["variance_se"])
    scatter = np.std(estimates, axis=0, ddof=1)
    predicted = np.mean(standard_errors, axis=0)
    np.testing.assert_allclose(predicted, scatter, rtol=0.15)
    # and the estimates are unbiased: their mean within 4 standard errors of sigma^2
    mean = np.mean(estimates, axis=0)
    assert np.all(np.abs(mean - np.square(ERRORS)) < 4.0 * scatter / np.sqrt(300))


def independent_blocks(n):
    """Blocks of n super-observations in n distinct cells far apart (independent)."""
    return Blocks(np.arange(n, dtype=np.int64) * 10, np.zeros(n, dtype=np.int64),
                  np.zeros(n, dtype=np.int64))


def test_pair_collocation_variance_of_differences():
    rng = np.random.default_rng(2)
    truth, (a, b, _) = three_sensors(rng, 5000)
    blocks = independent_blocks(a.size)
    stats = pair_statistics(a, b, np.full(a.size, 0.2), np.full(b.size, 0.4), blocks)
    # var(a - b) = 0.2^2 + 0.4^2 for independent errors (textbook); for Gaussian differences
    # the standard error of the ratio is ratio sqrt(2 / (n - 1)) (textbook)
    assert stats["expected_var"] == pytest.approx(0.2)
    assert abs(stats["ratio"] - 1.0) < 3.0 * stats["ratio_se"]
    assert stats["ratio_se"] == pytest.approx(stats["ratio"] * np.sqrt(2.0 / 4999), rel=0.1)
    wrong = pair_statistics(a, b, np.full(a.size, 0.1), np.full(b.size, 0.2), blocks)
    assert wrong["ratio"] - 1.0 > 10.0 * wrong["ratio_se"]         # 4x too small: obvious


def synthetic_superobs(rng, n_cells=3000):
    """Super-observation table of three SST sensors of errors 0.2, 0.4, 0.6 that overlap in most
    cells, and one with no partner."""
    rows = []
    truth = rng.normal(0.0, 1.0, n_cells)
    for sensor, sigma, share in (("a", 0.2, 1.0), ("b", 0.4, 0.9), ("c", 0.6, 0.8)):
        cells = np.flatnonzero(rng.random(n_cells) < share)
        rows.append(pd.DataFrame({
            "quantity": "sea_surface_temperature", "sensor": sensor, "slot": cells % 3,
            "j": cells // 60, "i": cells % 60, "k": 0, "count": 1,
            "time": np.datetime64("2026-11-20T12:00", "ns"),
            "time_end": np.datetime64("NaT", "ns"),
            "value": truth[cells] + sigma * rng.standard_normal(cells.size),
            "error": np.full(cells.size, sigma)}))
    return pd.concat(rows, ignore_index=True)


def test_collocation_tables_from_super_observations():
    rng = np.random.default_rng(3)
    superobs = synthetic_superobs(rng)
    triple, estimates = triple_collocation_table(superobs)
    assert list(triple["sensor"]) == ["a", "b", "c"]
    for _, row in triple.iterrows():   # F^2 = 1 for the right errors, within 3 standard errors
        assert abs(row["factor_sq"] - 1.0) < 3.0 * row["factor_sq_se"], row
        assert abs(row["ratio"] - 1.0) < 3.0 * row["ratio_se"], row
        assert row["n"] == pytest.approx(3000 * 0.9 * 0.8, rel=0.05)
    assert set(estimates) == {("a", "sea_surface_temperature"), ("b", "sea_surface_temperature"),
                              ("c", "sea_surface_temperature")}
    pairs = collocation_table(superobs)
    assert len(pairs) == 3
    assert (np.abs(pairs["ratio"] - 1.0) < 3.0 * pairs["ratio_se"]).all()


def test_triple_collocation_sees_only_the_visible_error():
    """A representation error common to the three sensors (the same in each cell) cancels in
    the differences: triple collocation finds the instrument part, and against the visible
    part of the assigned error F^2 = 1 (against the whole error it would say "too large")."""
    rng = np.random.default_rng(11)
    n, representation = 6000, 0.5
    truth = rng.normal(0.0, 1.0, n)
    common = representation * rng.standard_normal(n)
    rows = []
    for sensor, sigma in (("a", 0.2), ("b", 0.4), ("c", 0.6)):
        total = np.sqrt(sigma ** 2 + representation ** 2)
        rows.append(pd.DataFrame({
            "quantity": "sea_surface_temperature", "sensor": sensor, "slot": 0,
            "j": np.arange(n) // 100, "i": np.arange(n) % 100, "k": 0, "count": 1,
            "time": np.datetime64("2026-11-20T12:00", "ns"), "time_end": np.datetime64("NaT", "ns"),
            "value": truth + common + sigma * rng.standard_normal(n), "error": total,
            "visible_error": visible_error(np.full(n, total), np.full(n, representation), True)}))
    triple, _ = triple_collocation_table(pd.concat(rows, ignore_index=True))
    for _, row in triple.iterrows():
        assert abs(row["factor_sq"] - 1.0) < 3.0 * row["factor_sq_se"], row


def test_desroziers_innovation_identities_hold_on_synthetic_data():
    """y = x_t + eps (sigma_o 0.3), x_b = x_t + b (sigma_b 0.5); d = y - x_b has
    E[d^2] = sigma_o^2 + sigma_b^2, and with the optimal scalar analysis
    x_a = x_b + K d, K = sigma_b^2 / (sigma_b^2 + sigma_o^2), E[(y - x_a) d] = sigma_o^2."""
    rng = np.random.default_rng(2005)
    n, sigma_o, sigma_b, members = 50000, 0.3, 0.5, 20
    truth = rng.normal(0.0, 2.0, n)
    y = truth + sigma_o * rng.standard_normal(n)
    background = truth + sigma_b * rng.standard_normal(n)
    d = y - background
    gain = sigma_b**2 / (sigma_b**2 + sigma_o**2)
    d_analysis = y - (background + gain * d)
    # the identities themselves, with the Monte Carlo standard errors of the means
    for sample, expected in ((d * d, sigma_o**2 + sigma_b**2), (d_analysis * d, sigma_o**2)):
        assert abs(sample.mean() - expected) < 4.0 * sample.std() / np.sqrt(n)
    # an ensemble whose mean has error variance sigma_b^2 has variance sigma_b^2 / (1 + 1/N)
    ensemble_variance = np.full(n, sigma_b**2 / (1.0 + 1.0 / members))
    blocks = independent_blocks(n)
    stats = innovation_statistics(d, np.full(n, sigma_o), blocks, ensemble_variance, members,
                                  d_analysis)
    assert abs(stats["ratio"] - 1.0) < 0.03
    assert abs(stats["factor_sq"] - 1.0) < 3.0 * stats["factor_sq_se"]
    assert abs(stats["desroziers_sq"] - 1.0) < 3.0 * stats["desroziers_sq_se"]
    # assigned errors half the true ones: F^2 = 4
    half = innovation_statistics(d, np.full(n, sigma_o / 2), blocks, ensemble_variance, members)
    assert abs(half["factor_sq"] - 4.0) < 3.0 * half["factor_sq_se"]
    assert half["sensitivity"] == pytest.approx(0.0225 / (0.0225 + 0.25))
    # a single background: only an upper bound, var d / sigma_o^2 >= 1
    single = innovation_statistics(d, np.full(n, sigma_o), blocks)
    assert np.isnan(single["factor_sq"]) and single["upper_sq"] > 1.0


def test_ensemble_mean_error_is_one_plus_one_over_n_times_the_spread():
    """Truth and N members exchangeable (iid around a common mean): E[(mean - truth)^2] =
    (1 + 1/N) E[sample variance] (numpy Monte Carlo; the audit's background term)."""
    from obsprep.audit.innovations import ensemble_mean_error_factor

    rng = np.random.default_rng(1988)
    for members in (5, 20, 40):
        draws = rng.standard_normal((200000, members + 1))
        truth, ensemble = draws[:, 0], draws[:, 1:]
        error2 = (ensemble.mean(axis=1) - truth) ** 2
        ratio = error2.mean() / ensemble.var(axis=1, ddof=1).mean()
        se = error2.std() / np.sqrt(error2.size) / ensemble.var(axis=1, ddof=1).mean()
        assert abs(ratio - ensemble_mean_error_factor(members)) < 4.0 * se, members


def correlated_innovations(rng, side, length_cells, sigma=1.0):
    """Innovations on a side x side grid: a smooth Gaussian field of unit variance and
    correlation length ``length_cells`` (white noise filtered by a Gaussian kernel, scaled to
    unit variance) plus independent noise of variance 1, and the Blocks of its cells."""
    from scipy import ndimage

    field = ndimage.gaussian_filter(rng.standard_normal((side, side)), length_cells, mode="wrap")
    impulse = np.zeros((side, side))
    impulse[side // 2, side // 2] = 1.0          # the variance of filtered white noise is the
    kernel = ndimage.gaussian_filter(impulse, length_cells, mode="wrap")   # sum of squared weights
    field /= np.sqrt(np.sum(kernel * kernel))
    j, i = np.divmod(np.arange(side * side), side)
    d = sigma * (field.ravel() + rng.standard_normal(side * side))
    return d, Blocks(i.astype(np.int64), j.astype(np.int64), np.zeros(side * side, dtype=np.int64))


def test_block_standard_error_matches_the_scatter_of_correlated_estimates():
    """With spatially correlated innovations the naive standard error (independent values) is
    far too small; the block standard error, extrapolated where it still grows at the largest
    blocks the domain allows, comes within 25 % of the Monte Carlo scatter of the estimate over
    repeated fields (numpy Monte Carlo, 150 fields: the scatter is known to 6 %)."""
    from obsprep.audit.uncertainty import blocked_ratio

    rng = np.random.default_rng(1989)
    side, length = 64, 3.0
    values, block_se, naive_se, levelled = [], [], [], []
    for _ in range(150):
        d, blocks = correlated_innovations(rng, side, length)
        centred = d * d                                     # the mean is known: 0
        estimate = blocked_ratio(centred, np.ones(d.size), blocks)
        values.append(estimate.value)
        block_se.append(estimate.se)
        levelled.append(estimate.levelled)
        naive_se.append(np.std(centred, ddof=1) / np.sqrt(d.size))
    scatter = np.std(values, ddof=1)
    assert np.median(naive_se) < 0.5 * scatter              # independence would mislead
    assert 0.75 * scatter < np.median(block_se) < 1.5 * scatter
    # the field correlates over a good part of the 64-cell domain: the blocks say so
    assert np.mean(levelled) < 0.5


def test_raw_noise_check_removes_the_correlated_part_and_is_one_sided():
    rng = np.random.default_rng(9)
    groups, n, sigma, rho = 4000, 5, 0.3, 0.25
    shared = rng.standard_normal((groups, 1))
    errors = sigma * (np.sqrt(rho) * shared + np.sqrt(1 - rho) * rng.standard_normal((groups, n)))
    frame = pd.DataFrame({"count": n, "spread": errors.std(axis=1, ddof=1),
                          "spread_detrended": np.nan, "error_raw_rms": sigma,
                          "i": np.arange(groups) * 3, "j": 0,
                          "time": np.datetime64("2026-11-20T12:00", "ns")})
    check = raw_noise_check(frame, "sea_level_anomaly", correlation=rho)
    # E[s^2] = sigma^2 (1 - rho) for equicorrelated errors (textbook): the ratio is 1
    assert check["noise_ratio_low"] <= 1.0 <= check["noise_ratio_high"]
    assert check["noise_check"] == "consistent" and check["noise_dof"] == groups * (n - 1)
    frame["error_raw_rms"] = sigma / 2                          # understated noise
    doubled = raw_noise_check(frame, "sea_level_anomaly", correlation=rho)
    assert doubled["noise_ratio"] == pytest.approx(2.0 * check["noise_ratio"])
    assert doubled["noise_check"] == "spread_exceeds_noise"
    frame["error_raw_rms"] = sigma * 2                          # overstated noise
    assert raw_noise_check(frame, "sea_level_anomaly", correlation=rho)["noise_check"] == "overstated"


def superobs_with_innovations(rng, m=6000, members=20, sigma=0.4, rho=0.3, representation=0.2,
                              spread=0.1, counts=(1, 41)):
    """Super-observations of n raw values (uniform in ``counts``) with within-group correlation
    rho, raw error sigma, a representation error and an ensemble-mean background error of
    variance (1 + 1/N) spread^2: innovations d drawn with numpy."""
    n = rng.integers(counts[0], counts[1], m)
    error_of_mean = sigma * np.sqrt((1.0 + (n - 1) * rho) / n)
    background = spread * np.sqrt(1.0 + 1.0 / members) * rng.standard_normal(m)
    d = error_of_mean * rng.standard_normal(m) + representation * rng.standard_normal(m) - background
    return pd.DataFrame({"innovation": d, "model_variance": spread ** 2, "error_raw_rms": sigma,
                         "count": n, "i": np.arange(m) * 3, "j": 0,
                         "time": np.datetime64("2026-11-20T12:00", "ns")})


def test_correlation_and_representation_are_estimated_from_the_innovations():
    """The fit of var(d) against n (numpy Monte Carlo, 30 samples of 6000 super-observations
    of 1..40 raw values, rho = 0.3, sigma_r = 0.2): unbiased within 3 standard errors of the
    mean of the 30 estimates, and its block standard error within a factor 1.5 of their
    scatter (known to 13 % from 30 samples)."""
    rng = np.random.default_rng(1977)
    found = [estimate_correlation_and_representation(superobs_with_innovations(rng), 20)
             for _ in range(30)]
    for key, truth in (("estimated_correlation", 0.3), ("estimated_representation_error", 0.2)):
        values = np.array([f[key] for f in found])
        standard_errors = np.array([f[f"{key}_se"] for f in found])
        scatter = values.std(ddof=1)
        assert abs(values.mean() - truth) < 3.0 * scatter / np.sqrt(values.size), key
        assert scatter / 1.5 < np.median(standard_errors) < 1.5 * scatter, key
    # without variation in n the two cannot be told apart, and the fit says so
    same = superobs_with_innovations(rng, counts=(10, 11))
    refused = estimate_correlation_and_representation(same, 20)
    assert np.isnan(refused["estimated_correlation"]) and "cannot be told apart" in refused["estimate_note"]


def evidence(name, value, se, blocks=100, kind="estimate", levelled=True):
    from obsprep.audit.uncertainty import BlockedEstimate
    from obsprep.audit.verdict import Evidence

    return Evidence(name, kind, BlockedEstimate(value, se, blocks, blocks - 1, 4, levelled, 1000))


def test_verdict_needs_agreement_and_enough_evidence():
    """The decision rules of obsprep.audit.verdict on constructed estimates of F^2: combined by
    inverse-variance weights (textbook), disagreement by Cochran's Q against chi-square
    (scipy.stats.chi2), flags only beyond the tolerance with 95 % confidence, ok only inside."""
    from scipy import stats as scipy_stats

    from obsprep.audit.verdict import decide

    agree = decide([evidence("innovations", 4.2, 0.3), evidence("triple", 3.8, 0.4)], 1.5)
    weights = np.array([1 / 0.3**2, 1 / 0.4**2])
    combined = np.sum(weights * [4.2, 3.8]) / weights.sum()
    assert agree["flag"] == "too_small" and agree["factor"] == pytest.approx(np.sqrt(combined))
    q = np.sum(weights * (np.array([4.2, 3.8]) - combined) ** 2)
    assert agree["agreement_p"] == pytest.approx(scipy_stats.chi2.sf(q, 1))
    # the same sensor seen as right by one estimate and as 2x too small by another: disagree
    split = decide([evidence("innovations", 1.0, 0.05), evidence("triple", 4.0, 0.3)], 1.5)
    assert split["flag"] == "inconclusive" and split["conclusion"] == "inconclusive: estimates disagree"
    assert "innovations" in split["reason"] and "triple" in split["reason"]
    # 2.2 +- 0.5 in F (F^2 4.84 +- 2.2) lies beyond the tolerance by more than its uncertainty
    # (4.84 - 2.2 > 1.5^2) and is wrong with 95 % confidence: too small, never "ok"
    assert decide([evidence("innovations", 4.84, 2.2)], 1.5)["flag"] == "too_small"
    # F^2 3.0 +- 1.5: beyond the tolerance, but not by more than its uncertainty
    weak = decide([evidence("innovations", 3.0, 1.5)], 1.5)
    assert weak["flag"] == "inconclusive" and "not enough evidence" in weak["conclusion"]
    # ok only where the whole 95 % interval is inside [1/1.5, 1.5]
    assert decide([evidence("innovations", 1.1, 0.1)], 1.5)["flag"] == "ok"
    assert decide([evidence("innovations", 1.1, 0.8)], 1.5)["flag"] == "inconclusive"
    # too large, the other way; a diagnostic never decides
    assert decide([evidence("innovations", 0.2, 0.05)], 1.5)["flag"] == "too_large"
    only_diagnostic = decide([evidence("one-step analysis residuals", 0.2, 0.01, kind="diagnostic")])
    assert only_diagnostic["flag"] == "no_evidence"
    # a single background: an upper bound shows errors too large, never too small or right
    assert decide([evidence("bound", 0.2, 0.02, kind="upper")])["flag"] == "too_large"
    assert decide([evidence("bound", 5.0, 0.02, kind="upper")])["flag"] == "inconclusive"
    # too few independent blocks: not used, and the reason says so
    thin = decide([evidence("innovations", 4.0, 0.1, blocks=5)])
    assert thin["flag"] == "no_evidence" and "fewer than" in thin["reason"]


def test_understated_sensor_with_small_sensitivity_is_still_flagged():
    """A sensor whose assigned error is 2.5 times too small has a small share of the innovation
    variance (sensitivity 0.05 here); it is judged, not dropped (numpy Monte Carlo)."""
    from obsprep.audit.verdict import Evidence, decide

    rng = np.random.default_rng(25)
    n, members, sigma_true, sigma_b = 3000, 20, 0.25, 0.4
    d = sigma_true * rng.standard_normal(n) + sigma_b * np.sqrt(1 + 1 / members) * rng.standard_normal(n)
    stats = innovation_statistics(d, np.full(n, sigma_true / 2.5), independent_blocks(n),
                                  np.full(n, sigma_b**2), members)
    assert stats["sensitivity"] < 0.1
    verdict = decide([Evidence("innovations", "estimate", stats["factor_estimate"])], 1.5)
    assert verdict["flag"] == "too_small"
    assert verdict["factor_low"] <= 2.5 <= verdict["factor_high"]
