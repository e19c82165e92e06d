"""The nightly build: sources -> observation tables -> QC and errors -> grid -> super-observations
-> writers, with a ledger of every raw observation.

Per-file work (:func:`process_file`) is independent and returns a mergeable
:class:`~obsprep.superobs.Accumulator`; partial results are always merged in the order of the
task list, so the output does not depend on how the files were distributed over processes.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from obsprep import __version__
from obsprep.errors.rules import assign_errors
from obsprep.exceptions import InputFileError, ObsprepError
from obsprep.geo.grid import grid_from_config
from obsprep.geo.grid.base import CLASSIFY_REASONS
from obsprep.model.quantities import QUANTITIES, QUANTITY_NAMES
from obsprep.model.table import WARNINGS, kept, reject
from obsprep.qc import find_duplicates, grid_checks, table_checks
from obsprep.readers import read, read_parts
from obsprep.readers.cf import NOT_IN_TABLE, out_of_memory
from obsprep.run.execution import FixedTreeReducer, run_tasks
from obsprep.run.ledger import NO_FILES, UNREADABLE, Ledger, LedgerEntry, entry_from_table, rejected_counts
from obsprep.run.log import LOGGER, file_log
from obsprep.run.outcome import Outcome, build_outcome
from obsprep.run.tasks import FileResult, FileTask
from obsprep.settings.config import Config, load_config, output_sensors
from obsprep.superobs import Accumulator
from obsprep.superobs.finalize import finalize_superobs
from obsprep.superobs.keys import (
    ERROR_GROUP_KEY,
    NO_PROFILE,
    group_keys,
    interval_keys,
    profile_key,
    thinning_tiebreak,
)
from obsprep.superobs.timeslots import interval_placement, seconds_since, slot_index

#: kept rows of one file accumulated per step (bounds the temporary memory; see process_file)
ACCUMULATE_CHUNK_ROWS = 1 << 19
#: the build's log file is the output's stem with this suffix, beside the outputs
LOG_SUFFIX = "_build.log"
#: values per variable above which a file is read in parts (readers that can; see
#: process_file): bounds the memory of one huge file whatever its size (a 50-million-pixel
#: granule builds within 0.8 GiB, benchmarks/README.md)
READ_PART_VALUES = 1 << 22


@dataclass
class BuildResult:
    """What :func:`build` returns."""

    config: Config
    superobs: pd.DataFrame
    ledger: Ledger
    outputs: dict
    inputs: list
    #: what the run delivered, and the exit status that states it (:mod:`obsprep.run.outcome`)
    outcome: Outcome = None


def _quantity_mask(table: pd.DataFrame, name: str) -> np.ndarray:
    """Rows of quantity ``name``, from the categorical codes (no string comparison per row)."""
    categories = table["quantity"].cat.categories
    if name not in categories:
        return np.zeros(len(table), dtype=bool)
    return table["quantity"].cat.codes.to_numpy() == categories.get_loc(name)


def _quantity_codes(table: pd.DataFrame) -> np.ndarray:
    """Position of each row's quantity in QUANTITY_NAMES (int64; -1 for an unknown name)."""
    categories = [str(c) for c in table["quantity"].cat.categories]
    lookup = np.array([QUANTITY_NAMES.index(c) if c in QUANTITY_NAMES else -1 for c in categories]
                      + [-1], dtype=np.int64)
    return lookup[table["quantity"].cat.codes.to_numpy().astype(np.int64)]


def rotate_drift_to_grid(table: pd.DataFrame, grid, i: np.ndarray, j: np.ndarray):
    """Pair east/north drift components of one file by ``row`` and rotate them onto the grid axes.

    A component whose partner is missing or rejected is rejected as ``vector_incomplete``.  With
    ``a`` the angle of the grid +i axis counterclockwise from east (see
    :meth:`obsprep.geo.grid.ModelGrid.east_north_to_grid`):
    ``u_x = u cos a + v sin a``, ``v_y = -u sin a + v cos a``; component errors rotate as
    variances, ``sx^2 = cos^2 a se^2 + sin^2 a sn^2``, ``sy^2 = sin^2 a se^2 + cos^2 a sn^2``
    (independent component errors, common practice), and their covariance is
    ``cov(u_x, v_y) = sin a cos a (sn^2 - se^2)``.

    Returns ``(covariance, partner_error)`` per row of the table (the covariance of a
    component's error with its partner's, and the partner's error; 0 and 1 for other rows), or
    ``(None, None)`` when the file holds no complete vector.
    """
    east = np.flatnonzero(_quantity_mask(table, "sea_ice_drift_east"))
    north = np.flatnonzero(_quantity_mask(table, "sea_ice_drift_north"))
    if len(east) == 0 and len(north) == 0:
        return None, None
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
        return None, None
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
    # cov(u_x, v_y) = sin a cos a (sn^2 - se^2): kept on both components' rows with the
    # partner's error, for the covariance of the two super-observations
    covariance = np.zeros(len(table))
    covariance[pe] = covariance[pn] = np.sin(a) * np.cos(a) * (sn**2 - se**2)
    partner = np.ones(len(table))
    partner[pe], partner[pn] = errors[pn], errors[pe]
    quantity = table["quantity"].cat.add_categories(
        [c for c in ("sea_ice_drift_x", "sea_ice_drift_y") if c not in table["quantity"].cat.categories])
    quantity[pe] = "sea_ice_drift_x"
    quantity[pn] = "sea_ice_drift_y"
    table["quantity"] = quantity
    return covariance, partner


def _rows(array: np.ndarray, selected: np.ndarray) -> np.ndarray:
    """``array[selected]`` for a boolean ``selected``; the array itself when every row is."""
    return array if selected.all() else array[selected]


def process_file(cfg: Config, grid, source, path: str, file_index: int, sensor_names: list[str],
                 strict: bool = False, duplicate_groups=None) -> FileResult:
    """Read, check, assign errors, locate and accumulate one file of one source.

    A file bigger than :data:`READ_PART_VALUES` values per variable is read in parts along its
    reader's slice dimension (:func:`obsprep.readers.read_parts`), each part processed like a
    file, their ledger counts added and their accumulators merged in order.  When any part
    cannot be read, the whole file is listed as unreadable and nothing of it is used.

    ``duplicate_groups``: the file's profiles that lost the cross-file duplicate check
    (default: looked up in ``cfg.duplicate_groups``, filled by :func:`build`).
    """
    size = os.path.getsize(path) if os.path.exists(path) else 0
    if duplicate_groups is None:
        duplicate_groups = cfg.duplicate_groups.get((source.index, path), ())
    results = []
    try:
        if not os.path.exists(path):
            raise InputFileError(path, "file not found")
        parts = read_parts(path, kind=source.kind, reader_profile=source.reader,
                           max_values=READ_PART_VALUES)
        for part in parts:
            table = read(path, kind=source.kind, reader_profile=source.reader,
                         leave_out_rejected=True, row_slice=part, sensor=source.sensor,
                         **source.options)
            results.append(_process_table(cfg, grid, source, path, table, file_index,
                                          sensor_names, size, duplicate_groups))
            del table
    except (InputFileError, MemoryError) as exc:
        if strict:
            raise
        if isinstance(exc, MemoryError):  # one file too big for memory must not end the night
            exc = out_of_memory(path)
        message = (f"variable '{exc.variable}': " if exc.variable else "") + str(exc.reason)
        return FileResult(LedgerEntry(file=path, sensor=source.sensor, kind=source.kind,
                                      status=UNREADABLE, message=message, size_bytes=size))
    result = results[0] if len(results) == 1 else _combine_parts(results)
    if result.accumulator is not None:
        # every error group of the file is complete now: keep its structure, drop the key
        result.accumulator = result.accumulator.collapse(ERROR_GROUP_KEY, source.correlation)
    return result


def pair_correlation_of(source):
    """``(rho0, length_m)`` of a source whose within-group correlation falls off with distance
    (``correlation_length_km``), else None (a constant correlation)."""
    if source.correlation_length_km is None or source.correlation == 0:
        return None
    return source.correlation, source.correlation_length_km * 1000.0


def _combine_parts(results: list[FileResult]) -> FileResult:
    """One file's result from the results of its parts (ledger counts added, accumulators
    merged in part order)."""
    first = results[0].entry
    rejected: dict = {}
    for r in results:
        for reason, count in r.entry.rejected.items():
            rejected[reason] = rejected.get(reason, 0) + count
    entry = LedgerEntry(file=first.file, sensor=first.sensor, kind=first.kind,
                        size_bytes=first.size_bytes, read=sum(r.entry.read for r in results),
                        kept=sum(r.entry.kept for r in results), rejected=rejected,
                        warnings=list(dict.fromkeys(w for r in results for w in r.entry.warnings)))
    entry.check()
    reducer = FixedTreeReducer()
    profile_names: dict = {}
    for r in results:
        if r.accumulator is not None:
            reducer.add(r.accumulator)
        profile_names.update(r.profile_names)
    return FileResult(entry=entry, accumulator=reducer.result(), profile_names=profile_names)


@dataclass
class FileWork:
    """One file (or one part of it) on its way through :data:`PER_FILE_STEPS`.

    ``table`` is the observation table (rows the reader rejected are dropped by the first
    step and counted in ``counted_by_reader``); ``i``, ``j``, ``k`` the model cell and layer
    of each row once located (-1 where none); ``result`` what the file yields.
    """

    cfg: Config
    grid: object
    source: object
    path: str
    file_index: int
    sensor_names: list
    duplicate_groups: object
    table: pd.DataFrame
    counted_by_reader: dict = field(default_factory=dict)
    i: np.ndarray | None = None
    j: np.ndarray | None = None
    k: np.ndarray | None = None
    #: per row, the error covariance with the row's vector partner and the partner's error
    #: (drift components), or None
    cross_covariance: np.ndarray | None = None
    partner_error: np.ndarray | None = None
    result: FileResult = field(default_factory=lambda: FileResult(entry=None))
    #: problems met on the way that did not stop the file (one line each, for the ledger)
    warnings: list = field(default_factory=list)


def count_reader_rejections(work: FileWork) -> None:
    """Count the rows the reader rejected (fill, provider flags, quality level) and those it
    left out of the table, for the ledger, and drop them: on a cloudy swath they are most
    rows, and no later step needs them."""
    table = work.table
    counted = rejected_counts(table)
    if counted:
        table = table.loc[kept(table)].reset_index(drop=True)
    for reason, count in table.attrs.pop(NOT_IN_TABLE, {}).items():
        counted[reason] = counted.get(reason, 0) + count
    work.table, work.counted_by_reader = table, counted
    work.warnings.extend(table.attrs.pop(WARNINGS, []))


def check_table(work: FileWork) -> None:
    """The quality-control checks that need no model grid (:func:`obsprep.qc.table_checks`)."""
    source = work.source
    table_checks(work.table, work.cfg.window, quantities=source.quantities,
                 valid_range=source.valid_range, settings=source.qc,
                 duplicate_groups=work.duplicate_groups)


def assign_raw_errors(work: FileWork) -> None:
    """The raw error of every row from the source's error rule (:mod:`obsprep.errors`)."""
    assign_errors(work.table, work.source.error, f"sources[{work.source.index}].error")


def locate_on_grid(work: FileWork) -> None:
    """Model cell and layer of the rows still kept; outside the grid, land, below the
    bathymetry or the deepest layer rejected; then the checks that need the grid."""
    table, grid = work.table, work.grid
    n = len(table)
    live = kept(table)
    work.i = np.full(n, -1, dtype=np.int64)
    work.j = np.full(n, -1, dtype=np.int64)
    work.k = np.full(n, -1, dtype=np.int64)
    if not live.any():
        return
    li, lj, lk, reason = grid.classify_codes(*(_rows(table[c].to_numpy(), live)
                                               for c in ("lon", "lat", "depth")))
    work.i[live], work.j[live], work.k[live] = li, lj, lk
    full_reason = np.zeros(n, dtype=np.int8)
    full_reason[live] = reason
    for position, code in enumerate(CLASSIFY_REASONS, start=1):
        reject(table, full_reason == position, code)
    if work.source.qc is not None:
        grid_checks(table, grid, work.i, work.j, work.source.qc)


def rotate_drift(work: FileWork) -> None:
    """Drift vectors from east/north onto the model grid axes (:func:`rotate_drift_to_grid`),
    with the covariance of the two components' errors."""
    work.cross_covariance, work.partner_error = rotate_drift_to_grid(work.table, work.grid,
                                                                     work.i, work.j)


def accumulate(work: FileWork) -> None:
    """The kept rows into the file's mergeable super-observation sums, a chunk of rows at a
    time (bounded temporary memory), merged in a fixed order."""
    table, cfg, source, file_index = work.table, work.cfg, work.source, work.file_index
    i, j, k, grid, sensor_names = work.i, work.j, work.k, work.grid, work.sensor_names
    live = kept(table)
    result = work.result
    if live.any():
        live_rows = np.flatnonzero(live)
        # the group's quantity is the output quantity (superobs.merge_quantities)
        merged = np.array([QUANTITY_NAMES.index(cfg.output_quantity(q)) for q in QUANTITY_NAMES]
                          + [-1], dtype=np.int64)
        q_all = merged[_quantity_codes(table)]
        sensor_code = sensor_names.index(cfg.output_sensor(source.sensor))
        per_profile = cfg.superobs.profiles == "per_profile"
        is_profile_quantity = np.array([not QUANTITIES[name].surface for name in QUANTITY_NAMES])
        group_codes = table["group"].cat.codes.to_numpy().astype(np.int64)
        if per_profile:
            profile_rows = live_rows[is_profile_quantity[q_all[live_rows]]]
            categories = table["group"].cat.categories
            for code in np.unique(group_codes[profile_rows]):
                result.profile_names[int(profile_key(file_index, code))] = str(categories[code])
        columns = {name: table[name].to_numpy() for name in
                   ("value", "error", "lon", "lat", "depth", "time", "time_end", "row")}
        thinning = cfg.superobs.mode == "thin"  # the score is costly: only then
        reducer = FixedTreeReducer()
        # Row chunks bound the temporary memory of a big file; they are merged in a fixed
        # order, so the result does not depend on how files are spread over processes.
        for start in range(0, live_rows.size, ACCUMULATE_CHUNK_ROWS):
            rows = live_rows[start:start + ACCUMULATE_CHUNK_ROWS]
            m = rows.size
            if m and rows[-1] - rows[0] == m - 1:
                rows = slice(int(rows[0]), int(rows[-1]) + 1)  # consecutive rows: views, no copies

            def constant(value):
                return np.broadcast_to(np.int64(value), (m,))  # no memory per row

            q_code = q_all[rows]
            # the rows' pass, granule or profile in this file: their error group, and the
            # profile key when profiles are averaged one by one
            error_group = profile_key(file_index, group_codes[rows])
            profile = constant(NO_PROFILE)
            if per_profile:
                is_profile = is_profile_quantity[q_code]
                if is_profile.any():
                    profile = np.where(is_profile, error_group, np.int64(NO_PROFILE))
            time_end = columns["time_end"][rows]
            t_end = seconds_since(time_end, cfg.window.analysis_time)
            t_start_key, t_end_key = interval_keys(
                seconds_since(columns["time"][rows], cfg.window.analysis_time), t_end, constant)
            # slot and time offset at the interval's placement (superobs.interval_time)
            placed = interval_placement(columns["time"][rows], time_end, cfg.superobs.interval_time)
            t = seconds_since(placed, cfg.window.analysis_time)
            at_end = None if cfg.superobs.interval_time != "end" else ~np.isnat(time_end)
            lon, lat = columns["lon"][rows], columns["lat"][rows]
            ii, jj = i[rows], j[rows]
            keys = group_keys(quantity=q_code, sensor=constant(sensor_code),
                              slot=slot_index(placed, cfg.window, at_end), j=jj, i=ii,
                              k=k[rows], profile=profile, t_start=t_start_key, t_end=t_end_key)
            keys[ERROR_GROUP_KEY] = error_group
            cross = None if work.cross_covariance is None else work.cross_covariance[rows]
            partner = None if work.partner_error is None else work.partner_error[rows]
            reducer.add(Accumulator.from_observations(
                keys, columns["value"][rows], columns["error"][rows], t, lon, lat,
                columns["depth"][rows],
                score=grid.cell_center_distance(lon, lat, ii, jj) if thinning else None,
                tiebreak=thinning_tiebreak(file_index, columns["row"][rows]) if thinning else None,
                cross_covariance=cross, partner_error=partner,
                pair_correlation=pair_correlation_of(source),
            ))
        result.accumulator = reducer.result()


#: the per-file work after reading, in order; each step reads and updates one :class:`FileWork`
PER_FILE_STEPS = (count_reader_rejections, check_table, assign_raw_errors, locate_on_grid,
                  rotate_drift, accumulate)


def _process_table(cfg: Config, grid, source, path: str, table: pd.DataFrame, file_index: int,
                   sensor_names: list[str], size: int, duplicate_groups) -> FileResult:
    """Everything after reading, for one file or one part of it (see :func:`process_file`):
    :data:`PER_FILE_STEPS` in order, then the file's ledger entry."""
    kind = table.attrs.get("kind", source.kind)
    work = FileWork(cfg=cfg, grid=grid, source=source, path=path, file_index=file_index,
                    sensor_names=sensor_names, duplicate_groups=duplicate_groups, table=table)
    del table  # the steps may replace the table; hold no second reference
    for step in PER_FILE_STEPS:
        step(work)
    work.result.entry = entry_from_table(work.table, path, source.sensor, kind, size,
                                         counted_earlier=work.counted_by_reader)
    work.result.entry.warnings = list(dict.fromkeys(work.warnings + work.table.attrs.pop(WARNINGS, [])))
    return work.result


def build(config, date=None, out=None, strict=False, progress=False, jobs=1,
          scheduler=None) -> BuildResult:
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
    scheduler : str or distributed.Client, optional
        Run the per-file work on this Dask cluster instead (needs ``obsprep[dask]``); see
        :mod:`obsprep.run.execution`.  Results are bit-for-bit those of ``jobs=1``.

    Returns
    -------
    BuildResult
    """
    from obsprep.writers import OutputSet

    started = dt.datetime.now(dt.UTC)
    cfg = load_config(config, date)
    # the grid and mask files are configuration (a problem there is a ConfigError): read
    # before anything is written, so a bad configuration leaves no trace in the outputs
    grid = grid_from_config(cfg.grid, cfg.base_dir)
    sensor_names = output_sensors(cfg)
    days = cfg.window.days()
    # the output directory is prepared (and held) before any observation file is read
    with OutputSet(cfg, out) as output_set, \
            file_log(output_set.directory / f"{output_set.stem}{LOG_SUFFIX}") as log_path:
        run_warnings = [f"removed a temporary file left by an earlier run: {p}"
                        for p in output_set.removed_stale]
        tasks, no_files = [], {}
        for source in cfg.sources:
            files, unmatched = source.find_files(cfg.base_dir, days)
            for path in files:
                tasks.append(FileTask(source, path, len(tasks)))
            if not files:
                no_files[source.index] = LedgerEntry(
                    file=" ".join(unmatched), sensor=source.sensor, kind=source.kind, status=NO_FILES,
                    message=f"no file matches {', '.join(unmatched)}")
            elif unmatched:
                run_warnings.append(f"source '{source.sensor}': no file matches {', '.join(unmatched)}")
        for line in run_warnings:
            LOGGER.warning("warning: %s", line)
        # the one cross-file step: decide duplicate profiles before the independent per-file work
        cfg.duplicate_groups = find_duplicates(tasks)
        executed = run_tasks(process_file, cfg, grid, tasks, sensor_names, strict=strict, jobs=jobs,
                             scheduler=scheduler, progress=progress)

        ledger = Ledger()
        by_source = {}
        for task, entry in zip(tasks, executed.entries):
            by_source.setdefault(task.source.index, []).append(entry)
        for source in cfg.sources:
            for entry in by_source.get(source.index, [no_files.get(source.index)]):
                ledger.add(entry)
        ledger.check()
        report_problems(ledger)
        profile_names = executed.profile_names
        merged, executed.accumulator = executed.accumulator, None
        superobs = finalize_superobs(cfg, merged, sensor_names, profile_names, grid=grid)
        del merged  # the sums are in the table now: free them before the writers need memory
        kept_total = sum(e.kept for e in ledger.entries)
        counted = int(superobs["count"].sum()) if len(superobs) else 0
        if counted != kept_total:
            raise ObsprepError(f"internal error: {kept_total} observations kept but {counted} in super-observations")
        outcome = build_outcome(cfg.sources, ledger.entries, len(superobs))
        ledger.metadata = run_metadata(cfg, started, outcome, run_warnings)
        inputs = [{"file": e.file, "sensor": e.sensor, "size_bytes": e.size_bytes, "status": e.status}
                  for e in ledger.entries if e.status != NO_FILES]
        outputs = output_set.publish(superobs, ledger, grid, inputs, version=__version__,
                                     created=dt.datetime.now(dt.UTC))
        outputs["log"] = log_path
        (LOGGER.info if outcome.exit_status == 0 else LOGGER.warning)(outcome.line())
    return BuildResult(config=cfg, superobs=superobs, ledger=ledger, outputs=outputs, inputs=inputs,
                       outcome=outcome)


def report_problems(ledger: Ledger) -> None:
    """Log every unreadable file, source without files and per-file warning of the run (at
    WARNING: on stderr and in the build's log file, whatever ``-q`` says)."""
    for entry in ledger.entries:
        if entry.status == UNREADABLE:
            LOGGER.warning("unreadable: %s (%s): %s", entry.file, entry.sensor, entry.message)
        elif entry.status == NO_FILES:
            LOGGER.warning("no files: source '%s': %s", entry.sensor, entry.message)
        for warning in entry.warnings:
            LOGGER.warning("warning: %s (%s): %s", entry.file, entry.sensor, warning)


def configuration_hash(cfg: Config) -> str:
    """SHA-256 of the configuration as parsed (canonical JSON, keys sorted): the same settings
    give the same hash whatever the file's layout and comments."""
    text = json.dumps(cfg.raw, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def run_metadata(cfg: Config, started: dt.datetime, outcome: Outcome, warnings: list) -> dict:
    """The run's metadata for the ledger JSON (times are UTC ISO 8601)."""
    iso = lambda t: np.datetime_as_string(t, unit="s") + "Z"  # noqa: E731
    return {
        "software": "obsprep", "version": __version__,
        "date": cfg.date.isoformat(), "analysis_time": iso(cfg.window.analysis_time),
        "window_start": iso(cfg.window.start), "window_end": iso(cfg.window.end),
        "configuration_file": str(cfg.path.resolve()) if cfg.path else "",
        "configuration_sha256": configuration_hash(cfg),
        "started": started.strftime("%Y-%m-%dT%H:%M:%SZ"),
        "finished": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "exit_status": outcome.exit_status, "outcome": outcome.name, "problems": list(outcome.problems),
        "warnings": list(warnings),
        "required_sources": [s.sensor for s in cfg.sources if s.required],
        "optional_sources": [s.sensor for s in cfg.sources if not s.required],
    }


__all__ = ["build", "process_file", "finalize_superobs", "BuildResult"]
