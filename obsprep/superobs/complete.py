"""The complete super-observation error, part by part, from the merged accumulator.

For each group (super-observation) of n raw values:

- ``error_instrument``: from the raw errors and the within-sensor correlation rho of the
  source (:func:`~obsprep.superobs.errors.error_of_mean` or
  :func:`~obsprep.superobs.errors.error_of_weighted_mean`; the representative's error in
  ``thin`` mode);
- ``error_spread``: from the sample spread of the raw values,
  :func:`~obsprep.superobs.errors.error_from_spread`; for sub-surface quantities the spread is
  taken about a straight line in depth (:func:`~obsprep.superobs.errors.spread_about_depth_line`),
  since the layer mean stands for the value at the mean depth; in ``thin`` mode the spread
  itself (the scatter of one value), s / sqrt(1 - rho);
- the observation part: one of the two, by ``superobs.spread_combination``
  (:func:`~obsprep.superobs.errors.combine_instrument_and_spread`);
- ``error_representation``: per quantity a constant (``superobs.representation_error``), a
  field on the model grid looked up at the group's cell (``superobs.representation_error_file``
  and ``..._variables``; :mod:`obsprep.superobs.representation`), or else the quantity's
  default (:attr:`obsprep.model.quantities.Quantity.default_representation_error`);
- ``error`` = max(floor, sqrt(observation part^2 + representation^2)), the floor configured
  (``superobs.error_floor``) or the quantity's default, always > 0, so no error is 0 even where
  the spread of identical values is 0
  (:func:`obsprep.superobs.error_model.total_error`); ``error_basis`` says which term set it (0 instrument, 1 spread, 2 floor);
- ``error_raw_rms`` = sqrt(sum sigma_i^2 / n), the typical assigned raw error (for audits);
- ``error_origin``: the raw error rule(s) of the group's sensor and quantity
  (:func:`obsprep.errors.rules.origin_label`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from obsprep.errors.rules import origin_label
from obsprep.model.quantities import QUANTITIES
from obsprep.superobs.error_model import total_error
from obsprep.superobs.errors import (
    ERROR_BASIS,
    combine_instrument_and_spread,
    error_from_spread,
    spread_about_depth_line,
)


@dataclass
class GroupErrorInputs:
    """Per-group settings: within-sensor correlation, representation error (units of the
    value) and floor of the total error."""

    correlation: np.ndarray
    representation: np.ndarray
    floor: np.ndarray


def sensor_origins(cfg, sensor_names, quantity_names) -> np.ndarray:
    """Origin label of the raw errors per (output sensor, quantity): object array of shape
    (len(sensor_names), len(quantity_names)); merged sources with different rules give
    ``"a_or_b"``."""
    labels = [[set() for _ in quantity_names] for _ in sensor_names]
    for source in cfg.sources:
        row = sensor_names.index(cfg.output_sensor(source.sensor))
        for column, q in enumerate(quantity_names):
            # an output quantity also carries the rules of the quantities merged into it
            members = getattr(cfg.superobs, "merge_quantities", {}).get(q, ())
            for member in (q, *members):
                if member == q or source.quantities is None or member in source.quantities:
                    labels[row][column].add(origin_label(source.error, member))
    out = np.empty((len(sensor_names), len(quantity_names)), dtype=object)
    for row in range(len(sensor_names)):
        for column in range(len(quantity_names)):
            out[row, column] = "_or_".join(sorted(labels[row][column]))
    return out


def group_error_inputs(cfg, accumulator, sensor_names, correlations, grid=None,
                       quantity_names=None) -> GroupErrorInputs:
    """Correlation, representation error and floor of every group of ``accumulator``.

    ``correlations``: within-sensor correlation per output sensor name.  ``grid`` is needed
    only for representation-error fields (built from the configuration when not given).
    """
    quantity_names = list(quantity_names or QUANTITIES)
    keys = accumulator.keys
    q_code = keys["quantity"]
    correlation = np.array([correlations[s] for s in sensor_names])[keys["sensor"]]
    settings = cfg.superobs
    # the configured constant or the quantity's default (a field fills its rows below)
    representation = np.array([settings.representation_error_for(q)[0] or 0.0
                               for q in quantity_names])[q_code]
    floor = np.array([settings.error_floor_for(q)[0] for q in quantity_names])[q_code]
    variables = cfg.superobs.representation_error_variables
    if variables:
        from obsprep.superobs.representation import load_representation_fields, representation_at

        if grid is None:
            from obsprep.geo.grid import grid_from_config

            grid = grid_from_config(cfg.grid, cfg.base_dir)
        path = cfg.superobs.representation_error_file
        fields = load_representation_fields(cfg.base_dir / path, variables, grid.shape, grid.nk)
        for q, field in fields.items():
            rows = q_code == quantity_names.index(q)
            representation[rows] = representation_at(field, keys["j"][rows], keys["i"][rows],
                                                     keys["k"][rows], cfg.base_dir / path,
                                                     variables[q])
    return GroupErrorInputs(correlation, representation, floor)


def complete_errors(cfg, accumulator, frame, inputs: GroupErrorInputs, sensor_names,
                    quantity_names=None) -> dict:
    """The error columns of the super-observations (see the module docstring).

    ``frame`` is ``accumulator.finalize(...)`` called with ``inputs``.  Returns a dict of
    arrays, one value per group: ``error``, ``error_spread``, ``error_basis``,
    ``error_raw_rms``, ``spread_detrended`` and ``error_origin``.
    """
    quantity_names = list(quantity_names or QUANTITIES)
    state = accumulator.state
    keys = accumulator.keys
    count = state["count"]
    mode = cfg.superobs.mode
    sub_surface = np.array([not QUANTITIES[q].surface for q in quantity_names])[keys["quantity"]]
    spread_line = spread_about_depth_line(state["value_m2"], state["depth_m2"],
                                          state["depth_value_c2"], count)
    spread = np.where(sub_surface, spread_line, frame["spread"].to_numpy())
    if mode == "thin":
        with np.errstate(divide="ignore", invalid="ignore"):
            spread_error = np.where((count >= 2) & (inputs.correlation < 1.0),
                                    spread / np.sqrt(1.0 - inputs.correlation), np.nan)
    else:
        spread_error = error_from_spread(spread, count, inputs.correlation)
    rule = cfg.superobs.spread_combination
    min_count = int(cfg.superobs.spread_min_count)
    observation, basis = combine_instrument_and_spread(
        frame["error_instrument"].to_numpy(), spread_error, count, rule, min_count)
    error, floored = total_error(observation, inputs.representation, inputs.floor)
    basis = np.where(floored, ERROR_BASIS["floor"], basis).astype(np.int8)
    origins = sensor_origins(cfg, sensor_names, quantity_names)
    with np.errstate(invalid="ignore", divide="ignore"):
        raw_rms = np.sqrt(state["sum_variance"] / count)
    return {
        "error": error,
        "error_spread": spread_error,
        "error_basis": basis,
        "error_raw_rms": raw_rms,
        "spread_detrended": np.where(sub_surface, spread_line, np.nan),
        "error_origin": origins[keys["sensor"], keys["quantity"]],
    }
