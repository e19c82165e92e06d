"""The synthetic tables of the audit calibration benchmark (benchmarks/audit_synthetic.py)
against numpy Monte Carlo: every second moment the benchmark relies on is the one its
docstring states.

Each check pools independent tables (independent seeds); the ratio is computed per table
and its mean compared with the stated value within 4 standard errors of that mean (the
across-table scatter / sqrt(tables), any statistics textbook), and the standard error is asked
to be small enough that a wrong moment (for the ensemble: 1 instead of 1 + 1/N) would fail.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "benchmarks"))

import audit_synthetic as synthetic  # noqa: E402

TABLES = 64
STANDARD_ERRORS = 4.0


def check_ratio(ratios, expected, label, max_relative_se=0.02):
    ratios = np.asarray(ratios)
    mean = ratios.mean()
    se = ratios.std(ddof=1) / np.sqrt(ratios.size)
    assert se < max_relative_se * expected, (label, se)      # informative enough to fail
    assert abs(mean - expected) < STANDARD_ERRORS * se, (label, mean, expected, se)


@pytest.fixture(scope="module")
def tables():
    rng = np.random.default_rng(2026)
    return [synthetic.synthetic_table(rng, 3000, {"a": 2.0, "c": 0.5}, members=5)
            for _ in range(TABLES)]


def test_random_field_has_unit_variance_and_gaussian_correlation():
    """Correlation exp(-r^2 / (2 L^2)): exp(-1/2) = 0.607 at r = L, exp(-2) = 0.135 at 2 L."""
    rng = np.random.default_rng(3)
    length = 5.0
    fields = synthetic.gaussian_random_field(rng, (60, 60), length, count=400)
    variance = fields.var(axis=(1, 2), ddof=0) + fields.mean(axis=(1, 2)) ** 2
    check_ratio(variance, 1.0, "variance", max_relative_se=0.05)
    for lag, expected in ((5, np.exp(-0.5)), (10, np.exp(-2.0))):
        products = (fields[:, :, :-lag] * fields[:, :, lag:]).mean(axis=(1, 2))
        check_ratio(products, expected, f"correlation at {lag} cells", max_relative_se=0.1)


def test_assigned_errors_are_the_true_ones_divided_by_the_factor(tables):
    for table in tables[:3]:
        np.testing.assert_allclose(table["error"] * table["true_factor"], table["true_error"],
                                   rtol=1e-12)
        assert set(table.groupby("sensor")["true_factor"].first()) == {2.0, 1.0, 0.5}


def test_superobservation_minus_cell_truth_has_the_true_error(tables):
    """value - truth = representation + granule + mean of pixel noise and sub-cell terms:
    variance sigma_o^2 of the module docstring."""
    for sensor in "abc":
        ratios = [np.mean(((t.value - t.truth) / t.true_error)[t.sensor == sensor] ** 2)
                  for t in tables]
        check_ratio(ratios, 1.0, sensor)


def test_innovation_variance_is_observation_plus_one_plus_one_over_n_background(tables):
    """E[d^2] = F^2 sigma_o^2 + (1 + 1/N) sigma_b^2, N = 5 members (1.2 sigma_b^2: a
    background term without the 1/N would be 17 % short)."""
    members = 5
    for sensor in "abc":
        ratios = []
        for t in tables:
            g = t[t.sensor == sensor]
            ratios.append(np.mean(g.innovation ** 2) / np.mean(
                g.true_error ** 2 + (1 + 1 / members) * g.true_background_variance))
        check_ratio(ratios, 1.0, sensor)
    background = [np.mean((t.truth - t.model) ** 2) / np.mean(t.true_background_variance)
                  for t in tables]
    check_ratio(background, 1.0 + 1.0 / members, "ensemble mean error")
    spread = [np.mean(t.model_variance) / np.mean(t.true_background_variance) for t in tables]
    check_ratio(spread, 1.0, "ensemble variance")


def test_pair_differences_do_not_see_the_common_representation_error(tables):
    """E[(x_a - x_b)^2] = sigma_oa^2 + sigma_ob^2 - 2 sigma_r^2 (true errors)."""
    sigma_r = synthetic.Scenario().representation_sigma
    for first, second in (("a", "b"), ("a", "c"), ("b", "c")):
        ratios = []
        for t in tables:
            both = t[t.sensor == first].merge(t[t.sensor == second], on=["slot", "i", "j"])
            assert len(both) > 1000                     # collocated often enough
            ratios.append(np.mean((both.value_x - both.value_y) ** 2) / np.mean(
                both.true_error_x ** 2 + both.true_error_y ** 2 - 2 * sigma_r ** 2))
        check_ratio(ratios, 1.0, (first, second))


def test_spread_sees_pixel_noise_and_subcell_variability_only(tables):
    """E[s^2] = (1 - rho) sigma_sg^2 + sigma_s^2, sigma_sg the true raw error."""
    scenario = synthetic.Scenario()
    for sensor in scenario.sensors:
        ratios = []
        for t in tables:
            g = t[(t.sensor == sensor.name) & (t["count"] >= 2)]
            raw = g.error_raw_rms * g.true_factor
            dof = g["count"] - 1
            expected = (1 - sensor.rho) * raw ** 2 + scenario.subcell_sigma ** 2
            ratios.append(np.sum(dof * g.spread ** 2) / np.sum(dof * expected))
        check_ratio(ratios, 1.0, sensor.name)
