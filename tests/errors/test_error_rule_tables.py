"""Raw error rules beyond constant/file: piecewise-linear tables of value and depth, extra terms
in quadrature, floor and cap, the origin labels, and the configuration checks."""

import numpy as np
import pytest

from obsprep.errors.rules import assign_errors, origin_label
from obsprep.exceptions import ConfigError
from obsprep.model.table import make_table
from obsprep.settings.config import ErrorRule, load_config


def test_table_of_value_interpolates_linearly_and_holds_the_ends():
    concentration = np.array([-0.1, 0.0, 0.25, 0.5, 0.8, 1.0, 1.2])
    t = make_table(7, quantity="sea_ice_concentration", value=concentration)
    assign_errors(t, ErrorRule("table", table={"of": "value", "points": [0.0, 0.5, 1.0],
                                               "errors": [0.03, 0.10, 0.03]}))
    # hand computation: linear between the points, constant beyond them
    expected = [0.03, 0.03, 0.065, 0.10, 0.10 + (0.03 - 0.10) * 0.6, 0.03, 0.03]
    np.testing.assert_allclose(t["error"], expected, rtol=1e-12)
    assert set(t["error_origin"]) == {"table_of_value"}


def test_depth_tables_per_quantity_factor_quadrature_floor_and_cap():
    depth = np.array([0.0, 25.0, 100.0, 400.0, 0.0, 1000.0])
    q = ["sea_water_temperature"] * 4 + ["sea_water_salinity"] * 2
    t = make_table(6, quantity=q, value=np.ones(6), depth=depth)
    rule = ErrorRule(
        "table", factor=2.0, floor=0.03, cap=0.4,
        table={"sea_water_temperature": {"of": "depth", "points": [0, 50, 200],
                                         "errors": [0.01, 0.2, 0.02]},
               "sea_water_salinity": {"of": "depth", "points": [0, 1000], "errors": [0.01, 0.005]}},
        add_in_quadrature={"sea_water_temperature": [0.1, {"of": "depth", "points": [0, 400],
                                                           "errors": [0.0, 0.4]}]})
    assign_errors(t, rule)
    # hand computation: sqrt((factor * base)^2 + sum term^2), then min(cap, max(floor, .))
    base = np.array([0.01, 0.105, 0.2 + (0.02 - 0.2) * 50 / 150, 0.02])
    terms = 0.1 ** 2 + (0.4 * depth[:4] / 400.0) ** 2
    temperature = np.clip(np.sqrt((2 * base) ** 2 + terms), 0.03, 0.4)
    salinity = np.clip(2 * np.array([0.01, 0.005]), 0.03, 0.4)
    np.testing.assert_allclose(t["error"], np.concatenate([temperature, salinity]), rtol=1e-12)
    assert list(t["error_origin"]) == ["table_of_depth*factor+quadrature"] * 4 + \
        ["table_of_depth*factor"] * 2
    assert t["error"].iloc[3] == 0.4    # the cap binds: sqrt(0.04^2 + 0.1^2 + 0.4^2) = 0.414
    assert t["error"].iloc[4] == 0.03   # the floor binds: 2 * 0.01 < 0.03


def test_quadrature_terms_do_not_disguise_a_missing_file_error():
    t = make_table(3, error=[0.3, np.nan, 0.0], quantity="sea_surface_temperature")
    n = assign_errors(t, ErrorRule("file", add_in_quadrature=0.4))
    assert n == 2
    np.testing.assert_allclose(t["error"].iloc[0], 0.5)    # sqrt(0.3^2 + 0.4^2), 3-4-5 triangle
    # NaN: no error at all; 0: an error no measurement has
    assert list(t["rejected"].iloc[1:]) == ["missing_error", "implausible_error"]


def test_origin_labels():
    assert origin_label(ErrorRule("constant", 0.1), "sea_level_anomaly") == "constant"
    assert origin_label(ErrorRule("file", factor=1.5, add_in_quadrature=0.01),
                        "sea_level_anomaly") == "file*factor+quadrature"
    per_quantity = ErrorRule("file", add_in_quadrature={"sea_water_temperature": 0.1})
    assert origin_label(per_quantity, "sea_water_temperature") == "file+quadrature"
    assert origin_label(per_quantity, "sea_water_salinity") == "file"


def _config(error):
    return {
        "window": {"analysis_time": "{date}T00:00:00", "date": "2026-11-20"},
        "grid": {"type": "regular", "lon_min": 0.0, "lat_min": 0.0, "dlon": 1.0, "dlat": 1.0,
                 "nlon": 4, "nlat": 4},
        "sources": [{"sensor": "ice", "paths": ["x.nc"], "error": error}],
    }


def test_config_reads_every_new_key():
    cfg = load_config(_config({"rule": "table", "table": {"of": "value", "points": [0, 1],
                                                          "errors": [0.05, 0.1]},
                               "add_in_quadrature": [0.01, 0.02], "floor": 0.02, "cap": 0.3}))
    rule = cfg.sources[0].error
    assert rule.table["points"] == [0, 1] and rule.add_in_quadrature == [0.01, 0.02]
    assert rule.cap == 0.3 and rule.floor == 0.02


@pytest.mark.parametrize("error, key", [
    ({"rule": "table"}, r"sources\[0\]\.error\.table"),
    ({"rule": "table", "table": {"points": [0, 0.5, 0.4], "errors": [1, 2, 3]}},
     r"sources\[0\]\.error\.table\.points"),
    ({"rule": "table", "table": {"points": [0, 1], "errors": [1]}},
     r"sources\[0\]\.error\.table\.errors"),
    ({"rule": "table", "table": {"sea_water_temp": {"points": [0], "errors": [1]}}},
     r"sources\[0\]\.error\.table\.sea_water_temp"),
    ({"rule": "constant", "value": 0.1, "floor": 0.2, "cap": 0.1}, r"sources\[0\]\.error\.cap"),
    ({"rule": "constant", "value": 0.1, "add_in_quadrature": {"nonsense": 0.1}},
     r"sources\[0\]\.error\.add_in_quadrature\.nonsense"),
    ({"rule": "table", "table": {"of": "time", "points": [0], "errors": [1]}},
     r"sources\[0\]\.error\.table"),
])
def test_bad_error_settings_name_the_key(error, key):
    with pytest.raises(ConfigError, match=key):
        load_config(_config(error))


def test_superobs_error_settings_are_checked():
    raw = _config({"rule": "constant", "value": 0.1})
    raw["superobs"] = {"representation_error_file": "rep.nc"}
    with pytest.raises(ConfigError, match="representation_error_variables"):
        load_config(raw)
    raw["superobs"] = {"representation_error_file": "rep.nc",
                       "representation_error_variables": {"sea_level_anomaly": "sla_rep"},
                       "representation_error": {"sea_level_anomaly": 0.02}}
    with pytest.raises(ConfigError, match="representation_error_variables.sea_level_anomaly"):
        load_config(raw)
    raw["superobs"] = {"spread_combination": "median"}
    with pytest.raises(ConfigError, match="superobs.spread_combination"):
        load_config(raw)
