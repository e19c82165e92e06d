"""Write the whole "weddell-spring" demo: every sensor's files, the truth, the model ensemble,
the example grids, the build configuration and the manifest (:func:`write_demo`).

The scenario's pieces live in :mod:`obsprep.demo.scenario` (grid, truth sampling, one writer
per sensor); the third SST sensor in :mod:`obsprep.demo.sst_microwave` and the ensemble in
:mod:`obsprep.demo.ensemble` build on it; this module only puts them together, so the
modules import one way.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np

from obsprep.demo.ensemble import write_ensemble
from obsprep.demo.noise import ERROR_CORRELATION, FOOTPRINT_KM2, SUBCELL_SIGMA
from obsprep.demo.scenario import (
    ALTIMETER_SIGMA_M,
    ICE_DRIFT_HOURS,
    LAYER_INTERFACES_M,
    MANIFEST_NAME,
    MODEL_GRID,
    PLATFORMS,
    SCENARIO_NAME,
    SLOT_HOURS,
    _relative,
    _Scenario,
    _sensor_table,
    _write_altimetry,
    _write_config,
    _write_example_grids,
    _write_ice_concentration,
    _write_ice_drift,
    _write_model_grid,
    _write_profiles,
    _write_sst_grid,
    _write_sst_swath,
    _write_truth_on_grid,
)
from obsprep.demo.sst_microwave import write_sst_microwave
from obsprep.exceptions import ConfigError


def _parse_date(date):
    text = str(date)
    if not re.fullmatch(r"\d{4}-\d{2}-\d{2}", text):
        raise ConfigError("date", f"expected an analysis date YYYY-MM-DD, got {text!r}")
    try:
        day = np.datetime64(text, "D")
    except ValueError:
        raise ConfigError("date", f"expected a valid calendar date YYYY-MM-DD, "
                                  f"got {text!r}") from None
    if str(day) != text:
        raise ConfigError("date", f"expected a valid calendar date YYYY-MM-DD, got {text!r}")
    return day


def write_demo(directory, *, date="2026-11-20", seed=20261120, scale=1.0, misassign=None,
               ensemble=True) -> dict:
    """Write the "weddell-spring" demo scenario into ``directory`` (created if needed).

    Parameters
    ----------
    directory : str or Path
        Output directory; existing files of the same names are overwritten.
    date : str
        Analysis date YYYY-MM-DD; the analysis time is 00:00 UTC of that day and the window the
        72 h before it, in 24 h slots.
    seed : int
        Seed of the noise (deterministic: the same seed writes the same values).
    scale : float
        Approximate fraction (0 < scale <= 1) of the full data volume of the SST swath and SST
        grid, for fast tests (pixel spacing of the swath is kept; the grid gets coarser).  The
        along-track, ice and profile files are small and always full size.
    misassign : str, optional
        A sensor whose configured error is made half its true noise (``factor = 0.5``), for
        trying the error audit (``obsprep audit``) on a known mistake.
    ensemble : bool
        Also write the synthetic model ensemble (:mod:`obsprep.demo.ensemble`).

    Returns
    -------
    dict
        ``directory``, ``config``, ``grid``, ``truth``, ``manifest`` (Paths) and ``files``
        (sensor name -> list of Paths).

    Raises
    ------
    ConfigError
        For a malformed date, a negative seed or a scale outside (0, 1].
    """
    day = _parse_date(date)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ConfigError("seed", f"expected a non-negative integer, got {seed!r}")
    if isinstance(scale, bool) or not isinstance(scale, (int, float)) or not 0.0 < scale <= 1.0:
        raise ConfigError("scale", f"expected a number in (0, 1], got {scale!r}")
    root = Path(directory)
    root.mkdir(parents=True, exist_ok=True)
    if misassign is not None and misassign not in _sensor_table():
        raise ConfigError("misassign", f"unknown demo sensor {misassign!r}; known: "
                                       f"{', '.join(_sensor_table())}")
    scn = _Scenario(root=root, analysis_time=day.astype("datetime64[s]"), seed=int(seed),
                    scale=float(scale), misassign=misassign)

    grid_path, grid_counts = _write_model_grid(scn)
    files, counts = {}, {}
    for index, sensor in enumerate(ALTIMETER_SIGMA_M):
        files[sensor], counts[sensor] = _write_altimetry(scn, sensor, index)
    files["sst_swath_ir"], counts["sst_swath_ir"] = _write_sst_swath(scn)
    files["sst_grid"], counts["sst_grid"] = _write_sst_grid(scn)
    files["sst_microwave"], counts["sst_microwave"] = write_sst_microwave(scn)
    files["ice_concentration"], counts["ice_concentration"] = _write_ice_concentration(scn)
    files["ice_drift"], counts["ice_drift"] = _write_ice_drift(scn)
    files["ts_profiles"], counts["ts_profiles"] = _write_profiles(scn)
    truth_path = _write_truth_on_grid(scn)
    ensemble_path = ensemble_record = None
    if ensemble:
        ensemble_path, ensemble_record = write_ensemble(scn)
    example_grids = _write_example_grids(scn)
    config_path = _write_config(scn)

    start, end = scn.window
    sensors = {}
    for sensor, (kind, pattern, quantities, _, sigma) in _sensor_table().items():
        sensors[sensor] = {"kind": kind, "platform": PLATFORMS[sensor], "quantities": quantities,
                           "path_pattern": pattern, "error": sigma,
                           "files": [_relative(scn, p) for p in files[sensor]],
                           "counts": counts[sensor]}
    manifest = {
        "scenario": SCENARIO_NAME,
        "description": "Invented Weddell Sea spring state: smooth analytic truth plus sub-cell "
                       "variability plus Gaussian noise of known sigma per sensor, correlated "
                       "within passes, granules and files.",
        "analysis_time": f"{scn.analysis_time}",
        "window": {"start": f"{start}", "end": f"{end}", "slot_hours": SLOT_HOURS},
        "seed": int(seed), "scale": float(scale),
        "config": _relative(scn, config_path),
        "grid": {"file": _relative(scn, grid_path), **MODEL_GRID,
                 "layer_interfaces": list(LAYER_INTERFACES_M), **grid_counts},
        "truth": {"file": _relative(scn, truth_path), "function": "obsprep.demo.truth:truth_value",
                  "drift_interval_hours": ICE_DRIFT_HOURS},
        "representation_error": {
            "model": "sampling: one independent sub-cell value per raw footprint (per profile "
                     "and model layer for profiles); not part of the truth",
            "subcell_sigma": dict(SUBCELL_SIGMA), "footprint_km2": dict(FOOTPRINT_KM2)},
        "error_correlation": {"model": "constant pairwise correlation within a pass, granule "
                                       "or file; none across them",
                              "correlation": dict(ERROR_CORRELATION)},
        "sensors": sensors,
        "ensemble": ensemble_record,
        "misassigned": ({"sensor": misassign, "factor": 0.5} if misassign else None),
    }
    manifest_path = scn.path(MANIFEST_NAME)
    manifest_path.write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    return {"directory": root, "config": config_path, "grid": grid_path, "truth": truth_path,
            "manifest": manifest_path, "files": files, "example_grids": example_grids,
            "ensemble": ensemble_path}
