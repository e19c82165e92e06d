"""The compiled curvilinear cell search against the vectorised numpy search it replaces.

Reference: ``CurvilinearGrid`` with ``search = "numpy"`` (every step in numpy, the
implementation the compiled kernel replaces).  The kernel repeats its arithmetic operation for
operation, so the cells must be identical, not merely close: every comparison here is exact.
Positions are random over and around each grid (outside it, on its edges and centres, in the
polar cap, across the dateline, NaN), on land and at sea alike (the cell does not depend on the
mask).
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pyproj
import pytest
from read_only_install import environment, read_only_package, run_read_only  # noqa: F401 (fixture)

from obsprep.geo.grid import CurvilinearGrid, cell_search
from obsprep.geo.sphere import half_angle_tangent, unit_vector_components


def _pair(lon, lat, **options):
    """The same grid twice: compiled search and numpy search."""
    compiled = CurvilinearGrid(lon, lat, **options)
    compiled.compiled_from = 0  # the kernel for any number of positions
    reference = CurvilinearGrid(lon, lat, **options)
    reference.search = "numpy"
    return compiled, reference


def _sheared_polar_grid(ny=90, nx=80, spacing=50e3, north=True):
    """Centres of an EPSG:3413 (EPSG:3976 in the south) grid around the pole, bent by a smooth
    shear so that grid lines are curves: skewed cells and polar pieces."""
    crs = "EPSG:3413" if north else "EPSG:3976"
    x = -0.5 * nx * spacing + (np.arange(nx) + 0.5) * spacing
    y = -0.45 * ny * spacing + (np.arange(ny) + 0.5) * spacing
    xx, yy = np.meshgrid(x, y)
    xx = xx + 0.05 * yy * np.sin(yy / 1.0e6)
    yy = yy + 0.04 * xx * np.cos(xx / 1.5e6)
    lon, lat = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(xx, yy)
    return np.asarray(lon), np.asarray(lat)


def _rotated_grid_across_the_dateline(ny=40, nx=60, spacing=0.4, rotation_deg=25.0):
    r = np.radians(rotation_deg)
    j, i = np.mgrid[0:ny, 0:nx]
    lon = 170.0 + spacing * (np.cos(r) * i - np.sin(r) * j)
    lat = -20.0 + spacing * (np.sin(r) * i + np.cos(r) * j)
    return lon, lat


def _positions(lon_c, lat_c, n, seed):
    """Random positions over the grid and a margin of two cells around it: bilinear
    interpolation of the centres' unit vectors at random fractional indices (some exactly on
    centres and cell edges), plus NaN and out-of-range latitudes."""
    rng = np.random.default_rng(seed)
    ny, nx = lon_c.shape
    fi = rng.uniform(-2.0, nx + 1.0, n)
    fj = rng.uniform(-2.0, ny + 1.0, n)
    exact = rng.random(n) < 0.1  # on a centre (integer) or an edge (half integer)
    fi[exact] = np.round(2.0 * fi[exact]) / 2.0
    fj[exact] = np.round(2.0 * fj[exact]) / 2.0
    x, y, z = unit_vector_components(lon_c, lat_c)
    i0 = np.clip(np.floor(fi).astype(int), 0, nx - 2)
    j0 = np.clip(np.floor(fj).astype(int), 0, ny - 2)
    s, t = fi - i0, fj - j0  # beyond [0, 1] at the margin: linear extrapolation
    p = []
    for c in (x, y, z):
        p.append((1 - s) * (1 - t) * c[j0, i0] + s * (1 - t) * c[j0, i0 + 1]
                 + (1 - s) * t * c[j0 + 1, i0] + s * t * c[j0 + 1, i0 + 1])
    p = np.stack(p, axis=-1)
    p /= np.linalg.norm(p, axis=1)[:, None]
    lon = np.degrees(np.arctan2(p[:, 1], p[:, 0]))
    lat = np.degrees(np.arcsin(np.clip(p[:, 2], -1.0, 1.0)))
    # some positions exactly at a centre, given by its own coordinates
    at_centre = rng.integers(0, lon_c.size, n // 50)
    lon[: at_centre.size] = lon_c.ravel()[at_centre]
    lat[: at_centre.size] = lat_c.ravel()[at_centre]
    lon[-3:], lat[-3:] = [np.nan, 0.0, 10.0], [45.0, np.nan, 91.0]
    return lon, lat


def _half_tangents(lon, lat):
    return half_angle_tangent(lon), half_angle_tangent(lat)


def _assert_same_cells(compiled, reference, lon, lat):
    i, j = compiled.locate(lon, lat)
    i_ref, j_ref = reference.locate(lon, lat)
    np.testing.assert_array_equal(i, i_ref)
    np.testing.assert_array_equal(j, j_ref)
    return i, j


@pytest.mark.parametrize("north", [True, False])
def test_sheared_polar_grid_gives_the_numpy_cells(north):
    lon_c, lat_c = _sheared_polar_grid(north=north)
    land = np.zeros(lon_c.shape, dtype=bool)
    land[20:40, 10:30] = True  # a land block: cells are found on land as at sea
    compiled, reference = _pair(lon_c, lat_c, sea_mask=~land)
    assert (compiled._polar_piece != 0).any()  # the grid has pieces in the polar cap
    lon, lat = _positions(lon_c, lat_c, 200_000, seed=3413 if north else 3976)
    i, j = _assert_same_cells(compiled, reference, lon, lat)
    # the comparison covers every case: inside, outside, the polar cap, land
    assert (i >= 0).mean() > 0.8 and (i < 0).sum() > 1000
    polar = np.abs(lat) > 80.0
    assert (i[polar] >= 0).sum() > 1000
    assert land[j[i >= 0], i[i >= 0]].sum() > 1000


@pytest.mark.parametrize("north", [True, False])
def test_kernel_hands_over_what_the_numpy_first_step_hands_over(monkeypatch, north):
    # Stronger than equal cells (which steps 2 and 3 could repair): at the hand-over from the
    # first step to the KD-tree step, the positions left, the cells found so far and the best
    # near misses must be the same, bit for bit.
    lon_c, lat_c = _sheared_polar_grid(north=north)
    compiled, reference = _pair(lon_c, lat_c)
    reference.numpy_chunk_size = compiled.chunk_size  # the same parts, compared part by part
    lon, lat = _positions(lon_c, lat_c, 100_000, seed=21)
    handed_over = []
    search_near_centres = CurvilinearGrid._search_near_centres

    def recording(self, pending, lon, lat, points_at, found, near_miss, from_tree):
        handed_over.append((pending.copy(), found[0].copy(), found[1].copy(),
                            near_miss[pending].copy()))
        return search_near_centres(self, pending, lon, lat, points_at, found, near_miss,
                                   from_tree)

    monkeypatch.setattr(CurvilinearGrid, "_search_near_centres", recording)
    compiled.locate(lon, lat)
    ours = handed_over[:]
    handed_over.clear()
    reference.locate(lon, lat)
    assert len(ours) == len(handed_over) > 0
    for (pending, i, j, near), (pending_ref, i_ref, j_ref, near_ref) in zip(ours, handed_over):
        np.testing.assert_array_equal(np.sort(pending), np.sort(pending_ref))
        np.testing.assert_array_equal(i, i_ref)
        np.testing.assert_array_equal(j, j_ref)
        near = near[np.argsort(pending)]
        near_ref = near_ref[np.argsort(pending_ref)]
        np.testing.assert_array_equal(near[:, 0], near_ref[:, 0])
        missed = np.isfinite(near_ref[:, 0])  # the other columns are read only there
        np.testing.assert_array_equal(near[missed], near_ref[missed])
    assert sum(len(part[0]) for part in ours) > 100


def test_rotated_grid_across_the_dateline_gives_the_numpy_cells():
    lon_c, lat_c = _rotated_grid_across_the_dateline()
    compiled, reference = _pair(lon_c, lat_c)
    lon, lat = _positions(lon_c, lat_c, 100_000, seed=180)
    lon[::7] -= 360.0  # any longitude range
    i, _ = _assert_same_cells(compiled, reference, lon, lat)
    assert (i >= 0).mean() > 0.8
    assert ((i >= 0) & (lon % 360.0 > 180.0)).sum() > 1000  # west of the dateline, found


def test_polar_coordinates_asked_for_by_the_kernel_give_the_same_cells(monkeypatch):
    # Without the latitude shortcut every position meeting a polar piece asks for its polar
    # coordinates and is searched a second time; the cells must not change.
    lon_c, lat_c = _sheared_polar_grid()
    compiled, reference = _pair(lon_c, lat_c)
    monkeypatch.setattr(CurvilinearGrid, "_polar_cap_reach", (np.inf, -np.inf))
    lon, lat = _positions(lon_c, lat_c, 50_000, seed=7)
    _assert_same_cells(compiled, reference, lon, lat)
    status = cell_search.table_search(lon[:-3], lat[:-3], _half_tangents(lon[:-3], lat[:-3]),
                                      compiled._search_tables)[3]
    assert (status == cell_search.NEEDS_NORTH).sum() > 1000


def test_kernel_places_most_positions_and_leaves_the_rest_to_the_tree():
    # The kernel does step 1 of the search; what it cannot place goes on as in numpy.  Both
    # kinds must be present for the comparison above to test the hand-over.
    lon_c, lat_c = _sheared_polar_grid()
    grid = CurvilinearGrid(lon_c, lat_c)
    lon, lat = _positions(lon_c, lat_c, 100_000, seed=11)
    lon, lat = lon[:-3], lat[:-3]
    north_from, _ = grid._polar_cap_reach
    hemisphere = np.where(lat >= north_from, 1, 0)
    status = cell_search.table_search(lon, lat, _half_tangents(lon, lat), grid._search_tables,
                                      grid._polar_coordinates(lon, lat, hemisphere))[3]
    counts = np.bincount(status, minlength=5)
    assert counts[cell_search.FOUND] > 0.7 * lon.size
    assert counts[cell_search.PENDING] > 100


def test_small_chunks_give_the_same_cells():
    # memory-bounded processing must not change the answer (common practice)
    lon_c, lat_c = _sheared_polar_grid(ny=30, nx=30)
    compiled, reference = _pair(lon_c, lat_c)
    compiled.chunk_size = 333
    lon, lat = _positions(lon_c, lat_c, 20_000, seed=5)
    _assert_same_cells(compiled, reference, lon, lat)


def test_few_positions_are_searched_without_numba():
    # below compiled_from positions the numpy search runs (the same cells), and numba is not
    # imported for it
    script = ("import sys, numpy as np; from obsprep.geo.grid import CurvilinearGrid; "
              "lon, lat = np.meshgrid(np.arange(5.0), np.arange(4.0)); "
              "print(CurvilinearGrid(lon, lat).locate([2.2, 0.4], [1.6, 2.9]), "
              "'numba' in sys.modules)")
    result = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                            check=True, env=environment(os.environ.get("PYTHONPATH", "")))
    # a regular 1-degree grid: nearest centres (i, j) = (2, 2) and (0, 3) (by hand)
    assert result.stdout.split() == ["(array([2,", "0]),", "array([2,", "3]))", "False"]


def test_importing_the_grids_does_not_import_numba():
    script = ("import sys, obsprep, obsprep.geo.grid, obsprep.geo.grid.cell_search; "
              "print('numba' in sys.modules)")
    result = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                            check=True, env=environment(os.environ.get("PYTHONPATH", "")))
    assert result.stdout.strip() == "False"


# --- the on-disk cache when the package directory is read-only ---------------------------------

_RUN_KERNEL = textwrap.dedent("""
    import json, warnings
    import numpy as np
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        from obsprep.geo.grid import CurvilinearGrid, cell_search
        lon, lat = np.meshgrid(np.arange(5.0), np.arange(4.0))
        grid = CurvilinearGrid(lon, lat)
        grid.compiled_from = 0
        i, j = grid.locate(2.2, 1.6)
    stats = cell_search._compiled_table_search().stats
    print(json.dumps(dict(module=cell_search.__file__, cell=[int(i), int(j)],
                          cache_path=stats.cache_path, hits=sum(stats.cache_hits.values()),
                          misses=sum(stats.cache_misses.values()),
                          warnings=[str(w.message) for w in caught])))
""")

def test_cache_goes_to_the_user_cache_directory_when_the_package_is_read_only(read_only_package):  # noqa: F811 (the fixture)
    site, read_only_root, home = read_only_package
    cache_home = home / "cache"
    runs = [run_read_only(_RUN_KERNEL, site, read_only_root, HOME=str(home),
                          XDG_CACHE_HOME=str(cache_home)) for _ in range(2)]
    first, second = runs
    for run in runs:
        assert Path(run["module"]).is_relative_to(site)
        assert Path(run["cache_path"]).is_relative_to(cache_home / "numba")
        # a regular 1-degree grid: (2.2, 1.6) is nearest the centre (2, 2) (by hand)
        assert run["cell"] == [2, 2]
        assert run["warnings"] == []
    assert (first["misses"], first["hits"]) == (1, 0)  # compiled and written
    assert (second["misses"], second["hits"]) == (0, 1)  # loaded from the disk cache
    assert list((cache_home / "numba").rglob("cell_search._table_search_loop-*.nbi"))
