"""The error audit of a build: are the assigned errors consistent with the data and the model?

``audit(run_dir, ensemble=[...])`` reads a build output directory, compares the assigned errors
with the scatter of the raw values inside each super-observation, with collocated sensors (pairs
and triple collocation) and with a model ensemble (innovations), flags the sensors whose errors
look too small or too large and writes a report folder.

- :mod:`.rundir`: reading the run directory (super-observations, ledgers, grid);
- :mod:`.summary`: counts, the spread test, the verdict per sensor;
- :mod:`.collocation`: pairs of sensors in the same cell and slot;
- :mod:`.triple`: triple collocation ([Stoffelen1998];
- :mod:`.ensemble`: model equivalents from an ensemble or a background on the model grid;
- :mod:`.innovations`: innovation statistics ([Desroziers2005];
- :mod:`.figures`, :mod:`.report`: the PNG figures and the report files.
"""

from __future__ import annotations

import glob
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from obsprep.audit.collocation import collocation_table
from obsprep.audit.innovations import add_innovations, innovation_table
from obsprep.audit.rundir import RunData, load_run
from obsprep.audit.summary import sensor_summary
from obsprep.audit.triple import triple_collocation_table
from obsprep.exceptions import InputFileError

DEFAULT_TOLERANCE = 1.5


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
          tolerance: float = DEFAULT_TOLERANCE, config=None, figures: bool = True) -> AuditResult:
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
        An analysis state (or ensemble-mean analysis) for the Desroziers estimate.
    out : path, optional
        Report folder (default ``RUN_DIR/audit``).
    tolerance : float
        A sensor is flagged when its suggested error scale factor is beyond this factor
        (or below its inverse) by more than 3 standard errors.
    config : path, optional
        The build configuration, for resolving the grid files when the output does not say.
    figures : bool
        Write the PNG figures.

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
    table, innovations, grid_shape, grid = None, pd.DataFrame(), None, None
    description = "none (no ensemble or background given)"
    if model_paths:
        from obsprep.audit.ensemble import model_equivalents

        grid = run.grid(config)
        grid_shape = grid.shape
        equivalents = model_equivalents(model_paths, run.superobs, grid)
        analysis_eq = model_equivalents(analysis_paths, run.superobs, grid) if analysis_paths \
            else None
        members = max((e.members for e in equivalents.values()), default=0)
        with_spread = members > 1
        table = add_innovations(run.superobs, equivalents, analysis_eq, with_spread)
        innovations = innovation_table(table, with_spread)
        kind = f"ensemble of {members} members" if with_spread else "single background"
        description = f"{kind} from {', '.join(Path(p).name for p in model_paths)}; " \
                      f"quantities {', '.join(sorted(equivalents)) or 'none'}"
    result = AuditResult(run=run, summary=pd.DataFrame(), collocation=collocation_table(run.superobs),
                         triple=triple_collocation_table(run.superobs), innovations=innovations,
                         table=table, tolerance=tolerance, model_description=description,
                         grid_shape=grid_shape, grid=grid)
    if grid is None and figures:
        try:
            result.grid = run.grid(config)
            result.grid_shape = result.grid.shape
        except InputFileError:
            result.grid = None  # maps fall back to grid indices; the report says so
    result.summary = sensor_summary(run, innovations, result.triple, tolerance)
    out_dir = Path(out) if out else Path(run_dir) / "audit"
    result.outputs = write_report(result, out_dir, with_figures=figures)
    return result


__all__ = ["audit", "AuditResult", "load_run", "DEFAULT_TOLERANCE"]
