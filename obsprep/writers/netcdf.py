"""CF netCDF super-observation file (featureType point), one dimension per quantity.

Each quantity ``q`` present gets a dimension ``q_obs`` and the variables declared in
:data:`obsprep.model.product.OUTPUT_VARIABLES`: ``q`` (the value, with its CF standard_name and
canonical units) and ``q_<suffix>`` (errors, spread, count, position, time, grid indices, sensor;
``q_profile`` for profiles, ``q_time_end`` for interval observations).  Keeping one dimension per
quantity lets every variable carry one standard_name and one unit, as CF requires.
The global attribute ``error_settings`` (JSON) gives per quantity its representation error and
error floor, their units and whether each came from the configuration or the quantity's default.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import xarray as xr

from obsprep.model.product import NETCDF_VARIABLES
from obsprep.model.quantities import QUANTITIES
from obsprep.settings.stages import error_settings_of


def _iso(t) -> str:
    return str(np.datetime64(t, "s")) + "Z"


def superobs_dataset(superobs, cfg, grid, inputs, version: str, created, run_id: str = "") -> xr.Dataset:
    """Build the xarray Dataset of the super-observation file; ``run_id`` is the id of the
    output set it belongs to (:mod:`obsprep.writers.manifest`)."""
    analysis = _iso(cfg.window.analysis_time)
    time_units = f"seconds since {analysis[:-1].replace('T', ' ')}"
    data_vars, encoding = {}, {}
    present = set(superobs["quantity"].unique())  # once, not once per known quantity
    for name in [q for q in QUANTITIES if q in present]:
        q = QUANTITIES[name]
        same = superobs["quantity"] == name
        sub = superobs if same.all() else superobs[same]  # one quantity: no copy of the table
        dim = f"{name}_obs"
        for declared in NETCDF_VARIABLES:
            if not declared.applies_to(q) or (declared.error_part and "error_spread" not in sub):
                continue
            key = declared.variable_name(name)
            attrs = declared.netcdf_attributes(name, q)
            if declared.flags_from_labels:
                values, labels = _label_flags(sub[declared.column])
                attrs["flag_values"] = np.arange(len(labels), dtype=np.int8)
                attrs["flag_meanings"] = " ".join(cf_flag_meaning(label) for label in labels)
                attrs["comment"] = "rules as labelled in the configuration: " + ", ".join(labels)
            else:
                values = _stored(declared, sub[declared.column])
            if declared.flag_values is not None:
                attrs["flag_values"] = np.array(list(declared.flag_values.values()), dtype=np.int8)
                attrs["flag_meanings"] = " ".join(declared.flag_values)
            data_vars[key] = xr.Variable(dim, values, attrs=attrs)
            if declared.dtype.startswith("datetime64"):
                encoding[key] = {"units": time_units, "calendar": "standard", "dtype": "float64"}
    for key, v in data_vars.items():
        if v.dtype.kind == "f" and key not in encoding:
            encoding[key] = {"_FillValue": np.nan}
    ds = xr.Dataset(data_vars)
    ds.attrs = {
        "Conventions": "CF-1.10",
        "featureType": "point",
        "title": cfg.raw.get("title", "obsprep super-observations"),
        "institution": "",
        "source": f"obsprep {version}",
        "history": f"{_iso(np.datetime64(created.replace(tzinfo=None)))} obsprep {version} build",
        "software_version": version,
        "run_id": run_id,
        "analysis_time": analysis,
        "window_start": _iso(cfg.window.start),
        "window_end": _iso(cfg.window.end),
        "slot_seconds": float(cfg.window.slot_seconds),
        "superobs_mode": cfg.superobs.mode,
        # per output quantity: representation error and floor with units and whether each is
        # the configuration's or the quantity's default
        "error_settings": json.dumps(error_settings_of(
            cfg.superobs, [q for q in QUANTITIES if q in present])),
        "spread_combination": cfg.superobs.spread_combination,
        "configuration_file": str(cfg.path.resolve()) if cfg.path else "",
        "grid_shape": f"ny={grid.ny} nx={grid.nx} nk={len(grid.layer_interfaces) - 1}",
        "layer_interfaces_m": np.asarray(grid.layer_interfaces, dtype=float),
        "configuration": json.dumps(cfg.raw, default=str),
        "input_files": json.dumps(inputs),
    }
    return ds, encoding


def cf_flag_meaning(label: str) -> str:
    """An error-origin label as a CF flag meaning (letters, digits, '_', '-', '.')."""
    text = str(label).replace("*", "_times_").replace("+", "_plus_")
    return re.sub(r"[^A-Za-z0-9_.-]", "_", text) or "unset"


def _stored(declared, column: pd.Series) -> np.ndarray:
    """The values of a table column in the declared stored dtype."""
    if declared.dtype == "str":
        return column.astype(str).to_numpy(dtype=object)
    if declared.dtype.startswith("datetime64"):
        return column.to_numpy(dtype=declared.dtype)
    if declared.dtype == "float64":
        return np.asarray(column)
    return np.asarray(column).astype(declared.dtype)


def _label_flags(labels: pd.Series) -> tuple[np.ndarray, list[str]]:
    """int8 codes and sorted text labels of a label column."""
    # through pandas' factorisation (a Python set of every row is slow)
    codes, uniques = pd.factorize(labels.astype(str), sort=True)
    return codes.astype(np.int8), [str(label) for label in uniques]


def write_netcdf(ds: xr.Dataset, encoding: dict, path) -> None:
    """Write ``ds`` to ``path`` (netCDF4 format)."""
    ds.to_netcdf(path, format="NETCDF4", engine="netcdf4", encoding=encoding)
