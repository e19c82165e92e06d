"""Model-grid checks beyond locating the cell: too shallow, too close to the coast.

Outside the grid, land cell and below the bathymetry are decided by
:meth:`obsprep.geo.grid.ModelGrid.classify`; these two further checks are per-source options.

Distance to the coast is measured from the observation to the centre of the nearest land cell
of the model mask, on the mean Earth sphere: land-cell centres become unit vectors in a
``scipy.spatial.cKDTree``, the nearest neighbour's chord length c gives the great-circle
distance d = 2 R asin(c / 2).  The model coastline (the edge of the land cell) is about half a
cell nearer than the centre; choose the distance with that in mind.  Exact on the sphere
whatever the grid type (regular, projected, curvilinear), and one tree per grid is built once.
"""

from __future__ import annotations

import weakref

import numpy as np
import pandas as pd

from obsprep.geo.sphere import EARTH_MEAN_RADIUS_M, unit_vectors_from_lonlat
from obsprep.model.table import kept, reject

_TREES: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def _land_tree(grid):
    """(cKDTree of land-cell centre unit vectors, or None without land), cached per grid and
    rebuilt if the mask array changes."""
    from scipy.spatial import cKDTree

    mask_id = id(grid.sea_mask)
    cached = _TREES.get(grid)
    if cached is not None and cached[0] == mask_id:
        return cached[1]
    land = ~np.asarray(grid.sea_mask, dtype=bool)
    tree = None
    if land.any():
        xyz = unit_vectors_from_lonlat(np.asarray(grid.lon_center)[land],
                                       np.asarray(grid.lat_center)[land])
        tree = cKDTree(xyz)
    _TREES[grid] = (mask_id, tree)
    return tree


def distance_to_land(grid, lon, lat, radius=EARTH_MEAN_RADIUS_M) -> np.ndarray:
    """Great-circle distance (m) from each position (degrees) to the nearest land-cell centre
    of ``grid``; +inf when the grid has no land, NaN for NaN positions.

    .. math:: d = 2 R \\arcsin(c / 2)

    with c the chord between unit vectors (nearest neighbour in a k-d tree) and R the mean
    Earth radius.
    """
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    out = np.full(lon.shape, np.nan)
    finite = np.isfinite(lon) & np.isfinite(lat)
    tree = _land_tree(grid)
    if tree is None:
        out[finite] = np.inf
        return out
    if finite.any():
        chord, _ = tree.query(unit_vectors_from_lonlat(lon[finite], lat[finite]))
        out[finite] = 2.0 * radius * np.arcsin(np.clip(chord / 2.0, 0.0, 1.0))
    return out


def too_shallow_test(grid, i, j, min_depth: float) -> np.ndarray:
    """True where cell (j, i) exists and its bathymetry (m) is shallower than ``min_depth``."""
    i = np.asarray(i, dtype=np.int64)
    j = np.asarray(j, dtype=np.int64)
    valid = (i >= 0) & (i < grid.nx) & (j >= 0) & (j < grid.ny)
    out = np.zeros(i.shape, dtype=bool)
    out[valid] = grid.bathymetry[j[valid], i[valid]] < min_depth
    return out


def grid_checks(table: pd.DataFrame, grid, i, j, settings) -> dict:
    """Apply ``too_shallow`` then ``near_coast`` to the kept rows, in place (``i``, ``j``: the
    cell of every row, -1 where none).  Returns {reason: newly rejected count}."""
    counts = {}
    if settings.min_depth > 0:
        live = kept(table)
        mask = np.zeros(len(table), dtype=bool)
        mask[live] = too_shallow_test(grid, np.asarray(i)[live], np.asarray(j)[live],
                                      settings.min_depth)
        counts["too_shallow"] = reject(table, mask, "too_shallow")
    if settings.coast_distance_km > 0:
        live = kept(table)
        mask = np.zeros(len(table), dtype=bool)
        if live.any():
            distance = distance_to_land(grid, table["lon"].to_numpy()[live],
                                        table["lat"].to_numpy()[live])
            mask[live] = distance < settings.coast_distance_km * 1000.0
        counts["near_coast"] = reject(table, mask, "near_coast")
    return counts
