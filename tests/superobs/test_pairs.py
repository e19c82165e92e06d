"""Pair sums of distance-dependent error correlation (obsprep.superobs.pairs).

References: a plain numpy implementation below (np.subtract.outer over each group, a full
correlation matrix, a quadratic form); great-circle distances from pyproj.Geod on a sphere of
the same radius (GeographicLib, [Karney2013]); the constant-correlation limit in closed form,
sum_{i != j} a_i a_j = (sum a)^2 - sum a^2 (algebra); and Monte Carlo with numpy: errors drawn
with the model's covariance (Cholesky factor), the variance of their means estimated from the
draws.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pyproj
import pytest
from read_only_install import environment, read_only_package, run_read_only  # noqa: F401 (fixture)

from obsprep.geo.sphere import EARTH_MEAN_RADIUS_M
from obsprep.superobs.accumulate import _group_index
from obsprep.superobs.pairs import within_group_pair_sums
from obsprep.superobs.spherical import unit_vectors

#: degrees of latitude in about 10 km (1 degree is about 111 km on the Earth, from memory)
_HALF_SPREAD_DEG = 0.09


def reference_pair_sums(order, starts, x, y, z, a, b, rho0, length_m):
    """The same sums from a full correlation matrix per group (numpy, no shared code)."""
    ends = np.append(starts[1:], len(order))
    pair_a, pair_b = np.zeros(len(starts)), np.zeros(len(starts))
    for g, (begin, end) in enumerate(zip(starts, ends)):
        rows = order[begin:end]
        chord = np.sqrt(sum(np.subtract.outer(c[rows], c[rows]) ** 2 for c in (x, y, z)))
        distance = 2.0 * EARTH_MEAN_RADIUS_M * np.arcsin(np.minimum(chord / 2.0, 1.0))
        correlation = rho0 * np.exp(-distance / length_m)
        np.fill_diagonal(correlation, 0.0)
        pair_a[g] = a[rows] @ correlation @ a[rows]
        pair_b[g] = b[rows] @ correlation @ b[rows]
    return pair_a, pair_b


def random_groups(rng, sizes):
    """Rows of groups with the given sizes, rows shuffled; each group scattered within about
    20 km of a random centre.  Returns the group of each row, x, y, z, sigma."""
    group_of_row = rng.permutation(np.repeat(np.arange(len(sizes)), sizes))
    centre_lon = rng.uniform(-180.0, 180.0, len(sizes))
    centre_lat = rng.uniform(-75.0, 75.0, len(sizes))
    lat = centre_lat[group_of_row] + rng.uniform(-_HALF_SPREAD_DEG, _HALF_SPREAD_DEG, len(group_of_row))
    lon = centre_lon[group_of_row] + rng.uniform(-_HALF_SPREAD_DEG, _HALF_SPREAD_DEG, len(group_of_row)) / np.cos(
        np.radians(lat))
    x, y, z = unit_vectors(lon, lat)
    sigma = rng.uniform(0.1, 2.0, len(group_of_row))
    return group_of_row, x, y, z, sigma


@pytest.fixture(scope="module")
def groups():
    rng = np.random.default_rng(20261204)
    sizes = np.concatenate([[1, 2, 200], rng.integers(1, 201, 37)])
    group_of_row, x, y, z, sigma = random_groups(rng, sizes)
    order, starts, _ = _group_index([group_of_row])
    return order, starts, x, y, z, sigma


@pytest.mark.parametrize("rho0, length_m", [(0.3, 2_000.0), (1.0, 50_000.0), (0.7, 50.0)])
def test_pair_sums_match_numpy_reference(groups, rho0, length_m):
    order, starts, x, y, z, sigma = groups
    got = within_group_pair_sums(order, starts, x, y, z, sigma, 1.0 / sigma, rho0, length_m)
    expected = reference_pair_sums(order, starts, x, y, z, sigma, 1.0 / sigma, rho0, length_m)
    sizes = np.diff(np.append(starts, len(order)))
    for computed, reference in zip(got, expected):
        assert computed.dtype == np.float64 and computed.shape == (len(starts),)
        np.testing.assert_allclose(computed, reference, rtol=1e-12, atol=0.0)
        assert np.all(computed[sizes == 1] == 0.0)
        assert np.all(computed[sizes > 1] > 0.0)


def test_row_order_within_groups_and_group_order_do_not_matter(groups):
    order, starts, x, y, z, sigma = groups
    first = within_group_pair_sums(order, starts, x, y, z, sigma, 1.0 / sigma, 0.5, 5_000.0)
    rng = np.random.default_rng(7)
    members = np.split(order, starts[1:])
    group_order = rng.permutation(len(members))
    shuffled = [rng.permutation(members[g]) for g in group_order]
    new_starts = np.cumsum([0] + [len(m) for m in shuffled[:-1]])
    second = within_group_pair_sums(np.concatenate(shuffled), new_starts, x, y, z, sigma, 1.0 / sigma, 0.5, 5_000.0)
    for before, after in zip(first, second):
        np.testing.assert_allclose(after, before[group_order], rtol=1e-12, atol=0.0)


def test_zero_correlation_gives_zero(groups):
    order, starts, x, y, z, sigma = groups
    pair_a, pair_b = within_group_pair_sums(order, starts, x, y, z, sigma, 1.0 / sigma, 0.0, 5_000.0)
    assert np.all(pair_a == 0.0) and np.all(pair_b == 0.0)


@pytest.mark.parametrize("length_m", [1e30, math.inf])
def test_very_long_length_scale_gives_constant_correlation_closed_form(groups, length_m):
    order, starts, x, y, z, sigma = groups
    rho0 = 0.4
    pair_a, pair_b = within_group_pair_sums(order, starts, x, y, z, sigma, 1.0 / sigma, rho0, length_m)
    group_of_position = np.repeat(np.arange(len(starts)), np.diff(np.append(starts, len(order))))
    for weight, computed in ((sigma, pair_a), (1.0 / sigma, pair_b)):
        w = weight[order]
        # sum over i != j of w_i w_j = (sum w)^2 - sum w^2 (algebra)
        closed_form = rho0 * (np.bincount(group_of_position, w) ** 2 - np.bincount(group_of_position, w * w))
        np.testing.assert_allclose(computed, closed_form, rtol=1e-12, atol=1e-12 * closed_form.max())


# lon1, lat1, lon2, lat2 in degrees: about 10 m, 1 km, 20 km, 2000 km, across the dateline, at
# the pole, nearly antipodal, and either side of 637 km, where the kernel's arcsine changes from
# its series to the library call
PAIRS = [
    (0.0, 0.0, 5.7, 0.0),
    (0.0, 0.0, 5.8, 0.0),
    (10.0, 45.0, 10.0001, 45.00005),
    (-30.0, -60.0, -29.99, -60.005),
    (179.95, 70.0, -179.9, 70.1),
    (0.0, 0.0, 15.0, 10.0),
    (-120.0, 89.99, 60.0, 89.98),
    (0.0, 10.0, 179.5, -10.2),
]


@pytest.mark.parametrize("lon1, lat1, lon2, lat2", PAIRS)
def test_distance_matches_pyproj_geodesic_on_the_sphere(lon1, lat1, lon2, lat2):
    # pyproj.Geod with flattening 0 is the sphere of radius a (GeographicLib, [Karney2013])
    _, _, geodesic_m = pyproj.Geod(a=EARTH_MEAN_RADIUS_M, f=0.0).inv(lon1, lat1, lon2, lat2)
    x, y, z = unit_vectors(np.array([lon1, lon2]), np.array([lat1, lat2]))
    ones = np.ones(2)
    # a two-row group with rho0 = 1 and unit weights sums 2 exp(-d / L): d = -L ln(P / 2);
    # L = d keeps the exponential far from underflow for every distance
    pair_a, _ = within_group_pair_sums(np.arange(2), np.array([0]), x, y, z, ones, ones, 1.0, geodesic_m)
    kernel_m = -geodesic_m * math.log(pair_a[0] / 2.0)
    # unit vectors carry about 1e-16 absolute error, about a nanometre on the Earth's radius, and
    # GeographicLib is accurate to round-off on the sphere ([Karney2013]); near 637 km, 1e-13
    # relative is a tenth of the arcsine series' h^9 term (35 h^9 / 1152, 1.1e-12 of the angle)
    assert kernel_m == pytest.approx(geodesic_m, rel=1e-13, abs=1e-8)


def test_monte_carlo_variance_of_equal_and_weighted_means():
    rng = np.random.default_rng(1234)
    n, rho0, length_m, draws = 30, 0.6, 5_000.0, 20_000
    _, x, y, z, sigma = random_groups(rng, [n])
    chord = np.sqrt(sum(np.subtract.outer(c, c) ** 2 for c in (x, y, z)))
    correlation = rho0 * np.exp(-2.0 * EARTH_MEAN_RADIUS_M * np.arcsin(chord / 2.0) / length_m)
    np.fill_diagonal(correlation, 1.0)
    covariance = np.outer(sigma, sigma) * correlation
    errors = rng.standard_normal((draws, n)) @ np.linalg.cholesky(covariance).T

    pair_a, pair_b = within_group_pair_sums(np.arange(n), np.array([0]), x, y, z, sigma, 1.0 / sigma, rho0, length_m)
    w = 1.0 / sigma**2
    predicted_mean = (np.sum(sigma**2) + pair_a[0]) / n**2
    predicted_weighted = (np.sum(w) + pair_b[0]) / np.sum(w) ** 2
    # the means have zero expectation: their variance is estimated by the mean square, whose
    # relative standard error for Gaussian values is sqrt(2 / draws) = 1.0 % (the variance of a
    # chi-square with N degrees of freedom is 2N); 5 % is five standard errors
    tolerance = 5.0 * math.sqrt(2.0 / draws)
    assert np.mean(errors.mean(axis=1) ** 2) == pytest.approx(predicted_mean, rel=tolerance)
    assert np.mean((errors @ w / np.sum(w)) ** 2) == pytest.approx(predicted_weighted, rel=tolerance)
    # the correlation matters at this tolerance: without it the prediction is well off
    assert predicted_mean > 1.5 * np.sum(sigma**2) / n**2


def test_no_groups_gives_empty_sums():
    empty = np.zeros(0)
    pair_a, pair_b = within_group_pair_sums(np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp),
                                            empty, empty, empty, empty, empty, 0.5, 1_000.0)
    assert pair_a.shape == (0,) and pair_b.shape == (0,)


def _two_rows(**override):
    x, y, z = unit_vectors(np.array([0.0, 0.01]), np.array([0.0, 0.0]))
    arguments = dict(order=np.arange(2), starts=np.array([0]), x=x, y=y, z=z, a=np.ones(2), b=np.ones(2),
                     rho0=0.5, length_m=1_000.0)
    arguments.update(override)
    return arguments


@pytest.mark.parametrize("override, message", [
    (dict(rho0=1.5), r"rho0 must be a correlation in \[0, 1\], got 1.5"),
    (dict(rho0=-0.1), r"rho0 must be a correlation in \[0, 1\]"),
    (dict(rho0=math.nan), r"rho0 must be a correlation in \[0, 1\], got nan"),
    (dict(length_m=0.0), r"length_m must be a length scale > 0 metres, got 0.0"),
    (dict(length_m=-5.0), r"length_m must be a length scale > 0 metres"),
    (dict(length_m=math.nan), r"length_m must be a length scale > 0 metres, got nan"),
    (dict(order=np.array([0, 2])), r"order must hold row indices in 0..1, got 0..2"),
    (dict(order=np.array([1, 1])), r"order must list each row at most once"),
    (dict(order=np.array([0.0, 1.0])), r"order must be a 1-D integer array, got float64"),
    (dict(starts=np.array([1])), r"starts must begin with 0, got 1"),
    (dict(starts=np.array([0, 0])), r"starts must increase strictly"),
    (dict(starts=np.array([0, 2])), r"starts must increase strictly and stay below len\(order\) = 2"),
    (dict(a=np.array([1.0, math.nan])), r"a must be finite, got 1 non-finite values"),
    (dict(b=np.ones(3)), r"b must be a 1-D array of 2 rows \(as x\), got shape \(3,\)"),
    (dict(x=np.array([0.0, 10.0])), r"x, y, z must be unit vectors"),
])
def test_bad_input_is_named(override, message):
    with pytest.raises(ValueError, match=message):
        within_group_pair_sums(**_two_rows(**override))


def test_importing_obsprep_does_not_import_numba():
    script = "import sys, obsprep, obsprep.superobs.pairs; print('numba' in sys.modules)"
    result = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True,
                            env=environment(os.environ.get("PYTHONPATH", "")))
    assert result.stdout.strip() == "False"


# --- the on-disk cache when the package directory is read-only ---------------------------------

_RUN_KERNEL = textwrap.dedent("""
    import json, sys, warnings
    import numpy as np
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        from obsprep.superobs import pairs
        x, y, z = np.array([1.0, 0.0]), np.array([0.0, 1.0]), np.zeros(2)
        pair_a, _ = pairs.within_group_pair_sums(np.arange(2), np.array([0]), x, y, z,
                                                 np.ones(2), np.ones(2), 1.0, 1e7)
    stats = pairs._compiled_pair_sums().stats
    print(json.dumps(dict(module=pairs.__file__, pair_a=float(pair_a[0]), cache_path=stats.cache_path,
                          hits=sum(stats.cache_hits.values()), misses=sum(stats.cache_misses.values()),
                          warnings=[str(w.message) for w in caught])))
""")

#: a quarter great circle, 2 pi R / 4, between the two unit vectors of _RUN_KERNEL
_QUARTER_CIRCLE_M = math.pi * EARTH_MEAN_RADIUS_M / 2.0


def _run_kernel(site, read_only_root, **extra):
    return run_read_only(_RUN_KERNEL, site, read_only_root, **extra)


def test_cache_goes_to_the_user_cache_directory_when_the_package_is_read_only(read_only_package):  # noqa: F811 (the fixture)
    site, read_only_root, home = read_only_package
    cache_home = home / "cache"
    first = _run_kernel(site, read_only_root, HOME=str(home), XDG_CACHE_HOME=str(cache_home))
    second = _run_kernel(site, read_only_root, HOME=str(home), XDG_CACHE_HOME=str(cache_home))
    for run in (first, second):
        assert Path(run["module"]).is_relative_to(site)
        assert Path(run["cache_path"]).is_relative_to(cache_home / "numba")
        assert run["pair_a"] == pytest.approx(2.0 * math.exp(-_QUARTER_CIRCLE_M / 1e7), rel=1e-12)
        assert run["warnings"] == []
    assert (first["misses"], first["hits"]) == (1, 0)  # compiled and written
    assert (second["misses"], second["hits"]) == (0, 1)  # loaded from the disk cache
    assert list((cache_home / "numba").rglob("pairs._pair_sums_loop-*.nbi"))
    assert not list(site.rglob("*.nb[ic]"))


def test_user_cache_directory_set_by_the_user_is_kept(read_only_package):  # noqa: F811 (the fixture)
    site, read_only_root, home = read_only_package
    chosen = home / "chosen-numba-cache"
    run = _run_kernel(site, read_only_root, HOME=str(home), NUMBA_CACHE_DIR=str(chosen))
    assert Path(run["cache_path"]).is_relative_to(chosen)
    assert list(chosen.rglob("pairs._pair_sums_loop-*.nbi"))


def test_no_writable_cache_directory_warns_and_still_computes(read_only_package):  # noqa: F811 (the fixture)
    site, read_only_root, _ = read_only_package
    unwritable = read_only_root / "no-home"  # inside the read-only tree: cannot be created
    run = _run_kernel(site, read_only_root, HOME=str(unwritable), XDG_CACHE_HOME=str(unwritable / "cache"))
    assert run["pair_a"] == pytest.approx(2.0 * math.exp(-_QUARTER_CIRCLE_M / 1e7), rel=1e-12)
    assert len(run["warnings"]) == 1 and "no writable cache directory for numba" in run["warnings"][0]
    assert run["hits"] == 0
