"""Default super-observation error settings: every quantity declares a representation error and
a positive error floor, used unless the configuration sets its own; the output file and the
build summary say which quantities rely on them; identical raw values never give an error of 0.

Expected totals are computed by hand from error = max(floor, sqrt(instrument^2 +
representation^2)) and the error of a mean of n independent values, sigma / sqrt(n) (textbook).
"""

from __future__ import annotations

import datetime as dt
import json

import numpy as np
import pytest

from obsprep.cli.summary import error_defaults_line
from obsprep.exceptions import ConfigError
from obsprep.geo.grid import grid_from_config
from obsprep.model.quantities import QUANTITIES, QUANTITY_NAMES, Quantity
from obsprep.settings.config import load_config
from obsprep.superobs import Accumulator
from obsprep.superobs.errors import ERROR_BASIS
from obsprep.superobs.finalize import finalize_superobs
from obsprep.writers.finite import check_finite
from obsprep.writers.netcdf import superobs_dataset

#: the smaller end of the typical error of one raw value, per quantity (from memory): along-track
#: sea level 0.03 m; infrared SST 0.3 K; ice concentration 0.05; ice drift 1 km over 48 h;
#: profile temperature 0.002 degC, salinity 0.01
TYPICAL_RAW_ERROR = {"sea_level_anomaly": 0.03, "sea_surface_temperature": 0.3,
                     "sea_surface_skin_temperature": 0.3, "sea_surface_subskin_temperature": 0.3,
                     "sea_surface_foundation_temperature": 0.3, "sea_ice_concentration": 0.05,
                     "sea_ice_drift_east": 1000.0, "sea_ice_drift_north": 1000.0,
                     "sea_ice_drift_x": 1000.0, "sea_ice_drift_y": 1000.0,
                     "sea_water_temperature": 0.002, "sea_water_salinity": 0.01,
                     "sea_water_potential_temperature": 0.002}

GRID = {"type": "regular", "lon_min": 0.0, "lat_min": 0.0, "dlon": 1.0, "dlat": 1.0,
        "nlon": 2, "nlat": 2}


def config(superobs=None):
    """A two-source configuration (SLA and ice concentration), ``superobs`` as given."""
    return load_config({
        "window": {"analysis_time": "2026-11-20T00:00:00"},
        "grid": GRID,
        "sources": [
            {"sensor": "alt", "paths": ["a.nc"], "error": {"rule": "constant", "value": 0.03}},
            {"sensor": "ice", "paths": ["i.nc"], "error": {"rule": "constant", "value": 0.1}},
        ],
        "superobs": superobs or {},
    })


def groups(values_by_quantity, sigma_by_quantity):
    """One group (cell (0, 0), slot 0) per quantity, sensor code = position in the dict."""
    keys, values, errors = {k: [] for k in ("quantity", "sensor", "slot", "j", "i", "k",
                                             "profile", "t_start", "t_end")}, [], []
    for code, (quantity, raw) in enumerate(values_by_quantity.items()):
        n = len(raw)
        keys["quantity"] += [QUANTITY_NAMES.index(quantity)] * n
        keys["sensor"] += [code] * n
        keys["profile"] += [-1] * n
        for name in ("slot", "j", "i", "k", "t_start", "t_end"):
            keys[name] += [0] * n
        values += list(raw)
        errors += [sigma_by_quantity[quantity]] * n
    keys = {k: np.asarray(v, dtype=np.int64) for k, v in keys.items()}
    n = len(values)
    return Accumulator.from_observations(keys, np.asarray(values, float), np.asarray(errors, float),
                                         np.zeros(n), np.full(n, 0.5), np.full(n, 0.5), 0.0)


def superobs_of(cfg, values_by_quantity):
    sigma = {"sea_level_anomaly": 0.03, "sea_ice_concentration": 0.1}
    table = finalize_superobs(cfg, groups(values_by_quantity, sigma), ["alt", "ice"], {})
    return table.set_index("quantity")


@pytest.mark.parametrize("name", list(QUANTITIES))
def test_every_quantity_declares_a_representation_error_and_a_positive_floor(name):
    q = QUANTITIES[name]
    assert np.isfinite(q.default_representation_error) and q.default_representation_error >= 0
    # the floor is positive and claims no more than averaging about ten independent raw values
    # can gain: a third of the typical error of one value (common practice)
    assert 0 < q.default_error_floor <= TYPICAL_RAW_ERROR[name] / 3 + 1e-12


@pytest.mark.parametrize("floor", [0.0, -1.0, float("nan"), float("inf")])
def test_a_quantity_without_a_positive_finite_floor_is_refused(floor):
    with pytest.raises(ValueError, match="default_error_floor"):
        Quantity("x", "x", "1", "x", default_representation_error=0.0, default_error_floor=floor)
    with pytest.raises(ValueError, match="default_representation_error"):
        Quantity("x", "x", "1", "x", default_error_floor=0.1)   # no representation error declared


def test_defaults_apply_when_the_configuration_sets_none():
    cfg = config()
    out = superobs_of(cfg, {"sea_level_anomaly": [0.1, 0.12, 0.08, 0.1],
                            "sea_ice_concentration": [0.5, 0.6, 0.7, 0.6]})
    for name, sigma in (("sea_level_anomaly", 0.03), ("sea_ice_concentration", 0.1)):
        q = QUANTITIES[name]
        row = out.loc[name]
        assert row["error_representation"] == q.default_representation_error
        expected = max(q.default_error_floor,
                       np.hypot(sigma / np.sqrt(4), q.default_representation_error))
        np.testing.assert_allclose(row["error"], expected, rtol=1e-12)


def test_the_configuration_wins_and_a_configured_zero_representation_stays_zero():
    cfg = config({"representation_error": {"sea_level_anomaly": 0.0},
                  "error_floor": {"sea_level_anomaly": 0.02}})
    out = superobs_of(cfg, {"sea_level_anomaly": [0.1, 0.12, 0.08, 0.1],
                            "sea_ice_concentration": [0.5, 0.6, 0.7, 0.6]})
    row = out.loc["sea_level_anomaly"]
    assert row["error_representation"] == 0.0
    # 0.03 / sqrt(4) = 0.015 is below the configured floor 0.02
    assert row["error"] == 0.02 and row["error_basis"] == ERROR_BASIS["floor"]
    ice = out.loc["sea_ice_concentration"]  # not configured: its defaults
    assert ice["error_representation"] == QUANTITIES["sea_ice_concentration"].default_representation_error


def test_a_configured_floor_of_zero_is_refused_naming_the_key():
    with pytest.raises(ConfigError, match="superobs.error_floor.sea_level_anomaly"):
        config({"error_floor": {"sea_level_anomaly": 0.0}})


@pytest.mark.parametrize("configured_floor", [None, 0.004])
def test_identical_values_never_give_an_error_of_zero(configured_floor):
    # saturated ice concentration: eight values of exactly 1, spread 0, with the spread used as
    # the error and no representation error
    superobs = {"spread_combination": "spread_when_n_ge", "spread_min_count": 5,
                "representation_error": {"sea_ice_concentration": 0.0,
                                         "sea_level_anomaly": 0.0}}
    if configured_floor is not None:
        superobs["error_floor"] = {"sea_ice_concentration": configured_floor}
    cfg = config(superobs)
    out = superobs_of(cfg, {"sea_level_anomaly": [0.25] * 6, "sea_ice_concentration": [1.0] * 8})
    floor = (configured_floor if configured_floor is not None
             else QUANTITIES["sea_ice_concentration"].default_error_floor)
    ice = out.loc["sea_ice_concentration"]
    assert ice["error_spread"] == 0.0      # the spread of identical values, by definition
    # the small-sample shrinkage keeps nu0 / (nu0 + nu) of the instrument variance (nu0 = 4
    # prior degrees of freedom, nu = 7), then the floor applies (hand computation)
    shrunk = ice["error_instrument"] * np.sqrt(4.0 / 11.0)
    assert ice["error"] == pytest.approx(max(floor, shrunk), rel=1e-12) and ice["error"] > 0
    assert ice["error_basis"] == (ERROR_BASIS["floor"] if floor > shrunk else ERROR_BASIS["spread"])
    sla = out.loc["sea_level_anomaly"]
    assert sla["error"] == pytest.approx(max(QUANTITIES["sea_level_anomaly"].default_error_floor,
                                             sla["error_instrument"] * np.sqrt(4.0 / 9.0)),
                                         rel=1e-12)
    assert (out["error"] > 0).all() and np.isfinite(out["error"]).all()
    check_finite(out.reset_index())   # the write-time check accepts it


def test_the_output_file_and_the_summary_say_which_quantities_rely_on_defaults():
    cfg = config({"representation_error": {"sea_level_anomaly": 0.01},
                  "error_floor": {"sea_level_anomaly": 0.005,
                                  "sea_ice_concentration": 0.01}})
    table = superobs_of(cfg, {"sea_level_anomaly": [0.1, 0.12, 0.08, 0.1],
                              "sea_ice_concentration": [0.5, 0.6, 0.7, 0.6]}).reset_index()
    grid = grid_from_config(cfg.grid, cfg.base_dir)
    ds, _ = superobs_dataset(table, cfg, grid, {}, "test", dt.datetime(2026, 11, 20, 1))
    recorded = json.loads(ds.attrs["error_settings"])
    assert recorded == {
        "sea_level_anomaly": {
            "representation_error": {"value": 0.01, "units": "m", "from": "configuration"},
            "error_floor": {"value": 0.005, "units": "m", "from": "configuration"}},
        "sea_ice_concentration": {
            "representation_error": {
                "value": QUANTITIES["sea_ice_concentration"].default_representation_error,
                "units": "1", "from": "default"},
            "error_floor": {"value": 0.01, "units": "1", "from": "configuration"}},
    }
    assert error_defaults_line(cfg, table) == ("error settings from the defaults: "
                                               "representation error of sea_ice_concentration (ice)")
    everything = config({"representation_error": {"sea_level_anomaly": 0.01,
                                                  "sea_ice_concentration": 0.0},
                         "error_floor": {"sea_level_anomaly": 0.005,
                                         "sea_ice_concentration": 0.01}})
    assert error_defaults_line(everything, table) == "error settings: all from the configuration"
    nothing = config()
    assert error_defaults_line(nothing, table) == (
        "error settings from the defaults: representation error of sea_level_anomaly (alt), "
        "sea_ice_concentration (ice); error floor of sea_level_anomaly (alt), "
        "sea_ice_concentration (ice)")
