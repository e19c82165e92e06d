"""The affine unit maps kept in the user's cache directory: the numbers are pint's own (the
CF/udunits registry of cf_xarray is the reference), a cache of other package versions or one
that cannot be written changes nothing, and a later process converts without loading pint."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from obsprep.readers.cf import units

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def fresh_cache(tmp_path, monkeypatch):
    """An empty cache directory and a process that has not read any cache yet."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    monkeypatch.setattr(units, "_AFFINE_CONVERSIONS", {})
    monkeypatch.setattr(units, "_CACHE_LOADED", False)
    return tmp_path / "cache" / "obsprep" / units.CONVERSIONS_CACHE_FILE


def pint_map(unit, canonical):
    """(scale, offset) straight from the registry: f(1) - f(0) and f(0)."""
    at = units._registry().Quantity(np.array([0.0, 1.0]), unit).to(canonical).magnitude
    return float(at[1] - at[0]), float(at[0])


def test_the_cached_map_is_the_registry_map(fresh_cache, monkeypatch):
    kelvin = np.array([271.35, 273.15, 300.0])
    first = units.convert_units(kelvin, "kelvin", "degC", "f.nc")
    assert fresh_cache.exists()
    # a new process: the map comes from the file, not from pint
    monkeypatch.setattr(units, "_AFFINE_CONVERSIONS", {})
    monkeypatch.setattr(units, "_CACHE_LOADED", False)
    monkeypatch.setattr(units, "_registry", lambda: pytest.fail("pint asked again"))
    again = units.convert_units(kelvin, "kelvin", "degC", "f.nc")
    np.testing.assert_array_equal(again, first)
    monkeypatch.undo()
    # the stored numbers are exactly the registry's
    stored = {(u, c): (s, o) for u, c, s, o in json.loads(fresh_cache.read_text())["maps"]}
    assert stored[("kelvin", "degC")] == pint_map("kelvin", "degC")
    # reference: pint converting the array itself
    expected = units._registry().Quantity(kelvin, "kelvin").to("degC").magnitude
    np.testing.assert_allclose(first, expected, rtol=1e-12, atol=1e-12)


def test_a_cache_of_other_versions_is_not_used(fresh_cache):
    fresh_cache.parent.mkdir(parents=True)
    fresh_cache.write_text(json.dumps({"versions": {"pint": "0.0", "cf_xarray": "0.0"},
                                       "maps": [["km", "m", 7.0, 1.0]]}))
    assert units.convert_units(np.array([2.0]), "km", "m", "f.nc")[0] == 2000.0


def test_an_unreadable_cache_file_is_ignored(fresh_cache):
    fresh_cache.parent.mkdir(parents=True)
    fresh_cache.write_text("{not json")
    assert units.convert_units(np.array([1.5]), "km", "m", "f.nc")[0] == 1500.0


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0,
                    reason="root writes into read-only directories")
def test_a_read_only_cache_directory_only_means_no_cache(fresh_cache):
    fresh_cache.parent.mkdir(parents=True)
    fresh_cache.parent.chmod(0o500)
    try:
        assert units.convert_units(np.array([1.0]), "km", "m", "f.nc")[0] == 1000.0
        assert not fresh_cache.exists()
    finally:
        fresh_cache.parent.chmod(0o700)


def test_a_cache_file_that_cannot_be_written_only_means_no_cache(fresh_cache):
    fresh_cache.parent.parent.mkdir(parents=True)
    fresh_cache.parent.write_text("a file where the directory should be")
    assert units.convert_units(np.array([1.0]), "km", "m", "f.nc")[0] == 1000.0


def test_a_later_process_converts_without_loading_pint(fresh_cache):
    units.convert_units(np.array([1.0]), "kelvin", "degC", "f.nc")  # fills the cache
    code = ("import sys, numpy as np\n"
            "from obsprep.readers.cf import convert_units\n"
            "print(convert_units(np.array([273.15]), 'kelvin', 'degC', 'f.nc')[0], "
            "'pint' in sys.modules)")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True,
                         check=True).stdout.split()
    assert float(out[0]) == pytest.approx(0.0, abs=1e-12)
    assert out[1] == "False"


@pytest.mark.parametrize("dtype", [np.float32, np.int16, np.float64])
def test_a_unit_factor_of_one_gives_the_values_and_leaves_the_input_alone(dtype):
    # reference: numpy's float64 widening and the registry's affine map applied with numpy
    # (K -> degC has factor 1: t_C = t_K - 273.15; a difference takes the factor only)
    raw = np.array([0, 1, 250, 300], dtype=dtype)
    before = raw.copy()
    scale, offset = pint_map("kelvin", "degC")
    assert scale == 1.0  # the case this test is about
    widened = raw.astype(np.float64)
    np.testing.assert_array_equal(units.convert_units(raw, "kelvin", "degC", "f.nc"),
                                  widened * scale + offset)
    np.testing.assert_array_equal(units.convert_units(raw, "kelvin", "degC", "f.nc",
                                                      difference=True), widened * scale)
    np.testing.assert_array_equal(raw, before)  # the caller's array is not changed
    values = np.array([1.0, 2.0])
    converted = units.convert_units(values, "second", "s", "f.nc")
    converted += 1.0
    np.testing.assert_array_equal(values, [1.0, 2.0])  # a new array even for float64 input
