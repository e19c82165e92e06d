"""The complete super-observation error, part by part, from the merged accumulator.

For each group (super-observation) of n raw values:

- ``error_instrument``: from the raw errors and their correlation structure (within error
  groups, across them; :func:`~obsprep.superobs.errors.variance_of_mean` or
  :func:`~obsprep.superobs.errors.variance_of_weighted_mean`; the representative's error in
  ``thin`` mode); for a sub-surface value fitted in depth (``superobs.layer_value = "fit"``)
  the error of the fit (:func:`obsprep.superobs.layers.fit_variance`);
- ``error_spread``: the instrument error scaled by what the residuals say,
  :math:`\\sigma_{instrument}\\sqrt{R / E[R]}`
  (:func:`~obsprep.superobs.errors.residual_variance_factor`), R the residual sum of squares
  about the estimate (weighted in weighted mode; about the fit in depth below the surface,
  :mod:`obsprep.superobs.layers`) and E[R] its expectation under the assigned errors, so it is
  right for any weights and correlation structure;
- the observation part: one of the two, by ``superobs.spread_combination``
  (:func:`~obsprep.superobs.errors.combine_instrument_and_spread`: small-sample shrinkage,
  an unbiased max rule);
- ``error_representation``: per quantity a constant (``superobs.representation_error``), a
  field on the model grid looked up at the group's cell (``superobs.representation_error_file``
  and ``..._variables``; :mod:`obsprep.superobs.representation`), or else the quantity's
  default (:attr:`obsprep.model.quantities.Quantity.default_representation_error`); with
  ``superobs.representation_model = "sampling"`` that value is the sub-cell standard deviation,
  reduced by the sampling (:func:`~obsprep.superobs.representation.sampled_representation_error`);
  below the surface with ``layer_value = "mean"`` the estimated curvature offset is added in
  quadrature;
- ``error`` = max(floor, sqrt(observation part^2 + representation^2)), the floor configured
  (``superobs.error_floor``) or the quantity's default, always > 0
  (:func:`obsprep.superobs.error_model.total_error`); ``error_basis`` says which term set it
  (0 instrument, 1 spread, 2 floor);
- ``error_raw_rms`` = sqrt(sum sigma_i^2 / n), the typical assigned raw error (for audits);
- ``error_origin``: the raw error rule(s) of the group's sensor and quantity
  (:func:`obsprep.errors.rules.origin_label`);
- ``error_correlation``: for the two drift components of one cell, slot and interval, the
  correlation of their total errors (:func:`component_error_correlation`).
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
    expected_residual_of_mean,
    expected_residual_of_weighted_mean,
    residual_variance_factor,
    variance_of_mean,
)
from obsprep.superobs.layers import fit_in_depth, fit_variance, significant_curvature
from obsprep.superobs.representation import sampled_representation_error

#: the pairs of components of a vector quantity whose error covariance is kept
VECTOR_COMPONENTS = (("sea_ice_drift_x", "sea_ice_drift_y"),
                     ("sea_ice_drift_east", "sea_ice_drift_north"))


@dataclass
class GroupErrorInputs:
    """Per-group settings: error correlation across error groups, representation error (units
    of the value; the sub-cell standard deviation for the sampling model) and floor of the total
    error."""

    across_correlation: np.ndarray
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


def group_error_inputs(cfg, accumulator, sensor_names, across_correlations, grid=None,
                       quantity_names=None) -> GroupErrorInputs:
    """Correlation across error groups, representation error and floor of every group of
    ``accumulator``.

    ``across_correlations``: correlation across error groups per output sensor name.  ``grid`` is needed
    only for representation-error fields (built from the configuration when not given).
    """
    quantity_names = list(quantity_names or QUANTITIES)
    keys = accumulator.keys
    q_code = keys["quantity"]
    across = np.array([across_correlations[s] for s in sensor_names])[keys["sensor"]]
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
    return GroupErrorInputs(across, representation, floor)


def complete_errors(cfg, accumulator, frame, inputs: GroupErrorInputs, sensor_names,
                    quantity_names=None, grid=None) -> dict:
    """The value and error columns of the super-observations (see the module docstring).

    ``frame`` is ``accumulator.finalize(...)`` called with ``inputs``; ``accumulator`` is
    collapsed.  ``grid`` is needed for the sampling representation model only.  Returns a dict
    of arrays, one value per group: ``value``, ``error_instrument``, ``error_representation``,
    ``error``, ``error_spread``, ``error_basis``, ``error_raw_rms``, ``spread_detrended``,
    ``error_origin`` and ``error_correlation``.
    """
    quantity_names = list(quantity_names or QUANTITIES)
    settings = cfg.superobs
    state = accumulator.state
    keys = accumulator.keys
    count = state["count"]
    n = count.astype(np.float64)
    mode = settings.mode
    sub_surface = np.array([not QUANTITIES[q].surface for q in quantity_names])[keys["quantity"]]
    across = inputs.across_correlation
    value = frame["value"].to_numpy()
    instrument = frame["error_instrument"].to_numpy()
    # the equally weighted mean's error variance and the residuals it leads one to expect
    mean_variance = variance_of_mean(state["sum_variance"], count, state["within_pairs_sigma"],
                                     state["sum_sigma"], state["sum_group_sigma_squared"], across)
    expected_mean = expected_residual_of_mean(state["sum_variance"], count, mean_variance)
    if mode == "weighted":
        residual = state["weighted_m2"]
        expected = expected_residual_of_weighted_mean(count, state["sum_inverse_variance"],
                                                      instrument ** 2)
    else:
        residual = state["value_m2"]
        expected = expected_mean
    dof = n - 1.0
    curvature = np.zeros(len(count))
    spread_detrended = np.full(len(count), np.nan)
    if sub_surface.any():
        fit = fit_in_depth(state, frame["depth"].to_numpy())
        parameters = fit.parameters.astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            uncorrelated = expected_mean / (n - 1.0)  # per value, the part the fit can reduce
            spread_detrended = np.where(sub_surface & (n > parameters),
                                        np.sqrt(fit.residual / (n - parameters)), np.nan)
            fit_expected = expected_mean * (n - parameters) / (n - 1.0)
        if mode != "thin":
            if settings.layer_value == "fit":
                fitted = sub_surface & (fit.parameters > 1)
                value = np.where(fitted, fit.value, value)
                instrument = np.where(fitted, np.sqrt(fit_variance(
                    mean_variance, uncorrelated, fit.coefficient_squares, n)), instrument)
            else:
                curvature = np.where(sub_surface, significant_curvature(
                    fit.curvature_offset, uncorrelated * fit.curvature_offset_noise), 0.0)
        residual = np.where(sub_surface, fit.residual, residual)
        expected = np.where(sub_surface, fit_expected, expected)
        dof = np.where(sub_surface, n - parameters, dof)
    factor = residual_variance_factor(residual, expected)
    with np.errstate(invalid="ignore"):
        spread_error = instrument * np.sqrt(factor)
    observation, basis = combine_instrument_and_spread(
        instrument, factor, dof, count, settings.spread_combination,
        int(settings.spread_min_count), float(settings.spread_prior_dof))
    representation = representation_errors(cfg, accumulator, inputs, quantity_names, grid,
                                           sub_surface)
    representation = np.sqrt(representation ** 2 + curvature ** 2)
    error, floored = total_error(observation, representation, inputs.floor)
    basis = np.where(floored, ERROR_BASIS["floor"], basis).astype(np.int8)
    origins = sensor_origins(cfg, sensor_names, quantity_names)
    with np.errstate(invalid="ignore", divide="ignore"):
        raw_rms = np.sqrt(state["sum_variance"] / count)
    return {
        "value": value,
        "error_instrument": instrument,
        "error_representation": representation,
        "error": error,
        "error_spread": spread_error,
        "error_basis": basis,
        "error_raw_rms": raw_rms,
        "spread_detrended": spread_detrended,
        "error_origin": origins[keys["sensor"], keys["quantity"]],
        "error_correlation": component_error_correlation(accumulator, error, mode,
                                                         quantity_names),
    }


def representation_errors(cfg, accumulator, inputs, quantity_names, grid, sub_surface):
    """Representation error per group: the configured value, or with
    ``superobs.representation_model = "sampling"`` the sub-cell standard deviation reduced by
    the group's sampling of its cell (raw values at the surface, profiles below it)."""
    if cfg.superobs.representation_model != "sampling":
        return inputs.representation
    keys, state = accumulator.keys, accumulator.state
    if grid is None:
        from obsprep.geo.grid import grid_from_config

        grid = grid_from_config(cfg.grid, cfg.base_dir)
    footprint_m2 = np.array([float(cfg.superobs.footprint_km2.get(q, 0.0)) * 1e6
                             for q in quantity_names])[keys["quantity"]]
    samples = np.where(sub_surface, state["group_count"], state["count"])
    if cfg.superobs.mode == "thin":
        samples = np.ones(len(samples))
    return sampled_representation_error(inputs.representation, samples,
                                        grid.cell_area(keys["i"], keys["j"]), footprint_m2)


def component_error_correlation(accumulator, error, mode, quantity_names) -> np.ndarray:
    """Correlation of the total errors of the two drift components of one cell, slot and
    interval; NaN for other quantities.

    Only the error covariance of the two components of the same raw vector is kept (the
    rotation onto the grid axes makes it; errors of different vectors are taken as uncorrelated
    across components): for the mean, :math:`\\operatorname{cov}(\\bar x, \\bar y) =
    \\sum_i c_i / n^2`; for the weighted means, :math:`\\sum_i c_i w^x_i w^y_i / (W_x W_y)`
    (bilinearity of covariance); the correlation is that over the product of the two total
    errors (the representation errors are independent).
    """
    out = np.full(len(error), np.nan)
    if mode == "thin":
        return out  # the representatives of the two components need not be one vector
    for pair in VECTOR_COMPONENTS:
        if all(q in quantity_names for q in pair):
            _pair_correlation(accumulator, error, mode, [quantity_names.index(q) for q in pair],
                              out)
    return out


def _pair_correlation(accumulator, error, mode, codes, out):
    import pandas as pd

    keys, state = accumulator.keys, accumulator.state
    rows = [np.flatnonzero(keys["quantity"] == code) for code in codes]
    if not len(rows[0]) or not len(rows[1]):
        return

    other = [name for name in keys if name != "quantity"]
    x = pd.DataFrame({name: keys[name][rows[0]] for name in other}).assign(row_x=rows[0])
    y = pd.DataFrame({name: keys[name][rows[1]] for name in other}).assign(row_y=rows[1])
    pairs = x.merge(y, on=other, how="inner")
    rx, ry = pairs["row_x"].to_numpy(), pairs["row_y"].to_numpy()
    if mode == "weighted":
        covariance = state["sum_weighted_cross_covariance"][rx] / (
            state["sum_inverse_variance"][rx] * state["sum_inverse_variance"][ry])
    else:
        n = state["count"][rx].astype(np.float64)
        covariance = state["sum_cross_covariance"][rx] / (n * n)
    correlation = np.clip(covariance / (error[rx] * error[ry]), -1.0, 1.0)
    out[rx] = correlation
    out[ry] = correlation
