"""Stage settings: the shipped schema agrees with the one declaration of each key."""

import dataclasses

import pytest

from obsprep.settings.config import load_config, load_schema
from obsprep.settings.stages import OutputSettings, SuperobsSettings


@pytest.mark.parametrize("table, cls", [("superobs", SuperobsSettings), ("output", OutputSettings)])
def test_schema_table_matches_declarations(table, cls):
    properties = load_schema("config")["properties"][table]["properties"]
    declared = {f.name: f for f in dataclasses.fields(cls)}
    assert set(properties) == set(declared)
    for name, f in declared.items():
        node = properties[name]
        if f.default is not dataclasses.MISSING and f.default is not None:
            assert node.get("default") == f.default, name
        for constraint, value in f.metadata["constraints"].items():
            schema_value = node.get(constraint, node.get("additionalProperties", {}).get(constraint))
            assert schema_value == value, (name, constraint)


def test_settings_are_frozen_and_defaults_apply():
    cfg = load_config({
        "window": {"analysis_time": "2026-11-20T00:00:00"},
        "grid": {"type": "regular", "lon_min": 0.0, "lat_min": 0.0, "dlon": 1.0, "dlat": 1.0,
                 "nlon": 2, "nlat": 2},
        "sources": [{"sensor": "a", "paths": ["a.nc"], "error": {"rule": "constant", "value": 0.1}}],
        "superobs": {"mode": "thin", "error_floor": {"sea_level_anomaly": 0.01}},
    })
    assert cfg.superobs.mode == "thin" and cfg.superobs.spread_combination == "instrument"
    assert cfg.superobs.error_floor["sea_level_anomaly"] == 0.01
    assert cfg.output.parquet is False
    with pytest.raises(dataclasses.FrozenInstanceError):
        cfg.superobs.mode = "mean"
    with pytest.raises(TypeError):
        cfg.superobs.error_floor["sea_ice_concentration"] = 0.1
