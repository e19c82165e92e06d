"""The audit's verdict on synthetic super-observation tables of known errors (numpy Monte Carlo):
the failure cases of a verdict that trusted one test, each of which must now give the right
verdict or an honest "inconclusive", never a confident wrong one.

The tables: three sensors of SST observing a 60 x 60 grid over two days, a truth, and an
ensemble whose mean misses the truth by a smooth random field (correlation length 4 cells)
of variance (1 + 1/N) sigma_ens^2 (the truth statistically one more member; N = 30).  Each
sensor's super-observation has an error the test chooses, and an assigned error the test
chooses; the true factor F is their ratio.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import ndimage

from obsprep.audit.summary import AuditContext, assess, evaluate

SIDE, DAYS, MEMBERS, SPREAD = 60, 2, 30, 0.3
QUANTITY = "sea_surface_temperature"


def smooth_field(rng, length_cells=4.0):
    """Gaussian random field of unit variance (white noise filtered by a Gaussian kernel,
    divided by the kernel's L2 norm: the variance of filtered white noise is the sum of its
    squared weights)."""
    impulse = np.zeros((SIDE, SIDE))
    impulse[SIDE // 2, SIDE // 2] = 1.0
    norm = np.sqrt(np.sum(ndimage.gaussian_filter(impulse, length_cells, mode="wrap") ** 2))
    return ndimage.gaussian_filter(rng.standard_normal((SIDE, SIDE)), length_cells, mode="wrap") / norm


def table(rng, sensors: dict, coverage=0.6, with_model=True) -> pd.DataFrame:
    """One row per super-observation.  ``sensors``: name -> dict with ``noise`` (independent
    error, 1-sigma), ``field`` (the amplitude of a smooth error field of the sensor, default 0)
    and ``assigned`` (the error the build assigned)."""
    rows = []
    for day in range(DAYS):
        truth = 2.0 * smooth_field(rng, 8.0)
        background = SPREAD * np.sqrt(1.0 + 1.0 / MEMBERS) * smooth_field(rng)
        for name, spec in sensors.items():
            seen = rng.random((SIDE, SIDE)) < coverage
            j, i = np.nonzero(seen)
            error = spec["noise"] * rng.standard_normal(j.size)
            if spec.get("field", 0.0):
                error += spec["field"] * smooth_field(rng)[j, i]
            value = truth[j, i] + error
            rows.append(pd.DataFrame({
                "sensor": name, "quantity": QUANTITY, "value": value,
                "error": spec["assigned"], "error_raw_rms": spec["assigned"] * 3.0,
                "error_representation": 0.0, "count": 9, "spread": np.nan,
                "spread_detrended": np.nan, "lon": i * 0.1, "lat": j * 0.1, "i": i, "j": j,
                "k": 0, "slot": day, "time": np.datetime64("2026-11-20T12:00", "ns")
                + np.timedelta64(day, "D"), "time_end": np.datetime64("NaT", "ns"),
                "profile": "", "model": truth[j, i] + background[j, i],
                "model_variance": SPREAD ** 2, "sensor_order": 0}))
    out = pd.concat(rows, ignore_index=True).drop(columns="sensor_order")
    if with_model:
        out["innovation"] = out["value"] - out["model"]
    else:
        out = out.drop(columns=["model", "model_variance"])
    return out


def verdicts(frame, members=MEMBERS, **context):
    summary = assess(frame, AuditContext(members=members, **context))
    return summary.set_index("sensor")


def test_correct_sensors_are_ok():
    rng = np.random.default_rng(1)
    right = {"a": {"noise": 0.2, "assigned": 0.2}, "b": {"noise": 0.4, "assigned": 0.4},
             "c": {"noise": 0.3, "assigned": 0.3}}
    found = verdicts(table(rng, right))
    assert (found["flag"] == "ok").all(), found[["flag", "reason"]]
    assert ((found["factor_low"] <= 1.0) & (found["factor_high"] >= 1.0)).all()


def test_unstated_smooth_error_field_is_not_called_ok():
    """Sensor c has the right pixel noise and an unstated smooth error field of twice its
    amplitude: its super-observation errors are sqrt(5) = 2.24 times too small.  The spread
    inside cells cannot see that; innovations and collocations can."""
    rng = np.random.default_rng(2)
    sensors = {"a": {"noise": 0.2, "assigned": 0.2}, "b": {"noise": 0.4, "assigned": 0.4},
               "c": {"noise": 0.15, "field": 0.3, "assigned": 0.15}}
    found = verdicts(table(rng, sensors))
    assert found.loc["c", "flag"] == "too_small", found.loc["c", "reason"]
    se = (found.loc["c", "factor_high"] - found.loc["c", "factor_low"]) / (2 * 1.96)
    assert abs(found.loc["c", "factor"] - np.sqrt(5.0)) < 3.0 * se      # within 3 of its se
    assert set(found.loc[["a", "b"], "flag"]) <= {"ok", "inconclusive"}
    # without a model, triple collocation alone must not call it ok either
    alone = verdicts(table(np.random.default_rng(3), sensors, with_model=False), members=0)
    assert alone.loc["c", "flag"] in ("too_small", "inconclusive"), alone.loc["c", "reason"]


def test_errors_too_large_are_never_called_too_small():
    """A correct sensor configured with a within-group correlation of 0.6 gets errors 2.7 times
    too large (F = 0.37): too large, or inconclusive, never too small."""
    rng = np.random.default_rng(4)
    sensors = {"a": {"noise": 0.2, "assigned": 0.2}, "b": {"noise": 0.4, "assigned": 0.4},
               "c": {"noise": 0.3, "assigned": 0.3 * 2.7}}
    found = verdicts(table(rng, sensors))
    assert found.loc["c", "flag"] == "too_large", found.loc["c", "reason"]
    se = (found.loc["c", "factor_high"] - found.loc["c", "factor_low"]) / (2 * 1.96)
    assert abs(found.loc["c", "factor"] - 1 / 2.7) < 3.0 * se          # within 3 of its se


def test_thin_evidence_is_inconclusive_not_ok():
    """A sensor 2.2 times understated seen in 30 super-observations only: never "ok"."""
    rng = np.random.default_rng(5)
    sensors = {"a": {"noise": 0.2, "assigned": 0.2}, "b": {"noise": 0.4, "assigned": 0.4},
               "c": {"noise": 0.44, "assigned": 0.2}}
    frame = table(rng, sensors)
    few = rng.choice(np.flatnonzero(frame["sensor"] == "c"), 30, replace=False)
    keep = (frame["sensor"] != "c").to_numpy().copy()
    keep[few] = True
    found = verdicts(frame[keep].reset_index(drop=True))
    assert found.loc["c", "flag"] in ("too_small", "inconclusive"), found.loc["c", "reason"]
    assert found.loc["c", "flag"] != "ok"


def test_common_representation_error_is_left_out_of_the_collocations():
    """All three sensors share a representation error (the same in each cell, configured and
    included in the assigned errors): differences between them do not see it.  Compared with
    the whole error, collocations would say "too large"; compared with the rest, the sensors
    are right, and the innovations, which see it all, agree."""
    rng = np.random.default_rng(6)
    representation = 0.3
    sensors = {"a": 0.2, "b": 0.4, "c": 0.3}
    frame = table(rng, {s: {"noise": n, "assigned": n} for s, n in sensors.items()})
    common = {}
    for _, row in frame[["slot", "j", "i"]].drop_duplicates().iterrows():  # cells, test-sized
        common[(row["slot"], row["j"], row["i"])] = representation * rng.standard_normal()
    shift = np.array([common[k] for k in zip(frame["slot"], frame["j"], frame["i"])])
    frame["value"] += shift
    frame["innovation"] = frame["value"] - frame["model"]
    frame["error"] = np.sqrt(frame["error"] ** 2 + representation ** 2)
    frame["error_representation"] = representation
    found = verdicts(frame, representation_common=True)
    assert (found["flag"] == "ok").all(), found[["flag", "reason"]]
    wrong = verdicts(frame, representation_common=False)      # as if each sensor's own
    assert (wrong["flag"] != "too_small").all()


def test_analysis_made_with_updated_errors_decides():
    """Analyses of a scalar optimal interpolation made with the true errors (the updated ones):
    E[(y - x_a)(y - x_b)] = sigma_o^2 ([Desroziers2005]).  Given as made with F = 2 for a
    sensor assigned half its error, that estimate counts; without the factors it is only a
    diagnostic and never decides."""
    rng = np.random.default_rng(7)
    sensors = {"a": {"noise": 0.4, "assigned": 0.2}}
    frame = table(rng, sensors, coverage=0.9)
    sigma_o2, sigma_b2 = 0.4 ** 2, SPREAD ** 2 * (1 + 1 / MEMBERS)
    gain = sigma_b2 / (sigma_b2 + sigma_o2)
    frame["analysis_residual"] = frame["innovation"] * (1.0 - gain)
    with_factors = evaluate(frame, AuditContext(members=MEMBERS, analysis_factors={"a": 2.0}))
    row = with_factors.summary.set_index("sensor").loc["a"]
    assert "analysis residuals of analyses made with F = 2" in row["evidence"]
    assert row["flag"] == "too_small" and row["factor_low"] <= 2.0 <= row["factor_high"]
    diagnostic = verdicts(frame).loc["a"]
    assert "analysis" not in diagnostic["evidence"] and "diagnostic" in diagnostic["reason"]


@pytest.mark.parametrize("factor", [0.5, 2.0])
def test_pair_with_a_judged_partner_gives_evidence(factor):
    """Two sensors only, one with model equivalents: the pair with the judged partner still
    says whether the other's errors are right (the other has no innovations here)."""
    rng = np.random.default_rng(8)
    frame = table(rng, {"a": {"noise": 0.2, "assigned": 0.2},
                        "b": {"noise": 0.4, "assigned": 0.4 / factor}}, coverage=0.8)
    frame.loc[frame["sensor"] == "b", "innovation"] = np.nan
    found = verdicts(frame)
    expected = "too_small" if factor > 1 else "too_large"
    assert found.loc["b", "flag"] == expected, found.loc["b", "reason"]
    assert "pair collocation with a" in found.loc["b", "evidence"]
