"""The super-observation table: the merged accumulator finalised, keys decoded, errors added."""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.model.product import TABLE_COLUMNS
from obsprep.model.quantities import QUANTITY_NAMES
from obsprep.settings.config import Config, agreed_per_output_sensor, sensor_across_correlations
from obsprep.superobs.accumulate import Accumulator
from obsprep.superobs.complete import complete_errors, group_error_inputs
from obsprep.superobs.keys import decode_group_keys


def finalize_superobs(cfg: Config, accumulator: Accumulator, sensor_names, profile_names,
                      grid=None) -> pd.DataFrame:
    """Turn the merged accumulator into the super-observation table (one row per group).

    Errors part by part: :mod:`obsprep.superobs.complete`.  ``grid`` is used for
    representation-error fields only (built from the configuration when not given).
    """
    mode = cfg.superobs.mode
    if accumulator is None or accumulator.n_groups == 0:
        return pd.DataFrame(columns=["quantity", "sensor", "slot", "i", "j", "k", "count", "value", "error"])
    if not accumulator.collapsed:
        # a caller's own accumulator, without error groups: each group is one error group
        # with its sensor's within-group correlation (merged sources must then agree on it)
        within = agreed_per_output_sensor(cfg, "correlation")
        accumulator = accumulator.collapse(None, np.array(
            [within[name] for name in sensor_names])[accumulator.keys["sensor"]])
    inputs = group_error_inputs(cfg, accumulator, sensor_names, sensor_across_correlations(cfg),
                                grid=grid, quantity_names=QUANTITY_NAMES)
    frame = accumulator.finalize(mode=mode, across_correlation=inputs.across_correlation,
                                 representation_error=inputs.representation, floor=inputs.floor)
    columns = decode_group_keys(frame, QUANTITY_NAMES, sensor_names, profile_names)
    # the accumulator's columns, then the complete errors (overriding its total error)
    columns.update((col, frame[col].to_numpy()) for col in TABLE_COLUMNS
                   if col not in columns and col in frame and col != "time")
    columns.update(complete_errors(cfg, accumulator, frame, inputs, sensor_names, QUANTITY_NAMES,
                                   grid=grid))
    # the offset is the mean placement time (superobs.interval_time for intervals); the time
    # variable of an interval is its start, time_end its end
    offset = frame["time"].to_numpy()
    columns["time_offset"] = offset
    interval = frame["t_end"].to_numpy() != frame["t_start"].to_numpy()
    columns["time"] = cfg.window.analysis_time + (
        np.where(interval, frame["t_start"].to_numpy(), offset) * 1e9).round().astype(
        "timedelta64[ns]")
    t_end = cfg.window.analysis_time + (frame["t_end"].to_numpy() * 10**9).astype("timedelta64[ns]")
    columns["time_end"] = np.where(interval, t_end, np.datetime64("NaT", "ns"))
    out = pd.DataFrame({col: columns[col] for col in TABLE_COLUMNS})
    return out


__all__ = ["finalize_superobs"]
