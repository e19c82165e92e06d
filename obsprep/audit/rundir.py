"""Reading a build output directory: super-observation files, ledgers, configuration, grid.

A run directory holds one or more output sets of ``obsprep build``, each published by its
manifest ``<stem>_manifest.json`` naming the netCDF file ``<stem>.nc``, the ledger
``<stem>_ledger.csv`` (and JSON, Parquet) with their checksums
(:mod:`obsprep.writers.manifest`).  Every set is verified before anything is read: a file
missing, a checksum or a run id differing from the manifest, or a super-observation file
without a manifest (a build interrupted while publishing) is refused with one line.  All
super-observations become one long table with one row per super-observation: ``quantity``,
``sensor``, ``value``, the error parts, position, time and grid indices; a ``run`` column names
the file.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from obsprep.exceptions import InputFileError, OutputSetError
from obsprep.model.product import NETCDF_VARIABLES
from obsprep.model.quantities import QUANTITIES
from obsprep.writers.manifest import MANIFEST_SUFFIX, manifest_path, verify_output_set

#: per-quantity variables read into the long table (missing ones become NaN, NaT or "")
READ_VARIABLES = tuple(v for v in NETCDF_VARIABLES if v.suffix)
SUFFIXES = tuple(v.suffix for v in READ_VARIABLES)

@dataclass
class RunData:
    """Everything the audit reads from a run directory."""

    directory: Path
    superobs: pd.DataFrame
    ledger: pd.DataFrame
    configuration: dict
    configuration_file: str = ""
    files: list = field(default_factory=list)

    def correlation(self, sensor: str) -> float:
        """Within-sensor error correlation of an output sensor (0 when not configured)."""
        merged = self.configuration.get("superobs", {}).get("merge_sensors", {})
        for source in self.configuration.get("sources", []):
            name = source["sensor"]
            out = next((m for m, members in merged.items() if name in members), name)
            if out == sensor:
                return float(source.get("correlation", 0.0))
        return 0.0

    def representation_model(self) -> str:
        """The build's representation model (``constant`` when not configured)."""
        return str(self.configuration.get("superobs", {}).get("representation_model", "constant"))

    def source_sensors(self) -> dict:
        """Output sensor -> the configured source sensors written under it."""
        out = {}
        for source in self.configuration.get("sources", []):
            out.setdefault(self.output_sensor(source["sensor"]), []).append(source["sensor"])
        return out

    def output_sensor(self, source_sensor: str) -> str:
        """The output sensor a source is written under (after merging)."""
        merged = self.configuration.get("superobs", {}).get("merge_sensors", {})
        return next((m for m, members in merged.items() if source_sensor in members),
                    source_sensor)

    def grid(self, config_file=None):
        """The model grid of the run, rebuilt from its stored configuration.

        Relative grid paths resolve against the directory of ``config_file`` when given, else
        of the configuration file recorded in the output, else the run directory's parent or
        the run directory itself (the first where the grid files exist).
        """
        from obsprep.geo.grid import grid_from_config

        grid_cfg = self.configuration["grid"]
        candidates = []
        if config_file:
            candidates.append(Path(config_file).resolve().parent)
        if self.configuration_file:
            candidates.append(Path(self.configuration_file).parent)
        candidates += [self.directory.resolve().parent, self.directory.resolve(), Path.cwd()]
        needed = [grid_cfg[k] for k in ("file", "mask_file") if k in grid_cfg]
        for base in candidates:
            if all((base / p).exists() for p in needed):
                return grid_from_config(grid_cfg, base)
        raise InputFileError(self.files[0] if self.files else self.directory,
                             f"cannot find the grid files {needed} of the run's configuration "
                             f"(looked in {', '.join(map(str, candidates))}); give --config")


def _quantity_frame(ds, name) -> pd.DataFrame:
    n = ds.sizes[f"{name}_obs"]
    columns = {"quantity": np.full(n, name, dtype=object), "value": ds[name].to_numpy()}
    for declared in READ_VARIABLES:
        key, column = declared.variable_name(name), declared.column
        if key in ds:
            values = ds[key].to_numpy()
            if declared.flags_from_labels:
                meanings = str(ds[key].attrs.get("flag_meanings", "")).split()
                flags = np.atleast_1d(ds[key].attrs.get("flag_values", np.arange(len(meanings))))
                order = np.argsort(flags)
                position = np.clip(np.searchsorted(flags[order], values), 0, len(flags) - 1)
                values = np.asarray(meanings, dtype=object)[order][position]
            columns[column] = values
        elif declared.dtype.startswith("datetime64"):
            columns[column] = np.full(n, np.datetime64("NaT", "ns"))
        elif declared.dtype == "str" or declared.flags_from_labels:
            columns[column] = np.full(n, "", dtype=object)
        else:
            columns[column] = np.full(n, np.nan)
    return pd.DataFrame(columns)


def read_superobs_file(path) -> tuple[pd.DataFrame, dict]:
    """One super-observation file as a long table, and its global attributes."""
    import xarray as xr

    try:
        ds = xr.open_dataset(path)
    except (OSError, ValueError) as exc:
        raise InputFileError(path, f"cannot open as netCDF ({exc})") from exc
    with ds:
        frames = [_quantity_frame(ds, q) for q in QUANTITIES if f"{q}_obs" in ds.dims and q in ds]
        attrs = dict(ds.attrs)
    frame = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
        columns=["quantity", "value", *(v.column for v in READ_VARIABLES)])
    for col in ("sensor", "profile", "quantity", "error_origin"):
        frame[col] = frame[col].astype(object).astype(str)
    return frame, attrs


def _is_build_output(path: Path) -> bool:
    """Whether a netCDF file was written by ``obsprep build`` (``featureType = point`` and a
    ``configuration`` attribute); a file that cannot be opened is refused, naming it."""
    import netCDF4

    try:
        with netCDF4.Dataset(path) as ds:
            names = set(ds.ncattrs())
            return "configuration" in names and str(ds.getncattr("featureType")) == "point" \
                if "featureType" in names else False
    except OSError as exc:
        raise InputFileError(path, f"cannot open as netCDF ({exc}); not part of a published "
                                   f"output set (no manifest names it)") from None


def published_sets(directory: Path) -> dict:
    """{netCDF file name: verified manifest} of the output sets in ``directory``.

    Raises OutputSetError when a set is mixed or incomplete, or when a super-observation file
    has no manifest."""
    published = {}
    for path in sorted(directory.glob(f"*{MANIFEST_SUFFIX}")):
        manifest = verify_output_set(path)
        published[manifest.by_role("netcdf").name] = manifest
    for path in sorted(directory.glob("*.nc")):
        if path.name not in published and _is_build_output(path):
            raise OutputSetError(
                f"{path}: no manifest ({manifest_path(directory, path.stem).name}) publishes this "
                f"file, so it is not a complete output set (a build interrupted while writing?); "
                f"run the build again")
    return published


def load_run(run_dir) -> RunData:
    """Read every published output set of ``run_dir``: super-observations and ledgers.

    Raises OutputSetError when a set is mixed or incomplete (:func:`published_sets`), and
    InputFileError when the directory holds no super-observation file or no super-observation
    at all (an empty night: nothing to audit).
    """
    directory = Path(run_dir)
    if not directory.is_dir():
        raise InputFileError(directory, "not a directory; expected a build output directory")
    frames, ledgers, files = [], [], []
    configuration, configuration_file = {}, ""
    for name, manifest in published_sets(directory).items():
        path = directory / name
        frame, attrs = read_superobs_file(path)
        frame["run"] = path.name
        frames.append(frame)
        files.append(path)
        configuration = json.loads(attrs["configuration"])
        configuration_file = str(attrs.get("configuration_file", ""))
        ledger_file = manifest.by_role("ledger_csv")
        if ledger_file is not None:
            ledger = pd.read_csv(directory / ledger_file.name)
            ledger["run"] = path.name
            ledgers.append(ledger)
    if not frames:
        raise InputFileError(directory, "no super-observation file (*.nc written by obsprep "
                                        "build, with its manifest) in this directory")
    superobs = pd.concat(frames, ignore_index=True)
    ledger = pd.concat(ledgers, ignore_index=True) if ledgers else pd.DataFrame(
        columns=["file", "sensor", "read", "kept"])
    if superobs.empty:
        kept = int(pd.to_numeric(ledger.get("kept"), errors="coerce").fillna(0).sum()) \
            if "kept" in ledger else 0
        raise InputFileError(directory, f"the run has no super-observations "
                                        f"({', '.join(p.name for p in files)}: empty; the ledger "
                                        f"lists {len(ledger)} input file entries with {kept} "
                                        f"observations kept); nothing to audit")
    return RunData(directory=directory, superobs=superobs, ledger=ledger,
                   configuration=configuration, configuration_file=configuration_file,
                   files=files)
