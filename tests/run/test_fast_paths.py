"""The fast paths added for scale give the same answers as the straightforward ones.

- curvilinear grids: the lookup-table first guess against the KD-tree first guess (scipy
  cKDTree, the reference search), on grids of several shapes, inside and outside;
- the observation table: code-based masks and rejections against pandas string comparison;
- classification codes against the reason strings.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyproj
import pytest

from obsprep.geo.grid import CurvilinearGrid
from obsprep.geo.grid.base import CLASSIFY_REASONS
from obsprep.model.table import category_masks, kept, make_table, reject


def grid_pair(lon, lat):
    fast = CurvilinearGrid(lon, lat)
    by_tree = CurvilinearGrid(lon, lat)
    by_tree.first_guess = "tree"
    return fast, by_tree


def sheared_polar_grid(ny=60, nx=50):
    """Centres of a polar stereographic grid (PROJ via pyproj) bent by a smooth shear."""
    x = -1.5e6 + 60e3 * np.arange(nx)
    y = -1.8e6 + 60e3 * np.arange(ny)
    xx, yy = np.meshgrid(x, y)
    xx = xx + 0.05 * yy * np.sin(yy / 7e5)
    lon, lat = pyproj.Transformer.from_crs("EPSG:3413", "EPSG:4326",
                                           always_xy=True).transform(xx, yy)
    return np.asarray(lon), np.asarray(lat)


def dateline_grid(ny=40, nx=60):
    """A rotated lon/lat grid across the dateline (centres east of 170 E to west of 170 W)."""
    j, i = np.mgrid[0:ny, 0:nx]
    lon = 165.0 + 0.5 * i + 0.1 * j
    lat = -30.0 + 0.4 * j - 0.05 * i
    return (lon + 180.0) % 360.0 - 180.0, lat


@pytest.mark.parametrize("make", [sheared_polar_grid, dateline_grid], ids=["polar", "dateline"])
def test_lookup_table_guess_finds_the_cells_of_the_kdtree_guess(make):
    lon_c, lat_c = make()
    fast, by_tree = grid_pair(lon_c, lat_c)
    assert fast._lookup is not None  # the table path is the one under test
    rng = np.random.default_rng(1)
    # positions around every centre, out to two cells away (inside, edges, outside)
    ny, nx = lon_c.shape
    pick = rng.integers(0, ny * nx, 20_000)
    jc, ic = np.divmod(pick, nx)
    step_lon = np.abs(np.diff(lon_c, axis=1)).max() % 360.0
    step_lat = np.abs(np.diff(lat_c, axis=0)).max()
    lon = lon_c[jc, ic] + rng.uniform(-2.0, 2.0, pick.size) * min(step_lon, 5.0)
    lat = np.clip(lat_c[jc, ic] + rng.uniform(-2.0, 2.0, pick.size) * step_lat, -90.0, 90.0)
    i_fast, j_fast = fast.locate(lon, lat)
    i_tree, j_tree = by_tree.locate(lon, lat)
    np.testing.assert_array_equal(i_fast, i_tree)
    np.testing.assert_array_equal(j_fast, j_tree)
    assert (i_fast >= 0).mean() > 0.5 and (i_fast < 0).any()  # both inside and outside


def test_a_global_grid_has_no_table_and_still_locates():
    # Centres all around the globe: no single stereographic plane holds them; the KD-tree
    # first guess is used, with the same cells as asking for it explicitly.
    lon = np.linspace(-179.0, 179.0, 90)
    lat = np.linspace(-80.0, 80.0, 41)
    lon_c, lat_c = np.meshgrid(lon, lat)
    fast, by_tree = grid_pair(lon_c, lat_c)
    assert fast._lookup is None
    rng = np.random.default_rng(2)
    points = rng.uniform(-180, 180, 5000), rng.uniform(-85, 85, 5000)
    for a, b in zip(fast.locate(*points), by_tree.locate(*points)):
        np.testing.assert_array_equal(a, b)


def small_table(rng, n=2000):
    quantity = rng.choice(["sea_level_anomaly", "sea_surface_temperature"], n)
    return make_table(quantity=pd.Categorical(quantity), value=rng.normal(size=n),
                      lon=rng.uniform(0, 1, n), lat=rng.uniform(0, 1, n),
                      time=np.full(n, np.datetime64("2026-11-19T12:00", "ns"))), quantity


def test_category_masks_equal_string_comparison():
    table, quantity = small_table(np.random.default_rng(3))
    masks = category_masks(table)
    # Reference: numpy comparison of the strings themselves
    assert set(masks) == set(np.unique(quantity))
    for name, mask in masks.items():
        np.testing.assert_array_equal(mask, quantity == name)


def test_reject_keeps_the_first_reason_like_pandas_assignment():
    rng = np.random.default_rng(4)
    table, _ = small_table(rng)
    first = rng.random(len(table)) < 0.3
    second = rng.random(len(table)) < 0.3
    assert reject(table, first, "missing_value") == int(first.sum())
    assert reject(table, second, "out_of_range") == int((second & ~first).sum())
    # Reference: the same rule written with pandas/numpy strings
    expected = np.where(first, "missing_value", np.where(second, "out_of_range", None))
    got = table["rejected"].astype(object).where(table["rejected"].notna(), None).to_numpy()
    np.testing.assert_array_equal(got, expected)
    np.testing.assert_array_equal(kept(table), ~(first | second))


def test_make_table_does_not_share_read_only_inputs():
    value = np.arange(5.0)
    view = np.broadcast_to(np.float64(1.5), (5,))  # read-only
    table = make_table(value=value, lon=view, lat=view,
                       time=np.full(5, np.datetime64("2026-11-19", "ns")))
    assert table["lon"].to_numpy().base is not view
    table.loc[0, "lon"] = 9.0  # writing must work, and must not touch the caller's view
    assert view[0] == 1.5 and table["lon"].iloc[0] == 9.0


def test_classify_codes_and_reason_strings_agree():
    lon_c, lat_c = dateline_grid()
    grid = CurvilinearGrid(lon_c, lat_c, sea_mask=np.arange(lon_c.size).reshape(lon_c.shape) % 7
                           != 0, bathymetry=np.full(lon_c.shape, 100.0),
                           layer_interfaces=[0.0, 50.0, 150.0])
    rng = np.random.default_rng(5)
    lon = rng.uniform(160.0, 200.0, 4000)
    lat = rng.uniform(-35.0, -10.0, 4000)
    depth = rng.uniform(0.0, 200.0, 4000)
    i, j, k, reason = grid.classify(lon, lat, depth)
    i2, j2, k2, code = grid.classify_codes(lon, lat, depth)
    np.testing.assert_array_equal(i, i2)
    lookup = np.array(("",) + CLASSIFY_REASONS, dtype=object)
    np.testing.assert_array_equal(reason, lookup[code])
    assert set(np.unique(code)) == {0, 1, 2, 3}  # kept, outside, land, below the bathymetry
