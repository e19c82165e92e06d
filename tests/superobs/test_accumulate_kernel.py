"""Tests of the compiled accumulation kernels (obsprep.superobs.batch_kernels).

Each kernel replaces a numpy computation of obsprep.superobs.accumulate; the numpy path is kept
(``_from_observations(..., compiled=False)``, one np.bincount per sum) and is the reference here,
together with outside references: numpy's extended precision (np.longdouble) for the sines and
cosines, pandas groupby and Python's math.fsum for grouped means and spreads.
"""

from __future__ import annotations

import math
import os
import pickle
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from read_only_install import environment, read_only_package, run_read_only  # noqa: F401 (fixture)

from obsprep.superobs import batch_kernels
from obsprep.superobs.accumulate import (
    PAIR_FIELDS,
    STATE_FIELDS,
    Accumulator,
    _from_observations,
)

#: unit-vector sums: the kernels' sines and cosines differ from the numpy path's by a few units
#: in the last place per row, so a sum can differ by a few 1e-16 of the sum of the magnitudes
#: (each |component| <= 1, so at most the count or the total weight): the usual error bound of a
#: floating-point sum (common practice)
UNIT_VECTOR_FIELDS = ("sum_x", "sum_y", "sum_z", "sum_weighted_x", "sum_weighted_y",
                      "sum_weighted_z")
EXACT_FIELDS = ("count", "value_min", "value_max")


def _both(keys, value, error, time, lon, lat, depth, *, score=None, tiebreak=None,
          cross_covariance=None, partner_error=None, pair_correlation=None):
    arguments = (keys, value, error, time, lon, lat, depth, score, tiebreak, cross_covariance,
                 partner_error, pair_correlation)
    return (_from_observations(Accumulator, *arguments, compiled=True),
            _from_observations(Accumulator, *arguments, compiled=False))


def assert_same_state(kernel, reference):
    """Every field of the two accumulators: counts, minima and maxima exact, unit-vector sums
    within 1e-12 of the count (or total weight), every other field within 1e-12 relative."""
    assert kernel.key_names == reference.key_names
    for name in kernel.key_names:
        np.testing.assert_array_equal(kernel.keys[name], reference.keys[name])
    assert set(kernel.state) == set(reference.state)
    for name, expected in reference.state.items():
        got = kernel.state[name]
        assert got.dtype == expected.dtype and got.shape == expected.shape, name
        if name in EXACT_FIELDS or name.startswith("representative_"):
            np.testing.assert_array_equal(got, expected, err_msg=name)
        elif name in UNIT_VECTOR_FIELDS:
            scale = (reference.state["sum_inverse_variance"] if "weighted" in name
                     else reference.state["count"])
            assert np.all(np.abs(got - expected) <= 1e-12 * scale), name
        else:
            np.testing.assert_allclose(got, expected, rtol=1e-12, atol=0, err_msg=name)


def _layout_keys(rng, layout, n):
    """Keys for each grouping path of accumulate._grouping."""
    if layout == "dense":  # direct code, every bin occupied
        return {"s": rng.integers(0, 2, n), "j": rng.integers(0, 5, n), "i": rng.integers(0, 7, n)}
    if layout == "nearly":  # direct code, a few bins empty (compressed at the end)
        cell = rng.integers(0, 1000, n)
        cell[cell == 17] = 18
        return {"j": cell // 40, "i": cell % 40}
    if layout == "sparse":  # direct code, a quarter of the bins occupied (renumbered)
        return {"j": rng.integers(0, 200, n) * 2, "i": rng.integers(0, 100, n) * 2}
    if layout == "sorted":  # a code range too wide to index: sorted codes
        return {"q": rng.choice([3, 9], n), "cell": rng.integers(0, 40, n) * 10**9}
    if layout == "lexsort":  # keys that overflow int64 when packed: lexicographic sort
        distinct = rng.integers(0, 400, (300, 8)) * 2**20
        rows = distinct[rng.integers(0, 300, n)]
        return {f"k{i}": rows[:, i] for i in range(8)}
    if layout == "swath":  # consecutive rows in the same or neighbouring cells
        row = np.arange(n)
        return {"g": np.full(n, 4), "j": (row // 300) // 7, "i": (row % 300) // 3}
    raise AssertionError(layout)


LAYOUTS = ("dense", "nearly", "sparse", "sorted", "lexsort", "swath")


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("errors", ["varying", "constant"])
@pytest.mark.parametrize("depths", ["varying", "constant", "scalar"])
def test_kernels_match_the_numpy_computation(layout, errors, depths):
    # Reference: the numpy path of accumulate.py (one np.bincount per sum).  Values 273.15 K
    # with a spread of millikelvin and cell means that differ by kelvins (the two-pass M2 is
    # needed there), times 1.7e9 s with a spread of seconds.
    rng = np.random.default_rng([LAYOUTS.index(layout), len(errors), len(depths)])
    n = 5000
    keys = _layout_keys(rng, layout, n)
    first_key = next(iter(keys.values()))
    value = 273.15 + 0.3 * (first_key % 7) + 1e-3 * rng.standard_normal(n)
    value[::11] = 280.0  # some groups with equal values (M2 = 0)
    error = rng.uniform(0.05, 0.8, n) if errors == "varying" else np.full(n, 0.4)
    time = 1.7e9 + rng.uniform(0.0, 5.0, n)
    lon = rng.uniform(-180.0, 540.0, n)
    lat = rng.uniform(-90.0, 90.0, n)
    depth = {"varying": rng.uniform(0.0, 2000.0, n), "constant": np.full(n, 5.0),
             "scalar": 5.0}[depths]
    kernel, reference = _both(keys, value, error, time, lon, lat, depth,
                              cross_covariance=rng.normal(0.0, 0.01, n),
                              partner_error=rng.uniform(0.1, 0.3, n))
    assert kernel.n_groups > 1
    assert_same_state(kernel, reference)


def test_kernels_match_with_score_pairs_and_error_groups():
    # Reference: the numpy path; the representative and the pair sums come from code the two
    # paths share, the state sums from the kernels.
    rng = np.random.default_rng(5)
    n = 4000
    keys = {"cell": rng.integers(0, 60, n), "error_group": rng.integers(0, 3, n)}
    data = dict(value=rng.normal(10.0, 2.0, n), error=rng.uniform(0.1, 1.0, n),
                time=rng.uniform(-3600.0, 3600.0, n), lon=rng.uniform(10.0, 10.5, n),
                lat=rng.uniform(60.0, 60.2, n), depth=rng.uniform(0.0, 10.0, n))
    kernel, reference = _both(keys, *data.values(), score=rng.integers(0, 4, n) * 1.0,
                              tiebreak=rng.permutation(n), pair_correlation=(0.4, 20_000.0))
    assert_same_state(kernel, reference)
    assert np.any(kernel.state["pair_sum_sigma"] > 0)
    collapsed_k = kernel.collapse("error_group", 0.0)
    collapsed_r = reference.collapse("error_group", 0.0)
    assert_same_state(collapsed_k, collapsed_r)
    for mode in ("mean", "weighted", "thin"):
        a, b = collapsed_k.finalize(mode=mode), collapsed_r.finalize(mode=mode)
        for column in a.columns:
            np.testing.assert_allclose(a[column], b[column], rtol=1e-12, atol=1e-12,
                                       err_msg=f"{mode} {column}")


def test_merged_kernel_batches_match_merged_numpy_batches():
    # Reference: the same batches accumulated by numpy and merged by the same merge.
    rng = np.random.default_rng(8)
    n = 6000
    keys = {"j": rng.integers(0, 6, n), "i": rng.integers(0, 9, n)}
    columns = (273.15 + 1e-3 * rng.standard_normal(n), rng.uniform(0.1, 0.5, n),
               1.7e9 + rng.uniform(0, 10, n), rng.uniform(0, 1, n), rng.uniform(0, 1, n),
               rng.uniform(0, 50, n))
    parts_k, parts_r = [], []
    for rows in np.array_split(np.arange(n), [1000, 1001, 4500]):
        k, r = _both({name: key[rows] for name, key in keys.items()},
                     *(column[rows] for column in columns))
        parts_k.append(k)
        parts_r.append(r)
    assert_same_state(Accumulator.merge(parts_k), Accumulator.merge(parts_r))


def test_kernel_results_are_the_same_bits_every_time():
    # Determinism (common practice): one sequential loop per batch, no threads.
    rng = np.random.default_rng(11)
    n = 20_000
    arguments = ({"i": rng.integers(0, 500, n)}, rng.normal(size=n), rng.uniform(0.1, 1, n),
                 rng.normal(size=n), rng.uniform(-180, 180, n), rng.uniform(-90, 90, n),
                 rng.uniform(0, 100, n))
    first = Accumulator.from_observations(*arguments)
    second = Accumulator.from_observations(*arguments)
    for name in first.state:
        assert first.state[name].tobytes() == second.state[name].tobytes(), name


def test_means_and_spreads_match_pandas_and_exact_sums():
    # References: pandas groupby (count, mean, var with ddof 0 times n, min, max, sum of
    # sigma^2) and, for the hardest groups, exact sums by math.fsum (correctly rounded).
    rng = np.random.default_rng(21)
    n = 30_000
    cell = rng.integers(0, 2000, n)
    value = 273.15 + 0.01 * (cell % 50) + 1e-4 * rng.standard_normal(n)  # 0.1 mK spread
    error = rng.uniform(0.1, 0.6, n)
    ones = np.ones(n)
    accumulator = Accumulator.from_observations({"cell": cell}, value, error, ones, ones, ones,
                                                ones)
    state = accumulator.state
    frame = pd.DataFrame({"cell": cell, "v": value, "var": error ** 2})
    reference = frame.groupby("cell").agg(n=("v", "size"), mean=("v", "mean"),
                                          var=("v", lambda v: np.var(v.to_numpy())),
                                          vmin=("v", "min"), vmax=("v", "max"),
                                          sum_var=("var", "sum"))
    np.testing.assert_array_equal(accumulator.keys["cell"], reference.index)
    np.testing.assert_array_equal(state["count"], reference["n"])
    np.testing.assert_array_equal(state["value_min"], reference["vmin"])
    np.testing.assert_array_equal(state["value_max"], reference["vmax"])
    np.testing.assert_allclose(state["value_mean"], reference["mean"], rtol=1e-14)
    np.testing.assert_allclose(state["value_m2"], reference["var"] * reference["n"], rtol=1e-9)
    np.testing.assert_allclose(state["sum_variance"], reference["sum_var"], rtol=1e-13)
    # exact: fsum of the values, then fsum of the squared deviations from the rounded mean
    for group in range(0, 2000, 97):
        rows = value[cell == group]
        mean = math.fsum(rows) / len(rows)
        m2 = math.fsum((rows - mean) ** 2)
        assert state["value_mean"][group] == pytest.approx(mean, rel=1e-15)
        assert state["value_m2"][group] == pytest.approx(m2, rel=1e-9)


# --- cos_sin_degrees --------------------------------------------------------------------------

def _unit_vectors(lon, lat):
    kernels = batch_kernels.compiled()
    x, y, z = (np.empty(len(lon)) for _ in range(3))
    kernels.unit_vectors_block(np.asarray(lon, float), np.asarray(lat, float), 0, len(lon), x, y, z)
    return x, y, z


def test_cos_sin_degrees_within_two_units_in_the_last_place():
    # Reference: sin and cos in numpy's extended precision (x87 long double, 64-bit
    # significand).  Its pi is rounded too, which near the axes (and for large angles) is worth
    # many units of a small result, so the reference takes the angle to the nearest axis first
    # by exact steps (np.fmod by 360, then r = a - 90 k, both exact in floating point) and
    # rotates: cos(90 k + r), sin(90 k + r) from cos r, sin r (the addition theorems).
    if np.finfo(np.longdouble).nmant < 63:
        pytest.skip("np.longdouble is not an extended precision type here")
    rng = np.random.default_rng(2)
    angle = np.concatenate([rng.uniform(-720.0, 720.0, 200_000), np.arange(-720.0, 721.0, 15.0),
                            rng.uniform(-1e-6, 1e-6, 1000), rng.uniform(-1e6, 1e6, 1000),
                            np.nextafter(np.arange(-360.0, 361.0, 45.0), np.inf),
                            np.nextafter(np.arange(-360.0, 361.0, 45.0), -np.inf)])
    cos_a, sin_a, zero = _unit_vectors(angle, np.zeros_like(angle))
    turn = np.fmod(angle, 360.0)
    k = np.round(turn / 90.0)
    r = turn - 90.0 * k
    pi = np.longdouble("3.14159265358979323846264338327950288")  # (from memory)
    radians = r.astype(np.longdouble) * pi / np.longdouble(180)
    c, s = np.cos(radians), np.sin(radians)
    quadrant = (k % 4).astype(int)
    exact_cos = np.choose(quadrant, [c, -s, -c, s])
    exact_sin = np.choose(quadrant, [s, c, -s, -c])
    for got, exact in ((cos_a, exact_cos), (sin_a, exact_sin)):
        ulp = np.spacing(np.abs(exact).astype(np.float64))
        error = np.abs(got.astype(np.longdouble) - exact).astype(np.float64)
        assert np.all(error <= 2.0 * ulp)
    assert np.all(zero == 0.0)
    # exact at multiples of 90 degrees (a quadrant's axis)
    axes = np.arange(-720.0, 721.0, 90.0)
    cos_a, sin_a, _ = _unit_vectors(axes, np.zeros_like(axes))
    np.testing.assert_array_equal(np.abs(cos_a), np.where(axes % 180 == 0, 1.0, 0.0))
    np.testing.assert_array_equal(np.abs(sin_a), np.where(axes % 180 == 90, 1.0, 0.0))


def test_unit_vectors_match_the_numpy_unit_vectors():
    # Reference: obsprep.superobs.spherical.unit_vectors (numpy, tangent half-angle formulas).
    # Both are within a few units of 2^-52 of the exact components (above: at most 2 units in
    # the last place here; the half-angle formulas up to about 4), so they agree within 1e-15.
    from obsprep.superobs.spherical import unit_vectors

    rng = np.random.default_rng(4)
    lon, lat = rng.uniform(-180, 360, 100_000), rng.uniform(-90, 90, 100_000)
    for got, expected in zip(_unit_vectors(lon, lat), unit_vectors(lon, lat)):
        assert np.max(np.abs(got - expected)) <= 1e-15


# --- bad input and inputs beyond the kernels' range -----------------------------------------

@pytest.mark.parametrize("column, bad, message", [
    ("value", np.nan, r"'value' must be finite"),
    ("error", 0.0, r"'error' must be finite and > 0"),
    ("time", np.inf, r"'time' must be finite"),
    ("lat", 90.5, r"'lat' must be finite and within -90.0..90.0"),
    ("lon", np.nan, r"'lon' must be finite"),
    ("depth", -np.inf, r"'depth' must be finite"),
    ("cross_covariance", np.nan, r"'cross_covariance' must be finite"),
    ("partner_error", -1.0, r"'partner_error' must be finite and > 0"),
])
def test_bad_values_found_by_the_kernel_are_named(column, bad, message):
    n = 50
    data = dict(value=np.ones(n), error=np.linspace(0.5, 1.0, n), time=np.zeros(n),
                lon=np.zeros(n), lat=np.zeros(n), depth=np.linspace(0, 10, n),
                cross_covariance=np.zeros(n), partner_error=np.ones(n))
    data[column][17] = bad
    with pytest.raises(ValueError, match=message + r"; 1 of 50 entries are not, first at index 17"):
        Accumulator.from_observations({"i": np.arange(n) % 3}, data.pop("value"), data.pop("error"),
                                      data.pop("time"), data.pop("lon"), data.pop("lat"),
                                      data.pop("depth"), **data)


def test_a_bad_scalar_depth_is_named():
    ones = np.ones(4)
    with pytest.raises(ValueError, match=r"'depth' must be finite"):
        Accumulator.from_observations({"i": np.arange(4)}, ones, ones, ones, ones, ones, np.nan)


def test_longitudes_beyond_the_kernel_range_use_the_numpy_path():
    # Reference: the numpy path (any finite longitude); the kernel reduces |lon| < 1e15 only.
    rng = np.random.default_rng(9)
    n = 300
    lon = rng.uniform(-180, 180, n)
    lon[5] = 3.6e20
    kernel, reference = _both({"i": rng.integers(0, 7, n)}, rng.normal(size=n),
                              rng.uniform(0.1, 1, n), np.zeros(n), lon, rng.uniform(-90, 90, n),
                              0.0)
    for name in (*STATE_FIELDS, *PAIR_FIELDS):
        np.testing.assert_array_equal(kernel.state[name], reference.state[name], err_msg=name)


# --- lazy import and the on-disk cache --------------------------------------------------------

def test_importing_the_accumulator_does_not_import_numba():
    script = ("import sys, obsprep, obsprep.superobs.accumulate, obsprep.superobs.batch_kernels; "
              "print('numba' in sys.modules)")
    result = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                            check=True, env=environment(os.environ.get("PYTHONPATH", "")))
    assert result.stdout.strip() == "False"


_RUN_ACCUMULATION = textwrap.dedent("""
    import json, warnings
    import numpy as np
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        from obsprep.superobs import batch_kernels
        from obsprep.superobs.accumulate import Accumulator
        a = Accumulator.from_observations({"i": np.array([0, 1, 1])}, np.array([1.0, 2.0, 4.0]),
                                          np.array([1.0, 2.0, 2.0]), np.zeros(3), np.zeros(3),
                                          np.zeros(3), 0.0)
    stats = batch_kernels.compiled().accumulate_rows.stats
    print(json.dumps(dict(module=batch_kernels.__file__, mean=a.state["value_mean"].tolist(),
                          cache_path=stats.cache_path, hits=sum(stats.cache_hits.values()),
                          misses=sum(stats.cache_misses.values()),
                          warnings=[str(w.message) for w in caught])))
""")


def _run(site, read_only_root, **extra):
    return run_read_only(_RUN_ACCUMULATION, site, read_only_root, **extra)


def test_kernel_cache_goes_to_the_user_cache_directory_when_the_package_is_read_only(
        read_only_package):  # noqa: F811 (the fixture)
    site, read_only_root, home = read_only_package
    cache_home = home / "cache"
    first = _run(site, read_only_root, HOME=str(home), XDG_CACHE_HOME=str(cache_home))
    second = _run(site, read_only_root, HOME=str(home), XDG_CACHE_HOME=str(cache_home))
    for run in (first, second):
        assert Path(run["module"]).is_relative_to(site)
        assert Path(run["cache_path"]).is_relative_to(cache_home / "numba")
        assert run["mean"] == [1.0, 3.0]  # (1) and (2 + 4) / 2
        assert run["warnings"] == []
    assert (first["misses"], first["hits"]) == (1, 0)  # compiled and written
    assert (second["misses"], second["hits"]) == (0, 1)  # loaded from the disk cache
    assert list((cache_home / "numba").rglob("batch_kernels.accumulate_rows-*.nbi"))
    assert not list(site.rglob("*.nb[ic]"))


def test_no_writable_kernel_cache_warns_once_and_still_computes(
        read_only_package):  # noqa: F811 (the fixture)
    site, read_only_root, _ = read_only_package
    unwritable = read_only_root / "no-home"
    run = _run(site, read_only_root, HOME=str(unwritable), XDG_CACHE_HOME=str(unwritable / "cache"))
    assert run["mean"] == [1.0, 3.0]
    assert len(run["warnings"]) == 1 and "no writable cache directory for numba" in run["warnings"][0]
    assert run["hits"] == 0


_RUN_UNCOMPILED = textwrap.dedent("""
    import pickle, sys
    import numpy as np
    from obsprep.superobs.accumulate import Accumulator, _from_observations
    rng = np.random.default_rng(3)
    n = 400
    arguments = ({"j": rng.integers(0, 4, n), "i": rng.integers(0, 9, n)}, rng.normal(size=n),
                 rng.uniform(0.1, 1.0, n), rng.uniform(0.0, 86400.0, n),
                 rng.uniform(-180.0, 180.0, n), rng.uniform(-90.0, 90.0, n), 0.0, None, None,
                 None, None, None)
    pickle.dump((_from_observations(Accumulator, *arguments, compiled=True),
                 _from_observations(Accumulator, *arguments, compiled=False)),
                open(sys.argv[1], "wb"))
""")


def test_kernels_run_as_python_with_numba_jit_disabled(tmp_path):
    # NUMBA_DISABLE_JIT=1 is numba's documented switch for debugging a kernel as Python (numba
    # documentation, environment variables); the accumulation still runs and matches the numpy
    # path (the prefetch intrinsic has no Python form and stays a no-op).
    out = tmp_path / "accumulators.pickle"
    result = subprocess.run([sys.executable, "-c", _RUN_UNCOMPILED, str(out)],
                            capture_output=True, text=True,
                            env=dict(environment(os.environ.get("PYTHONPATH", "")),
                                     NUMBA_DISABLE_JIT="1"))
    assert result.returncode == 0, result.stderr[-2000:]
    kernel, reference = pickle.loads(out.read_bytes())
    assert_same_state(kernel, reference)


# --- a whole build ------------------------------------------------------------------------------

def test_demo_build_is_the_same_with_the_numpy_path(tmp_path, monkeypatch):
    # Reference: the same demo built with the numpy path (the kernels' entry returns None, the
    # answer for input they leave to numpy).  Super-observations equal within 1e-12 relative
    # (lon and lat: the unit-vector sums differ in the last places), counts, keys, times and the
    # ledger identical.
    from obsprep.demo import write_demo
    from obsprep.run.build import build
    from obsprep.superobs import accumulate

    paths = write_demo(tmp_path / "demo", scale=0.1)
    compiled = build(paths["config"], out=tmp_path / "compiled")
    batches = []
    monkeypatch.setattr(accumulate, "_compiled_state", lambda *arguments: batches.append(1))
    reference = build(paths["config"], out=tmp_path / "reference")
    assert batches  # the numpy path did run
    a, b = compiled.superobs, reference.superobs
    assert list(a.columns) == list(b.columns) and len(a) == len(b) > 1000
    for column in a.columns:
        x, y = a[column].to_numpy(), b[column].to_numpy()
        if x.dtype.kind == "f":
            np.testing.assert_allclose(x, y, rtol=1e-12, atol=0, equal_nan=True, err_msg=column)
        elif x.dtype.kind == "M":
            np.testing.assert_array_equal(x.astype(np.int64), y.astype(np.int64), err_msg=column)
        else:
            np.testing.assert_array_equal(x, y, err_msg=column)
    assert ([(e.file, e.status, e.read, e.kept, e.rejected) for e in compiled.ledger.entries]
            == [(e.file, e.status, e.read, e.kept, e.rejected) for e in reference.ledger.entries])
