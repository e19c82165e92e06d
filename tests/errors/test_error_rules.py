"""Raw error rules: constant, from file, factor, floor; rows without an error are rejected."""

import numpy as np
import pytest

from obsprep.errors.rules import ERROR_RULE_KEYS, ERROR_TABLE_KEYS, assign_errors, raw_error_from_parts
from obsprep.exceptions import ConfigError
from obsprep.model.table import make_table
from obsprep.settings.config import ErrorRule


def test_constant_per_quantity_with_factor_and_floor():
    t = make_table(3, quantity=["sea_water_temperature", "sea_water_salinity", "sea_water_temperature"])
    assign_errors(t, ErrorRule("constant", {"sea_water_temperature": 0.01, "sea_water_salinity": 0.002},
                               factor=2.0, floor=0.005))
    # hand computation: max(floor, factor * value)
    np.testing.assert_allclose(t["error"], [0.02, 0.005, 0.02])
    assert set(t["error_origin"]) == {"constant*factor"}


def test_file_rule_rejects_missing_errors():
    t = make_table(3, error=[0.3, np.nan, -1.0])
    n = assign_errors(t, ErrorRule("file", floor=0.4))
    assert n == 2
    assert t["rejected"].isna().iloc[0] and list(t["rejected"].iloc[1:]) == ["missing_error", "implausible_error"]
    assert t["error"].iloc[0] == 0.4


def test_missing_quantity_in_table_of_values_is_a_config_error():
    t = make_table(1, quantity=["sea_water_salinity"])
    with pytest.raises(ConfigError, match="sea_water_salinity"):
        assign_errors(t, ErrorRule("constant", {"sea_water_temperature": 0.01}), "sources[0].error")


def test_raw_error_from_parts_matches_the_formula():
    # hand computation of sigma = min(cap, max(floor, sqrt((factor * base)^2 + sum term^2)))
    base = np.array([0.3, 0.01, 4.0, np.nan])
    everywhere = np.ones(4, dtype=bool)
    sigma = raw_error_from_parts(base, 2.0, [(everywhere, np.full(4, 0.8))], floor=0.5, cap=2.0)
    np.testing.assert_allclose(sigma, [1.0, 0.8002499610, 2.0, np.nan], rtol=1e-9)
    # without extra terms only the factor, floor and cap act
    np.testing.assert_array_equal(raw_error_from_parts(base, 1.0, None, 0.1, None),
                                  [0.3, 0.1, 4.0, np.nan])


def test_error_rule_keys_are_the_schema_keys():
    # the configuration JSON schema shipped with the package (obsprep/schemas) lists the keys
    import json
    from pathlib import Path

    import obsprep

    schema = json.loads((Path(obsprep.__file__).parent / "schemas" / "config.schema.json").read_text())
    error = schema["properties"]["sources"]["items"]["properties"]["error"]
    assert set(error["properties"]) == set(ERROR_RULE_KEYS)
    assert set(schema["$defs"]["error_table"]["properties"]) == set(ERROR_TABLE_KEYS)


def test_implausible_raw_errors_are_rejected_under_their_own_reason():
    # sea level's physical range is -3..3 m (obsprep.model.quantities), 6 m wide: no real
    # uncertainty of a value exceeds every possible difference of two values
    errors = [0.03, 1e300, 1e28, np.inf, 0.0, -1.0, np.nan, 6.0, 6.000001]
    t = make_table(len(errors), quantity="sea_level_anomaly", error=errors)
    n = assign_errors(t, ErrorRule("file", cap=0.5, floor=0.01))  # the cap must not hide 1e300
    assert n == 7
    assert [None if isinstance(r, float) else r for r in t["rejected"].astype(object)] == [
        None, "implausible_error", "implausible_error", "implausible_error", "implausible_error",
        "implausible_error", "missing_error", None, "implausible_error"]
    kept = t["rejected"].isna().to_numpy()
    np.testing.assert_array_equal(t["error"].to_numpy()[kept], [0.03, 0.5])  # cap binds on 6.0
    assert np.isnan(t["error"].to_numpy()[~kept]).all()
    # the factor can make an error implausible (and 1e300 * 1e10 overflows to inf, no warning)
    t = make_table(2, quantity="sea_level_anomaly", error=[0.1, 1e300])
    assert assign_errors(t, ErrorRule("file", factor=1e10)) == 2
    assert list(t["rejected"]) == ["implausible_error", "implausible_error"]
    # 2 of 2 rows with implausible errors: the table's file gets a units warning
    assert any("raw errors of sea_level_anomaly" in w for w in t.attrs["warnings"])


def test_a_few_implausible_errors_give_no_units_warning():
    errors = np.full(20, 0.05)
    errors[0] = 1e300  # 1 of 20 (5 %) is a glitch, not wrong units
    t = make_table(20, quantity="sea_level_anomaly", error=errors)
    assert assign_errors(t, ErrorRule("file")) == 1
    assert "warnings" not in t.attrs
