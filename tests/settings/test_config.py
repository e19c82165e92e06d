"""Configuration: schema validation with errors naming the key, resolution, README in step."""

import re
from pathlib import Path

import numpy as np
import pytest

from obsprep.exceptions import ConfigError
from obsprep.settings.config import load_config, load_schema

ROOT = Path(__file__).parents[2]


def minimal(**over):
    cfg = {
        "window": {"analysis_time": "{date}T00:00:00", "date": "2026-11-20", "start_hours": -48.0,
                   "end_hours": 0.0, "slot_hours": 12.0},
        "grid": {"type": "regular", "lon_min": 0.0, "lat_min": 0.0, "dlon": 1.0, "dlat": 1.0,
                 "nlon": 4, "nlat": 4},
        "sources": [{"sensor": "alt_a", "paths": ["x_{date:%Y%m%d}.nc"], "error": {"rule": "constant", "value": 0.03}}],
    }
    cfg.update(over)
    return cfg


def test_minimal_config_resolves_window():
    cfg = load_config(minimal())
    assert cfg.window.analysis_time == np.datetime64("2026-11-20T00:00:00")
    assert cfg.window.start == np.datetime64("2026-11-18T00:00:00")
    assert cfg.window.n_slots == 4
    assert [d.day for d in cfg.window.days()] == [18, 19]
    assert cfg.output_path().name == "superobs_20261120.nc"


def test_date_override():
    cfg = load_config(minimal(), date="2026-01-02")
    assert cfg.window.analysis_time == np.datetime64("2026-01-02T00:00:00")


def test_typo_in_a_key_names_it_and_suggests():
    bad = minimal()
    bad["sources"][0]["eror"] = bad["sources"][0].pop("error")
    with pytest.raises(ConfigError) as info:
        load_config(bad)
    msg = str(info.value)
    assert "sources[0].eror" in msg and "error" in msg and "\n" not in msg


def test_wrong_type_and_missing_key_are_named():
    bad = minimal()
    bad["window"]["slot_hours"] = "six"
    with pytest.raises(ConfigError, match=r"window\.slot_hours"):
        load_config(bad)
    bad = minimal()
    del bad["grid"]
    with pytest.raises(ConfigError, match="'grid': required key is missing"):
        load_config(bad)


def test_semantic_errors_are_named():
    bad = minimal(superobs={"merge_sensors": {"all": ["alt_a", "nope"]}})
    with pytest.raises(ConfigError, match=r"superobs\.merge_sensors\.all.*nope"):
        load_config(bad)
    bad = minimal()
    bad["sources"][0]["kind"] = "martian"
    with pytest.raises(ConfigError, match=r"sources\[0\]\.kind"):
        load_config(bad)


def test_toml_file_errors(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text("[window\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(p)


def _schema_leaf_keys(node, prefix=""):
    keys = set()
    for name, sub in node.get("properties", {}).items():
        key = f"{prefix}.{name}" if prefix else name
        if sub.get("type") == "object" and "properties" in sub:
            keys |= _schema_leaf_keys(sub, key)
        elif sub.get("type") == "array" and "properties" in sub.get("items", {}):
            keys |= _schema_leaf_keys(sub["items"], key + "[]")
        else:
            keys.add(key)
    return keys


def test_readme_config_reference_matches_schema():
    text = (ROOT / "README.md").read_text()
    section = text.split("## Configuration reference", 1)[1].split("\n## ", 1)[0]
    documented = set()
    for line in section.splitlines():
        if line.startswith("| `"):
            first = line.split("|")[1]
            documented |= set(re.findall(r"`([^`]+)`", first))
    assert documented == _schema_leaf_keys(load_schema("config"))


@pytest.mark.parametrize("name", ["demo.toml", "regular_grid.toml", "curvilinear_grid.toml"])
def test_examples_validate(name):
    cfg = load_config(ROOT / "examples" / name)
    assert cfg.sources
