"""Audit statistics on synthetic data of known errors: collocation of pairs, triple collocation
([Stoffelen1998], J. Geophys. Res. 103(C4), 7755-7766), the innovation identities of Desroziers
et al. (2005, Q. J. R. Meteorol. Soc. 131, 3385-3396), the spread test and the verdict.

Synthetic data are numpy Monte Carlo draws; each estimate is compared with the known value
within a stated number of its own standard errors (3 unless said otherwise), and the analytic
standard errors themselves against the Monte Carlo scatter of repeated estimates.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from obsprep.audit.collocation import collocation_table, pair_statistics
from obsprep.audit.innovations import innovation_statistics
from obsprep.audit.summary import spread_statistics, verdict
from obsprep.audit.triple import triple_collocation, triple_collocation_table

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


def test_pair_collocation_variance_of_differences():
    rng = np.random.default_rng(2)
    truth, (a, b, _) = three_sensors(rng, 5000)
    stats = pair_statistics(a, b, np.full(a.size, 0.2), np.full(b.size, 0.4))
    # var(a - b) = 0.2^2 + 0.4^2 for independent errors (textbook)
    assert stats["expected_var"] == pytest.approx(0.2)
    assert abs(stats["ratio"] - 1.0) < 3.0 * stats["ratio_se"]
    wrong = pair_statistics(a, b, np.full(a.size, 0.1), np.full(b.size, 0.2))
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
            "time_end": np.datetime64("NaT", "ns"),
            "value": truth[cells] + sigma * rng.standard_normal(cells.size),
            "error": np.full(cells.size, sigma)}))
    return pd.concat(rows, ignore_index=True)


def test_collocation_tables_from_super_observations():
    rng = np.random.default_rng(3)
    superobs = synthetic_superobs(rng)
    triple = triple_collocation_table(superobs)
    assert list(triple["sensor"]) == ["a", "b", "c"]
    for _, row in triple.iterrows():   # ratio to the assigned error 1 within 3 standard errors
        assert abs(row["ratio"] - 1.0) < 3.0 * row["ratio_se"], row
        assert row["n"] == pytest.approx(3000 * 0.9 * 0.8, rel=0.05)
    pairs = collocation_table(superobs)
    assert len(pairs) == 3
    assert (np.abs(pairs["ratio"] - 1.0) < 3.0 * pairs["ratio_se"]).all()


def test_desroziers_innovation_identities_hold_on_synthetic_data():
    """y = x_t + eps (sigma_o 0.3), x_b = x_t + b (sigma_b 0.5); d = y - x_b has
    E[d^2] = sigma_o^2 + sigma_b^2, and with the optimal scalar analysis
    x_a = x_b + K d, K = sigma_b^2 / (sigma_b^2 + sigma_o^2), E[(y - x_a) d] = sigma_o^2."""
    rng = np.random.default_rng(2005)
    n, sigma_o, sigma_b = 50000, 0.3, 0.5
    truth = rng.normal(0.0, 2.0, n)
    y = truth + sigma_o * rng.standard_normal(n)
    background = truth + sigma_b * rng.standard_normal(n)
    d = y - background
    gain = sigma_b**2 / (sigma_b**2 + sigma_o**2)
    d_analysis = y - (background + gain * d)
    # the identities themselves, with the Monte Carlo standard errors of the means
    for sample, expected in ((d * d, sigma_o**2 + sigma_b**2), (d_analysis * d, sigma_o**2)):
        assert abs(sample.mean() - expected) < 4.0 * sample.std() / np.sqrt(n)
    stats = innovation_statistics(d, np.full(n, sigma_o), np.full(n, sigma_b**2), d_analysis)
    assert abs(stats["ratio"] - 1.0) < 3.0 * stats["ratio_se"]
    assert abs(stats["factor"] - 1.0) < 3.0 * stats["factor_se"]
    assert stats["desroziers_factor"] == pytest.approx(1.0, abs=0.03)
    # assigned errors half the true ones: the suggested factor is 2
    half = innovation_statistics(d, np.full(n, sigma_o / 2), np.full(n, sigma_b**2))
    assert abs(half["factor"] - 2.0) < 3.0 * half["factor_se"]
    assert half["sensitivity"] == pytest.approx(0.0225 / (0.0225 + 0.25))
    # a single background: only an upper bound, sqrt(var d / sigma_o^2) >= 1
    single = innovation_statistics(d, np.full(n, sigma_o))
    assert np.isnan(single["factor"]) and single["factor_upper"] > 1.0


def test_spread_test_pools_groups_and_removes_the_correlated_part():
    rng = np.random.default_rng(9)
    groups, n, sigma, rho = 4000, 5, 0.3, 0.25
    shared = rng.standard_normal((groups, 1))
    errors = sigma * (np.sqrt(rho) * shared + np.sqrt(1 - rho) * rng.standard_normal((groups, n)))
    frame = pd.DataFrame({"count": n, "spread": errors.std(axis=1, ddof=1),
                          "spread_detrended": np.nan, "error_raw_rms": sigma})
    stats = spread_statistics(frame, "sea_level_anomaly", correlation=rho)
    # E[s^2] = sigma^2 (1 - rho) for equicorrelated errors: the ratio is 1
    assert abs(stats["spread_ratio"] - 1.0) < 3.0 * stats["spread_ratio_se"]
    assert stats["spread_dof"] == groups * (n - 1)
    frame["error_raw_rms"] = sigma / 2
    assert stats["spread_ratio"] * 2 == pytest.approx(
        spread_statistics(frame, "sea_level_anomaly", correlation=rho)["spread_ratio"])


def test_verdict_uses_the_most_precise_estimate_and_says_why():
    row = {"spread_dof": 5000, "spread_ratio": 2.02, "spread_ratio_se": 0.02,
           "innovation_n": 300, "innovation_factor": 1.2, "innovation_factor_se": 0.2,
           "innovation_ratio": 1.1, "innovation_sensitivity": 0.5}
    v = verdict(row, tolerance=1.5)
    assert v["flag"] == "too_small" and v["evidence"] == "spread"
    assert v["suggested_factor"] == 2.02 and "innovations" in v["reason"]
    row.update(spread_ratio=0.5, spread_ratio_se=0.01)
    assert verdict(row)["flag"] == "too_large"
    row.update(spread_ratio=1.3, spread_ratio_se=0.01)          # beyond 1 but within tolerance
    assert verdict(row)["flag"] == "ok"
    row.update(spread_ratio=1.8, spread_ratio_se=0.5)           # now the innovations decide
    assert (verdict(row)["flag"], verdict(row)["evidence"]) == ("ok", "innovations")
    alone = {"spread_dof": 30, "spread_ratio": 1.8, "spread_ratio_se": 0.5}
    assert verdict(alone)["flag"] == "ok"                        # beyond tolerance, not significant
    assert verdict({})["flag"] == "no_evidence"
    upper = {"innovation_n": 500, "innovation_factor_upper": 0.4, "innovation_sensitivity": np.nan}
    assert verdict(upper)["flag"] == "too_large"
