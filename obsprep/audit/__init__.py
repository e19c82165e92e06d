"""The error audit of a build: are the assigned errors consistent with the data and the model?

``audit(run_dir, ensemble=[...])`` reads a build output directory and answers two questions
per sensor and quantity: (i) is the raw noise consistent with the spread of the raw values inside
cells, and (ii) is the super-observation error right, judged from a model ensemble
(innovations) and collocated sensors (pairs and triple collocation), combined with a test of
their agreement.  It writes a report folder and, with an ensemble, the configuration lines that
would make the errors consistent.

- :mod:`.rundir`: reading the run directory (super-observations, ledgers, grid);
- :mod:`.summary`: everything per sensor from one table (:func:`.summary.assess`);
- :mod:`.uncertainty`: block standard errors for correlated super-observations;
- :mod:`.noise`: question (i), the raw-noise check;
- :mod:`.innovations`: innovation statistics ([Desroziers2005]);
- :mod:`.collocation`, :mod:`.triple`: pairs of sensors and triple collocation ([Stoffelen1998]);
- :mod:`.verdict`: question (ii), combining the estimates and deciding;
- :mod:`.configure`: the correlation and representation error to configure;
- :mod:`.ensemble`: model equivalents from an ensemble or a background on the model grid;
- :mod:`.figures`, :mod:`.report`: the figures and the report files.
"""

from __future__ import annotations

import glob
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from obsprep.audit.configure import configuration_lines
from obsprep.audit.innovations import add_innovations
from obsprep.audit.rundir import RunData, load_run
from obsprep.audit.summary import DEFAULT_TOLERANCE, AuditContext, evaluate, ledger_counts
from obsprep.exceptions import InputFileError
from obsprep.writers.atomic import atomic_path

SUGGESTED_CONFIGURATION = "suggested_configuration.toml"


@dataclass
class AuditResult:
    """What :func:`audit` returns."""

    run: RunData
    summary: pd.DataFrame
    collocation: pd.DataFrame
    triple: pd.DataFrame
    innovations: pd.DataFrame
    table: pd.DataFrame | None
    tolerance: float
    model_description: str
    grid_shape: tuple | None = None
    #: the run's model grid (for maps), None when its files cannot be found
    grid: object = None
    figures: list = field(default_factory=list)
    outputs: dict = field(default_factory=dict)
    #: TOML lines that would set the estimated correlations and representation errors
    suggested_configuration: str = ""

    @property
    def flagged(self) -> pd.DataFrame:
        """Summary rows flagged too_small or too_large."""
        return self.summary[self.summary["flag"].isin(["too_small", "too_large"])]


def _expand(paths) -> list:
    """Paths with glob patterns expanded (sorted); a pattern matching nothing is an error."""
    out = []
    for p in paths or []:
        p = str(p)
        matches = sorted(glob.glob(p)) if glob.has_magic(p) else [p]
        if not matches:
            raise InputFileError(p, "no file matches this pattern")
        for m in matches:
            if not Path(m).exists():
                raise InputFileError(m, "model file not found")
        out.extend(matches)
    return out


def audit(run_dir, ensemble=None, background=None, analysis=None, out=None,
          tolerance: float = DEFAULT_TOLERANCE, config=None, figures: bool = True,
          analysis_factors: dict | None = None) -> AuditResult:
    """Audit the errors of a build and write the report.

    Parameters
    ----------
    run_dir : path
        Build output directory (``superobs_*.nc`` and ``*_ledger.csv``).
    ensemble : list of paths (glob patterns allowed), optional
        Ensemble on the model grid: member files, or one file with a member dimension.
    background : path, optional
        A single model state instead of an ensemble (innovation statistics only).
    analysis : path, optional
        An analysis state (or ensemble-mean analysis) for the analysis-residual estimate, a
        diagnostic unless ``analysis_factors`` says which errors the analysis used.
    out : path, optional
        Report folder (default ``RUN_DIR/audit``).
    tolerance : float
        Errors within this factor of right count as right: a sensor is flagged when its factor
        F is beyond it (or below its inverse) by more than its standard error and differs
        from 1 with 95 % confidence, and ok when the 95 % interval of F lies inside
        (:mod:`obsprep.audit.verdict`).
    config : path, optional
        The build configuration, for resolving the grid files when the output does not say.
    figures : bool
        Write the PNG figures.
    analysis_factors : dict, optional
        Output sensor -> the factor by which its errors were multiplied in the analysis given
        (the analysis was redone with updated errors); those sensors' analysis-residual
        estimates then count as evidence.

    Returns
    -------
    AuditResult
    """
    from obsprep.audit.report import write_report

    run = load_run(run_dir)
    ensemble_paths = _expand(ensemble)
    background_paths = _expand([background] if background else [])
    analysis_paths = _expand([analysis] if analysis else [])
    if ensemble_paths and background_paths:
        raise InputFileError(background, "give either an ensemble or a background, not both")
    model_paths = ensemble_paths or background_paths
    table, grid_shape, grid, members = run.superobs, None, None, 0
    description = "none (no ensemble or background given)"
    if model_paths:
        from obsprep.audit.ensemble import model_equivalents

        grid = run.grid(config)
        grid_shape = grid.shape
        equivalents = model_equivalents(model_paths, run.superobs, grid)
        analysis_eq = model_equivalents(analysis_paths, run.superobs, grid) if analysis_paths \
            else None
        members = max((e.members for e in equivalents.values()), default=0)
        table = add_innovations(run.superobs, equivalents, analysis_eq, members > 1)
        kind = f"ensemble of {members} members" if members > 1 else "single background"
        description = f"{kind} from {', '.join(Path(p).name for p in model_paths)}; " \
                      f"quantities {', '.join(sorted(equivalents)) or 'none'}"
    context = AuditContext(
        members=members, tolerance=tolerance,
        correlation={s: run.correlation(s) for s in run.superobs["sensor"].unique()},
        representation_common=run.representation_model() != "sampling",
        analysis_factors=dict(analysis_factors or {}))
    assessment = evaluate(table, context)
    summary = assessment.summary
    if not run.ledger.empty:
        counts = ledger_counts(run)
        summary = counts.merge(summary, on="sensor", how="right")
        first = ["sensor", "quantity"]
        summary = summary[first + [c for c in summary if c not in first]]
    result = AuditResult(run=run, summary=summary, collocation=assessment.collocation,
                         triple=assessment.triple, innovations=assessment.innovations,
                         table=table if model_paths else None, tolerance=tolerance,
                         model_description=description, grid_shape=grid_shape, grid=grid)
    result.suggested_configuration = configuration_lines(summary, run.source_sensors())
    if grid is None and figures:
        try:
            result.grid = run.grid(config)
            result.grid_shape = result.grid.shape
        except InputFileError:
            result.grid = None  # maps fall back to grid indices; the report says so
    out_dir = Path(out) if out else Path(run_dir) / "audit"
    result.outputs = write_report(result, out_dir, with_figures=figures)
    if result.suggested_configuration:
        path = out_dir / SUGGESTED_CONFIGURATION
        with atomic_path(path) as tmp:
            Path(tmp).write_text("# Estimated from the innovations by obsprep audit: check before "
                                 "use\n" + result.suggested_configuration + "\n", encoding="utf-8")
        result.outputs[SUGGESTED_CONFIGURATION] = path
    return result


__all__ = ["audit", "AuditResult", "AuditContext", "load_run", "DEFAULT_TOLERANCE"]
