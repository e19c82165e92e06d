"""The per-sensor summary: counts, the raw-noise check, the evidence on each error, the verdict.

Two questions are kept apart:

(i) is the raw pixel noise consistent with the spread inside cells?  A one-sided check of the
    uncorrelated part (:mod:`obsprep.audit.noise`), reported in the ``noise_*`` columns; it
    never decides the verdict;
(ii) is the super-observation error right?  Innovations against an ensemble, triple collocation
    and pair collocation, each compared with the error it can see, combined with a test of their
    agreement (:mod:`obsprep.audit.verdict`): the ``flag``, ``factor`` and ``reason`` columns.

Besides, with an ensemble, the within-group correlation and the representation error that would
make the errors consistent are estimated (:mod:`obsprep.audit.configure`).

:func:`assess` does all of it from one table of super-observations (with innovations when a
model was given), so that it can be run on the output of a build (:func:`obsprep.audit.audit`)
or on synthetic tables (the calibration benchmark).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from obsprep.audit.collocation import collocation_table, matched, visible_error
from obsprep.audit.configure import estimate_correlation_and_representation
from obsprep.audit.innovations import innovation_table
from obsprep.audit.noise import raw_noise_check
from obsprep.audit.triple import triple_collocation_table
from obsprep.audit.uncertainty import Blocks, centred_squares
from obsprep.audit.verdict import Evidence, decide, pair_estimate

DEFAULT_TOLERANCE = 1.5


@dataclass
class AuditContext:
    """What the audit needs to know besides the super-observations.

    ``members``: ensemble size N (0: no model; 1: a single background); ``tolerance``: a factor
    T, errors within [1/T, T] of right count as right; ``correlation``: output sensor -> its
    configured within-group error correlation; ``representation_common``: whether the
    representation error is common to all sensors of a quantity in a cell (the constant and
    field models) rather than each sensor's own sampling (the sampling model);
    ``analysis_factors``: output sensor -> the factor F by which its errors were multiplied in
    the analyses given (those sensors' analysis-residual estimates then decide, see
    :mod:`obsprep.audit.verdict`)."""

    members: int = 0
    tolerance: float = DEFAULT_TOLERANCE
    correlation: dict = field(default_factory=dict)
    representation_common: bool = True
    analysis_factors: dict = field(default_factory=dict)


@dataclass
class Assessment:
    """What :func:`evaluate` returns: the summary and the tables behind it."""

    summary: pd.DataFrame
    collocation: pd.DataFrame
    triple: pd.DataFrame
    innovations: pd.DataFrame


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


def _evidence_of(sensor, quantity, innovations: dict, triples: dict, context: AuditContext) -> list:
    """The innovation, triple-collocation and analysis-residual evidence of one sensor."""
    found = []
    stats = innovations.get((sensor, quantity))
    if stats is not None:
        if context.members >= 2:
            found.append(Evidence("innovations", "estimate", stats["factor_estimate"]))
        else:
            found.append(Evidence("innovations with a single background", "upper",
                                  stats["upper_estimate"]))
        used = context.analysis_factors.get(sensor)
        if used is not None:
            step = stats["desroziers_estimate"]
            following = float(np.sqrt(max(step.value, 0.0))) if np.isfinite(step.value) else np.nan
            found.append(Evidence(f"analysis residuals of analyses made with F = {used:.3g} "
                                  f"(the next iterate is F = {following:.3g}; redo the analyses "
                                  f"with it until the two agree)", "estimate", step))
        elif np.isfinite(stats["desroziers_sq"]):
            found.append(Evidence("one-step analysis residuals, biased toward the assigned "
                                  "errors", "diagnostic", stats["desroziers_estimate"]))
    candidates = [(w, e) for w, e in triples.get((sensor, quantity), []) if e.usable]
    if candidates:
        partners, best = min(candidates, key=lambda c: c[1].se)
        found.append(Evidence(f"triple collocation with {partners}", "estimate", best))
    elif triples.get((sensor, quantity)):
        partners, first = triples[(sensor, quantity)][0]
        found.append(Evidence(f"triple collocation with {partners}", "estimate", first))
    return found


def _pair_evidence(table, quantity, sensor, partners: dict) -> list:
    """Pair-collocation estimates of ``sensor`` with partners whose F^2 their innovations give
    (``partners``: partner -> its innovation BlockedEstimate)."""
    found = []
    for partner, known in sorted(partners.items()):
        if partner == sensor or not known.usable:
            continue
        pairs = matched(table, quantity, [sensor, partner])
        if pairs is None or len(pairs) < 3:
            continue
        d = pairs[f"value_{sensor}"].to_numpy(float) - pairs[f"value_{partner}"].to_numpy(float)
        estimate = pair_estimate(centred_squares(d), pairs[f"visible_{sensor}"],
                                 pairs[f"visible_{partner}"], known, Blocks.from_table(pairs))
        found.append(Evidence(f"pair collocation with {partner} (its F from innovations)",
                              "estimate", estimate))
    return found


def evaluate(table: pd.DataFrame, context: AuditContext) -> Assessment:
    """Every statistic and the verdict of every sensor and quantity of ``table`` (one row per
    super-observation, the columns of :func:`obsprep.audit.rundir.load_run`'s table, and with a
    model those of :func:`obsprep.audit.innovations.add_innovations`)."""
    table = table.copy()
    representation = table["error_representation"] if "error_representation" in table else 0.0
    table["visible_error"] = visible_error(table["error"], representation,
                                           context.representation_common)
    innovations, innovation_estimates = innovation_table(table, context.members)
    triple, triple_estimates = triple_collocation_table(table)
    collocation = collocation_table(table)
    rows = []
    for (sensor, quantity), group in table.groupby(["sensor", "quantity"], sort=True):
        evidence = _evidence_of(sensor, quantity, innovation_estimates, triple_estimates, context)
        if context.members >= 2:
            # the partner's innovations share the background errors with the sensor's own:
            # the combination counts that correlation (obsprep.audit.verdict.combined)
            partners = {s: stats["factor_estimate"] for (s, q), stats in innovation_estimates.items()
                        if q == quantity and s != sensor}
            evidence += _pair_evidence(table, quantity, sensor, partners)
        row = {"sensor": sensor, "quantity": quantity,
               "kept_quantity": int(group["count"].sum()), "superobs": len(group),
               "median_raw_error": weighted_median(group["error_raw_rms"], group["count"]),
               "median_superobs_error": float(np.nanmedian(group["error"]))}
        if "error_origin" in group:
            row["origin"] = " ".join(sorted(set(map(str, group["error_origin"])) - {""}))
        row.update(decide(evidence, context.tolerance))
        row.update(raw_noise_check(group, quantity, context.correlation.get(sensor, 0.0),
                                   context.tolerance))
        if context.members >= 2:
            row.update(estimate_correlation_and_representation(group, context.members,
                                                                  context.representation_common))
        rows.append(row)
    return Assessment(pd.DataFrame(rows), collocation, triple, innovations)


def assess(table: pd.DataFrame, context: AuditContext) -> pd.DataFrame:
    """The summary of :func:`evaluate`: one row per sensor and quantity with ``flag`` (ok,
    too_small, too_large, inconclusive, no_evidence), ``factor`` F (multiply the assigned error
    by it), ``factor_low``/``factor_high`` (95 %), ``conclusion`` and ``reason``."""
    return evaluate(table, context).summary
