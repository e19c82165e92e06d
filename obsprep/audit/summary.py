"""The per-sensor summary: counts, errors, the spread test, and the verdict on each error.

Spread test.  Inside one super-observation the raw values scatter by their errors (and by the
true variability inside the cell).  Pooled over the groups g of a sensor and quantity with
n_g >= 2 raw values (n_g >= 3 for profile layers, where the spread is taken about the fit in
depth, :func:`obsprep.superobs.layers.fit_in_depth`: a quadratic from four values on, whose
ddof of 3 this test does not yet use):

.. math::
    f_{spread}^2 = \\frac{\\sum_g (n_g - 1)\\, s_g^2}{(1 - \\rho) \\sum_g (n_g - 1)\\, \\bar\\sigma_g^2}

with s_g the spread, sigma_g the rms assigned raw error and rho the within-sensor correlation
(E[s^2] = sigma^2 (1 - rho) for equicorrelated errors), n_g - 1 replaced by n_g - 2 for profile
layers.  For correct errors f = 1; its standard error is f / sqrt(2 dof) with dof the pooled
degrees of freedom (chi-square sampling of a Gaussian variance, textbook).  Sub-cell variability
of the truth makes f larger, so f is an upper bound of the error scale.

Verdict.  Each available estimate of the factor by which the assigned errors should be scaled
(spread test, innovations with an ensemble, triple collocation, Desroziers with an analysis) comes
with a standard error; the most precise one decides.  A sensor is flagged ``too_small`` when that
factor exceeds ``tolerance`` and exceeds 1 by more than 3 standard errors, ``too_large`` when it
is below 1 / tolerance by more than 3 standard errors; with a single background, an innovation
upper bound below 1 / tolerance also flags ``too_large``.  The other estimates are listed in the
reason.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.model.quantities import QUANTITIES

#: fewest degrees of freedom / samples an estimate needs to be used in the verdict
MIN_SAMPLES = 20
#: smallest innovation sensitivity (observation share of the innovation variance) used
MIN_SENSITIVITY = 0.1
SIGNIFICANCE = 3.0


def weighted_median(values, weights) -> float:
    """Median of ``values`` with ``weights`` (the value where the cumulative weight reaches
    half; NaN values ignored)."""
    values = np.asarray(values, dtype=np.float64)
    weights = np.asarray(weights, dtype=np.float64)
    ok = np.isfinite(values) & (weights > 0)
    if not ok.any():
        return np.nan
    order = np.argsort(values[ok])
    cumulative = np.cumsum(weights[ok][order])
    return float(values[ok][order][np.searchsorted(cumulative, 0.5 * cumulative[-1])])


def spread_statistics(group: pd.DataFrame, quantity: str, correlation: float = 0.0) -> dict:
    """The pooled spread test of one sensor and quantity (see the module docstring)."""
    profile = not QUANTITIES[quantity].surface
    count = group["count"].to_numpy(dtype=float)
    spread = group["spread_detrended" if profile else "spread"].to_numpy(dtype=float)
    raw = group["error_raw_rms"].to_numpy(dtype=float)
    dof = count - (2.0 if profile else 1.0)
    use = (dof >= 1) & np.isfinite(spread) & np.isfinite(raw) & (raw > 0)
    total_dof = float(dof[use].sum())
    if total_dof < 1 or correlation >= 1.0:
        return {"spread_ratio": np.nan, "spread_ratio_se": np.nan, "spread_dof": total_dof}
    observed = float(np.sum(dof[use] * spread[use] ** 2))
    expected = (1.0 - correlation) * float(np.sum(dof[use] * raw[use] ** 2))
    ratio = float(np.sqrt(observed / expected))
    return {"spread_ratio": ratio, "spread_ratio_se": ratio / np.sqrt(2.0 * total_dof),
            "spread_dof": total_dof}


def ledger_counts(run) -> pd.DataFrame:
    """Per output sensor: files, raw read, kept and rejected per reason (all quantities)."""
    ledger = run.ledger.copy()
    if ledger.empty:
        return pd.DataFrame(columns=["sensor", "files", "read", "kept"])
    ledger["sensor"] = [run.output_sensor(str(s)) for s in ledger["sensor"]]  # per file
    reasons = [c for c in ledger if c.startswith("rejected_")]
    ledger["files"] = 1
    return ledger.groupby("sensor", sort=True)[["files", "read", "kept", *reasons]].sum() \
        .reset_index()


def _evidence(row) -> list:
    """(name, factor, standard error, text) of every usable estimate of the error scale."""
    found = []
    if row.get("spread_dof", 0) >= MIN_SAMPLES and np.isfinite(row.get("spread_ratio", np.nan)):
        found.append(("spread", row["spread_ratio"], row["spread_ratio_se"],
                      f"within-cell spread of the raw values is {row['spread_ratio']:.2f} "
                      f"± {row['spread_ratio_se']:.2g} times the assigned raw error "
                      f"({row['spread_dof']:.0f} degrees of freedom)"))
    if (row.get("innovation_n", 0) >= MIN_SAMPLES and np.isfinite(row.get("innovation_factor", np.nan))
            and row.get("innovation_sensitivity", 0) >= MIN_SENSITIVITY):
        found.append(("innovations", row["innovation_factor"], row["innovation_factor_se"],
                      f"innovations: var(d) is {row['innovation_ratio']:.2f} times "
                      f"sigma_o^2 + sigma_ens^2 over {row['innovation_n']:.0f} "
                      f"super-observations, implying a factor {row['innovation_factor']:.2f} "
                      f"± {row['innovation_factor_se']:.2g}"))
    if row.get("tc_n", 0) >= MIN_SAMPLES and np.isfinite(row.get("tc_ratio", np.nan)):
        found.append(("triple_collocation", row["tc_ratio"], row["tc_ratio_se"],
                      f"triple collocation with {row['tc_with']}: error {row['tc_sigma']:.3g} "
                      f"is {row['tc_ratio']:.2f} ± {row['tc_ratio_se']:.2g} times the assigned "
                      f"({row['tc_n']:.0f} triplets)"))
    if np.isfinite(row.get("desroziers_factor", np.nan)) and row.get("innovation_n", 0) >= MIN_SAMPLES:
        factor = row["desroziers_factor"]
        se = factor / np.sqrt(2.0 * (row["innovation_n"] - 1))
        found.append(("desroziers", factor, se,
                      f"analysis residuals times innovations give a factor {factor:.2f}"))
    return [e for e in found if np.isfinite(e[2]) and e[2] > 0]


def verdict(row, tolerance: float = 1.5) -> dict:
    """Flag, suggested factor and reason for one summary row (see the module docstring)."""
    evidence = _evidence(row)
    upper = row.get("innovation_factor_upper", np.nan)
    if not evidence:
        if np.isfinite(upper) and row.get("innovation_n", 0) >= MIN_SAMPLES \
                and not np.isfinite(row.get("innovation_sensitivity", np.nan)):
            se = upper / np.sqrt(2.0 * (row["innovation_n"] - 1))
            if upper < 1.0 / tolerance and (1.0 - upper) > SIGNIFICANCE * se:
                return {"flag": "too_large", "suggested_factor": upper,
                        "suggested_factor_se": se, "evidence": "innovations (upper bound)",
                        "reason": f"errors look too large: even with a perfect background the "
                                  f"innovations are only {upper:.2f} times the assigned error"}
        reason = ("no estimate available (single raw values per cell, no collocations, no "
                  "model equivalents)")
        if np.isfinite(upper) and not np.isfinite(row.get("innovation_sensitivity", np.nan)):
            reason = (f"a single background bounds the factor from above only: at most "
                      f"{upper:.2f}, which does not show the errors too large")
        return {"flag": "no_evidence", "suggested_factor": np.nan, "suggested_factor_se": np.nan,
                "evidence": "", "reason": reason}
    best = min(evidence, key=lambda e: e[2] / e[1])
    name, factor, se, text = best
    others = "; ".join(e[3] for e in evidence if e is not best)
    also = f" (also: {others})" if others else ""
    if factor > tolerance and factor - 1.0 > SIGNIFICANCE * se:
        flag = "too_small"
        reason = f"errors look too small by a factor {factor:.2f}: {text}{also}"
    elif factor < 1.0 / tolerance and 1.0 - factor > SIGNIFICANCE * se:
        flag = "too_large"
        reason = f"errors look too large by a factor {1.0 / factor:.2f}: {text}{also}"
    else:
        flag = "ok"
        reason = f"consistent: {text}{also}"
    return {"flag": flag, "suggested_factor": factor, "suggested_factor_se": se,
            "evidence": name, "reason": reason}


def sensor_summary(run, innovations: pd.DataFrame | None = None,
                   triple: pd.DataFrame | None = None, tolerance: float = 1.5) -> pd.DataFrame:
    """The summary table: one row per sensor and quantity (see the module docstring)."""
    superobs = run.superobs
    counts = ledger_counts(run).set_index("sensor") if not run.ledger.empty else pd.DataFrame()
    rows = []
    for (sensor, quantity), group in superobs.groupby(["sensor", "quantity"], sort=True):
        row = {"sensor": sensor, "quantity": quantity}
        if sensor in counts.index:
            row.update({k: int(v) for k, v in counts.loc[sensor].items()})
        row.update({
            "kept_quantity": int(group["count"].sum()),
            "superobs": len(group),
            "median_raw_error": weighted_median(group["error_raw_rms"], group["count"]),
            "median_superobs_error": float(np.nanmedian(group["error"])),
            "origin": " ".join(sorted(set(group["error_origin"]) - {""})),
        })
        row.update(spread_statistics(group, quantity, run.correlation(sensor)))
        if innovations is not None and len(innovations):
            match = innovations[(innovations["sensor"] == sensor) & (innovations["quantity"] == quantity)]
            if len(match):
                m = match.iloc[0]
                row.update({f"innovation_{k}": m[k] for k in (
                    "n", "mean", "mean_se", "std", "ratio", "ratio_se", "factor", "factor_se",
                    "sensitivity", "factor_upper")})
                row["desroziers_factor"] = m["desroziers_factor"]
        if triple is not None and len(triple):
            match = triple[(triple["sensor"] == sensor) & (triple["quantity"] == quantity)]
            match = match[np.isfinite(match["ratio_se"])]
            if len(match):
                m = match.loc[(match["ratio_se"] / match["ratio"]).idxmin()]
                row.update({"tc_n": m["n"], "tc_with": m["with"], "tc_sigma": m["sigma"],
                            "tc_ratio": m["ratio"], "tc_ratio_se": m["ratio_se"]})
        row.update(verdict(row, tolerance))
        rows.append(row)
    return pd.DataFrame(rows)
