"""The nightly build: sources -> observation tables -> QC and errors -> grid -> super-observations
-> writers, with a ledger of every raw observation.

Per-file work (:func:`process_file`) is independent and returns a mergeable
:class:`~obsprep.superobs.Accumulator`; partial results are always merged in the order of the
task list, so the output does not depend on how the files were distributed over processes.
"""

from __future__ import annotations

import datetime as dt
import os
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from .config import Config, load_config
from .error_rules import assign_errors
from .exceptions import ConfigError, InputFileError, ObsprepError
from .grid import grid_from_config
from .ledger import Ledger, LedgerEntry, entry_from_table
from .qc import basic_checks
from .quantities import QUANTITIES
from .readers import read
from .superobs import Accumulator
from .table import kept, reject
from .timeslots import seconds_since, slot_index

QUANTITY_NAMES = list(QUANTITIES)
KEY_NAMES = ["quantity", "sensor", "slot", "j", "i", "k", "profile", "t_start", "t_end"]


@dataclass
class FileResult:
    """What processing one file yields."""

    entry: LedgerEntry
    accumulator: Accumulator | None = None
    profile_names: dict = field(default_factory=dict)


@dataclass
class BuildResult:
    """What :func:`build` returns."""

    config: Config
    superobs: pd.DataFrame
    ledger: Ledger
    outputs: dict
    inputs: list


def output_sensors(cfg: Config) -> list[str]:
    """Sorted output sensor names (after merging); their index is the sensor key."""
    return sorted({cfg.output_sensor(s.sensor) for s in cfg.sources})


def sensor_correlations(cfg: Config) -> dict:
    """Within-sensor error correlation per output sensor; merged sources must agree."""
    out: dict[str, float] = {}
    for s in cfg.sources:
        name = cfg.output_sensor(s.sensor)
        if name in out and out[name] != s.correlation:
            raise ConfigError(f"sources[{s.index}].correlation",
                              f"sources merged into '{name}' have different correlations "
                              f"({out[name]} and {s.correlation})")
        out[name] = s.correlation
    return out


def rotate_drift_to_grid(table: pd.DataFrame, grid, i: np.ndarray, j: np.ndarray) -> None:
    """Pair east/north drift components of one file by ``row`` and rotate them onto the grid axes.

    A component whose partner is missing or rejected is rejected as ``vector_incomplete``.  With
    ``a`` the angle of the grid +i axis counterclockwise from east (see
    :meth:`obsprep.grid.ModelGrid.east_north_to_grid`):
    ``u_x = u cos a + v sin a``, ``v_y = -u sin a + v cos a``; component errors rotate as
    variances, ``sx^2 = cos^2 a se^2 + sin^2 a sn^2``, ``sy^2 = sin^2 a se^2 + cos^2 a sn^2``
    (independent component errors, common practice).
    """
    q = table["quantity"].astype(str).to_numpy()
    east = np.flatnonzero(q == "sea_ice_drift_east")
    north = np.flatnonzero(q == "sea_ice_drift_north")
    if len(east) == 0 and len(north) == 0:
        return
    rows = table["row"].to_numpy()
    ok = kept(table)
    east = east[np.argsort(rows[east], kind="stable")]
    north = north[np.argsort(rows[north], kind="stable")]
    common, ie, in_ = np.intersect1d(rows[east], rows[north], assume_unique=False, return_indices=True)
    pair_e, pair_n = east[ie], north[in_]
    paired = np.zeros(len(table), dtype=bool)
    both = ok[pair_e] & ok[pair_n]
    paired[pair_e[both]] = True
    paired[pair_n[both]] = True
    is_drift = np.zeros(len(table), dtype=bool)
    is_drift[east] = True
    is_drift[north] = True
    reject(table, is_drift & ~paired, "vector_incomplete")
    pe, pn = pair_e[both], pair_n[both]
    if len(pe) == 0:
        return
    u, v = table["value"].to_numpy()[pe], table["value"].to_numpy()[pn]
    ux, vy = grid.east_north_to_grid(u, v, i[pe], j[pe])
    a = grid.axis_angle(i[pe], j[pe])
    se, sn = table["error"].to_numpy()[pe], table["error"].to_numpy()[pn]
    c2, s2 = np.cos(a) ** 2, np.sin(a) ** 2
    values = table["value"].to_numpy(copy=True)
    errors = table["error"].to_numpy(copy=True)
    values[pe], values[pn] = ux, vy
    errors[pe], errors[pn] = np.sqrt(c2 * se**2 + s2 * sn**2), np.sqrt(s2 * se**2 + c2 * sn**2)
    table["value"], table["error"] = values, errors
    quantity = table["quantity"].cat.add_categories(
        [c for c in ("sea_ice_drift_x", "sea_ice_drift_y") if c not in table["quantity"].cat.categories])
    quantity[pe] = "sea_ice_drift_x"
    quantity[pn] = "sea_ice_drift_y"
    table["quantity"] = quantity


def process_file(cfg: Config, grid, source, path: str, file_index: int, sensor_names: list[str],
                 strict: bool = False) -> FileResult:
    """Read, check, assign errors, locate and accumulate one file of one source."""
    size = os.path.getsize(path) if os.path.exists(path) else 0
    try:
        if not os.path.exists(path):
            raise InputFileError(path, "file not found")
        table = read(path, kind=source.kind, sensor=source.sensor, **source.options)
    except InputFileError as exc:
        if strict:
            raise
        return FileResult(LedgerEntry(file=path, sensor=source.sensor, kind=source.kind,
                                      status="unreadable", message=str(exc.reason), size_bytes=size))
    kind = table.attrs.get("kind", source.kind)
    n = len(table)
    basic_checks(table, cfg.window, quantities=source.quantities, valid_range=source.valid_range)
    assign_errors(table, source.error, f"sources[{source.index}].error")

    # Model-grid checks on the rows still kept.
    live = kept(table)
    i = np.full(n, -1, dtype=np.int64)
    j = np.full(n, -1, dtype=np.int64)
    k = np.full(n, -1, dtype=np.int64)
    if live.any():
        li, lj, lk, reason = grid.classify(table["lon"].to_numpy()[live], table["lat"].to_numpy()[live],
                                           table["depth"].to_numpy()[live])
        i[live], j[live], k[live] = li, lj, lk
        full_reason = np.full(n, "", dtype=object)
        full_reason[live] = reason
        for code in ("outside_grid", "land", "below_bathymetry", "below_deepest_layer"):
            reject(table, full_reason == code, code)
    rotate_drift_to_grid(table, grid, i, j)

    live = kept(table)
    result = FileResult(entry=None)
    if live.any():
        sub = table.loc[live]
        quantity = sub["quantity"].astype(str).to_numpy()
        q_code = pd.Categorical(quantity, categories=QUANTITY_NAMES).codes.astype(np.int64)
        s_code = np.full(len(sub), sensor_names.index(cfg.output_sensor(source.sensor)), dtype=np.int64)
        slot = slot_index(sub["time"].to_numpy(), cfg.window)
        profile = np.full(len(sub), -1, dtype=np.int64)
        if cfg.superobs.get("profiles", "per_profile") == "per_profile":
            is_profile = np.array([not QUANTITIES[name].surface for name in QUANTITY_NAMES])[q_code]
            group_codes = sub["group"].cat.codes.to_numpy().astype(np.int64)
            profile[is_profile] = (np.int64(file_index) << 32) + group_codes[is_profile]
            cats = sub["group"].cat.categories
            for code in np.unique(group_codes[is_profile]):
                result.profile_names[int((file_index << 32) + code)] = str(cats[code])
        t = seconds_since(sub["time"].to_numpy(), cfg.window.analysis_time)
        t_end = seconds_since(sub["time_end"].to_numpy(), cfg.window.analysis_time)
        interval = np.isfinite(t_end)
        t_start_key = np.where(interval, np.round(np.nan_to_num(t)), 0).astype(np.int64)
        t_end_key = np.where(interval, np.round(np.nan_to_num(t_end)), 0).astype(np.int64)
        lon, lat = sub["lon"].to_numpy(), sub["lat"].to_numpy()
        keys = {"quantity": q_code, "sensor": s_code, "slot": slot, "j": j[live], "i": i[live],
                "k": k[live], "profile": profile, "t_start": t_start_key, "t_end": t_end_key}
        result.accumulator = Accumulator.from_observations(
            keys, sub["value"].to_numpy(), sub["error"].to_numpy(), t, lon, lat, sub["depth"].to_numpy(),
            score=grid.cell_center_distance(lon, lat, i[live], j[live]),
            tiebreak=(np.int64(file_index) << 40) + sub["row"].to_numpy().astype(np.int64),
        )
    result.entry = entry_from_table(table, path, source.sensor, kind, size)
    return result


def _process_task(args):
    return process_file(*args)


def finalize_superobs(cfg: Config, accumulator: Accumulator, sensor_names, profile_names) -> pd.DataFrame:
    """Turn the merged accumulator into the super-observation table (one row per group)."""
    mode = cfg.superobs.get("mode", "mean")
    if accumulator is None or accumulator.n_groups == 0:
        return pd.DataFrame(columns=["quantity", "sensor", "slot", "i", "j", "k", "count", "value", "error"])
    keys = accumulator.keys
    corr_by_sensor = sensor_correlations(cfg)
    correlation = np.array([corr_by_sensor[s] for s in sensor_names])[keys["sensor"]]
    rep = cfg.superobs.get("representation_error", {})
    floor = cfg.superobs.get("error_floor", {})
    representation = np.array([rep.get(q, 0.0) for q in QUANTITY_NAMES])[keys["quantity"]]
    floors = np.array([floor.get(q, 0.0) for q in QUANTITY_NAMES])[keys["quantity"]]
    frame = accumulator.finalize(mode=mode, correlation=correlation, representation_error=representation,
                                 floor=floors)
    out = pd.DataFrame({
        "quantity": np.array(QUANTITY_NAMES, dtype=object)[frame["quantity"].to_numpy()],
        "sensor": np.array(sensor_names, dtype=object)[frame["sensor"].to_numpy()],
        "slot": frame["slot"].to_numpy(), "i": frame["i"].to_numpy(), "j": frame["j"].to_numpy(),
        "k": frame["k"].to_numpy(),
    })
    out["profile"] = [profile_names.get(int(p), "") for p in frame["profile"].to_numpy()]
    for col in ("count", "value", "spread", "value_min", "value_max", "error", "error_instrument",
                "error_representation", "lon", "lat", "depth"):
        out[col] = frame[col].to_numpy()
    offset = frame["time"].to_numpy()
    out["time_offset"] = offset
    out["time"] = cfg.window.analysis_time + (offset * 1e9).round().astype("timedelta64[ns]")
    interval = frame["t_end"].to_numpy() != frame["t_start"].to_numpy()
    t_end = cfg.window.analysis_time + (frame["t_end"].to_numpy() * 10**9).astype("timedelta64[ns]")
    out["time_end"] = np.where(interval, t_end, np.datetime64("NaT", "ns"))
    return out


def build(config, date=None, out=None, strict=False, progress=False, jobs=1) -> BuildResult:
    """Run the nightly build and write its outputs.

    Parameters
    ----------
    config : path of a TOML file or dict (see ``schemas/config.schema.json``)
    date : 'YYYY-MM-DD' or datetime.date, optional
        Run date; defaults to ``window.date``.
    out : path, optional
        Output directory overriding ``output.directory``.
    strict : bool
        Stop at the first unreadable file instead of listing it in the ledger.
    progress : bool
        Show a progress bar over the files.
    jobs : int
        Number of local processes for the per-file work.

    Returns
    -------
    BuildResult
    """
    from .writers import write_outputs

    cfg = load_config(config, date)
    grid = grid_from_config(cfg.grid, cfg.base_dir)
    sensor_names = output_sensors(cfg)
    sensor_correlations(cfg)
    days = cfg.window.days()
    tasks = []
    for source in cfg.sources:
        for path in source.files(cfg.base_dir, days):
            tasks.append((cfg, grid, source, path, len(tasks), sensor_names, strict))

    results: list[FileResult] = []
    bar = None
    if progress and tasks:
        from tqdm import tqdm

        bar = tqdm(total=len(tasks), unit="file", desc="obsprep build", leave=False)
    if jobs and jobs > 1 and len(tasks) > 1:
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            for r in pool.map(_process_task, tasks):
                results.append(r)
                if bar:
                    bar.update()
    else:
        for t in tasks:
            results.append(_process_task(t))
            if bar:
                bar.update()
    if bar:
        bar.close()

    ledger = Ledger()
    profile_names: dict = {}
    for r in results:
        ledger.add(r.entry)
        profile_names.update(r.profile_names)
    ledger.check()
    partials = [r.accumulator for r in results if r.accumulator is not None]
    merged = Accumulator.merge(partials) if partials else None
    superobs = finalize_superobs(cfg, merged, sensor_names, profile_names)
    kept_total = sum(e.kept for e in ledger.entries)
    counted = int(superobs["count"].sum()) if len(superobs) else 0
    if counted != kept_total:
        raise ObsprepError(f"internal error: {kept_total} observations kept but {counted} in super-observations")
    inputs = [{"file": e.file, "sensor": e.sensor, "size_bytes": e.size_bytes, "status": e.status}
              for e in ledger.entries]
    outputs = write_outputs(cfg, superobs, ledger, grid, inputs, out_dir=out, version=__version__,
                            created=dt.datetime.now(dt.timezone.utc))
    return BuildResult(config=cfg, superobs=superobs, ledger=ledger, outputs=outputs, inputs=inputs)


__all__ = ["build", "process_file", "finalize_superobs", "BuildResult", "Path"]
