"""CF netCDF super-observation file (featureType point), one dimension per quantity.

Each quantity ``q`` present gets a dimension ``q_obs`` and variables ``q`` (the value, with its CF
standard_name and canonical units), ``q_error`` (``<standard_name> standard_error``),
``q_error_instrument``, ``q_error_representation``, ``q_error_spread``, ``q_error_raw_rms``,
``q_error_basis`` and ``q_error_origin`` (flags), ``q_spread`` (and ``q_spread_detrended`` for
profiles), ``q_count``, ``q_lon``,
``q_lat``, ``q_depth``, ``q_time``, ``q_time_offset``, ``q_slot``, ``q_i``, ``q_j``, ``q_k``,
``q_sensor``, ``q_profile`` and, for interval observations (drift), ``q_time_end``.  Keeping one
dimension per quantity lets every variable carry one standard_name and one unit, as CF requires.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import xarray as xr

from obsprep.model.quantities import QUANTITIES


def _iso(t) -> str:
    return str(np.datetime64(t, "s")) + "Z"


def superobs_dataset(superobs, cfg, grid, inputs, version: str, created) -> xr.Dataset:
    """Build the xarray Dataset of the super-observation file."""
    analysis = _iso(cfg.window.analysis_time)
    time_units = f"seconds since {analysis[:-1].replace('T', ' ')}"
    data_vars, encoding = {}, {}
    present = set(superobs["quantity"].unique())  # once, not once per known quantity
    for name in [q for q in QUANTITIES if q in present]:
        q = QUANTITIES[name]
        same = superobs["quantity"] == name
        sub = superobs if same.all() else superobs[same]  # one quantity: no copy of the table
        dim = f"{name}_obs"
        coords = f"{name}_time {name}_lat {name}_lon {name}_depth"

        def var(suffix, values, **attrs):
            key = f"{name}_{suffix}" if suffix else name
            data_vars[key] = xr.Variable(dim, np.asarray(values), attrs={k: v for k, v in attrs.items() if v is not None})
            return key

        var("", sub["value"], standard_name=q.standard_name, units=q.units, long_name=f"super-observation of {q.long_name}",
            coordinates=coords, ancillary_variables=f"{name}_error {name}_count {name}_spread")
        var("error", sub["error"], standard_name=f"{q.standard_name} standard_error", units=q.units,
            long_name="total super-observation error (1-sigma): max(floor, sqrt(observation part^2 + representation^2)), "
                      "the observation part being the instrument or the spread part (see error_basis)")
        var("error_instrument", sub["error_instrument"], units=q.units,
            long_name="instrument part of the super-observation error (1-sigma), from the raw errors and the within-sensor correlation")
        var("error_representation", sub["error_representation"], units=q.units,
            long_name="representation error added in quadrature (1-sigma)")
        var("spread", sub["spread"], units=q.units, long_name="sample standard deviation of the raw values in the group (ddof=1)")
        _error_parts(var, sub, q)
        var("count", sub["count"].astype(np.int32), standard_name="number_of_observations", units="1",
            long_name="number of raw observations in the super-observation")
        var("lon", sub["lon"], standard_name="longitude", units="degrees_east", long_name="mean position on the sphere, longitude")
        var("lat", sub["lat"], standard_name="latitude", units="degrees_north", long_name="mean position on the sphere, latitude")
        var("depth", sub["depth"], standard_name="depth", units="m", positive="down", axis="Z", long_name="mean depth")
        tkey = var("time", sub["time"].to_numpy(dtype="datetime64[ns]"), standard_name="time", long_name="mean observation time")
        encoding[tkey] = {"units": time_units, "calendar": "standard", "dtype": "float64"}
        var("time_offset", sub["time_offset"], units="s", long_name="mean time minus the analysis time")
        var("slot", sub["slot"].astype(np.int32), units="1", long_name="time-slot index counted from the window start")
        var("i", sub["i"].astype(np.int32), units="1", long_name="model grid column index (0-based)")
        var("j", sub["j"].astype(np.int32), units="1", long_name="model grid row index (0-based)")
        var("k", sub["k"].astype(np.int32), units="1", long_name="model layer index (0-based, from the surface)")
        var("sensor", sub["sensor"].astype(str).to_numpy(dtype=object), long_name="sensor (source name, after merging)")
        if q.surface is False:
            var("profile", sub["profile"].astype(str).to_numpy(dtype=object),
                long_name="profile identifier (empty when averaged across profiles)")
        if q.vector is not None:
            ekey = var("time_end", sub["time_end"].to_numpy(dtype="datetime64[ns]"), standard_name="time",
                       long_name="end of the displacement interval (start is the time variable)")
            encoding[ekey] = {"units": time_units, "calendar": "standard", "dtype": "float64"}
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
        "analysis_time": analysis,
        "window_start": _iso(cfg.window.start),
        "window_end": _iso(cfg.window.end),
        "slot_seconds": float(cfg.window.slot_seconds),
        "superobs_mode": cfg.superobs.mode,
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


def _error_parts(var, sub, q) -> None:
    """The spread-based error, the basis and origin flags and the raw rms error of ``sub``."""
    from obsprep.superobs.errors import ERROR_BASIS

    if "error_spread" not in sub:
        return
    var("error_spread", sub["error_spread"], units=q.units,
        long_name="spread-based error (1-sigma): spread * sqrt((1 + (n-1) rho) / (n (1 - rho))); "
                  "NaN for n < 2")
    var("error_raw_rms", sub["error_raw_rms"], units=q.units,
        long_name="root mean square of the assigned raw errors in the group, sqrt(sum sigma_i^2 / n)")
    if q.surface is False:
        var("spread_detrended", sub["spread_detrended"], units=q.units,
            long_name="standard deviation of the raw values about a straight line in depth (ddof=2)")
    var("error_basis", sub["error_basis"].astype(np.int8), units="1",
        long_name="which term set the total error",
        flag_values=np.array(list(ERROR_BASIS.values()), dtype=np.int8),
        flag_meanings=" ".join(ERROR_BASIS))
    # labels and codes through pandas' factorisation (a Python set of every row is slow)
    origin_codes, origin_labels = pd.factorize(sub["error_origin"].astype(str), sort=True)
    labels, codes = [str(label) for label in origin_labels], origin_codes
    var("error_origin", codes.astype(np.int8), units="1",
        long_name="raw error rule of the values in the group (origin of their errors)",
        flag_values=np.arange(len(labels), dtype=np.int8),
        flag_meanings=" ".join(cf_flag_meaning(label) for label in labels),
        comment="rules as labelled in the configuration: " + ", ".join(labels))


def write_netcdf(ds: xr.Dataset, encoding: dict, path) -> None:
    """Write ``ds`` to ``path`` (netCDF4 format)."""
    ds.to_netcdf(path, format="NETCDF4", engine="netcdf4", encoding=encoding)
