"""Model-grid checks beyond locating the cell: too shallow, too close to the coast.

Outside the grid, land cell and below the bathymetry are decided by
:meth:`obsprep.geo.grid.ModelGrid.classify`; these two further checks are per-source options
(:data:`TOO_SHALLOW_CHECK`, :data:`NEAR_COAST_CHECK`, run by :func:`obsprep.qc.registry.grid_checks`).

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
from obsprep.qc.check import QcCheck, QcSetting, declare_reasons

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


def _apply_too_shallow(table: pd.DataFrame, context, settings) -> dict:
    live = kept(table)
    mask = np.zeros(len(table), dtype=bool)
    mask[live] = too_shallow_test(context.grid, np.asarray(context.i)[live],
                                  np.asarray(context.j)[live], settings.min_depth)
    return {"too_shallow": reject(table, mask, "too_shallow")}


def _apply_near_coast(table: pd.DataFrame, context, settings) -> dict:
    live = kept(table)
    mask = np.zeros(len(table), dtype=bool)
    if live.any():
        distance = distance_to_land(context.grid, table["lon"].to_numpy()[live],
                                    table["lat"].to_numpy()[live])
        mask[live] = distance < settings.coast_distance_km * 1000.0
    return {"near_coast": reject(table, mask, "near_coast")}


TOO_SHALLOW_CHECK = QcCheck(
    name="too_shallow",
    reasons={"too_shallow": "model bathymetry shallower than the source's minimum depth"},
    apply=_apply_too_shallow, needs_grid=True,
    settings=(QcSetting("min_depth", "non_negative_number", 0.0,
                        "reject where the model bathymetry is shallower than this, m; 0 off"),),
    enabled=lambda settings: settings.min_depth > 0)
NEAR_COAST_CHECK = QcCheck(
    name="near_coast",
    reasons={"near_coast": "closer to a model land cell than the source's coast distance"},
    apply=_apply_near_coast, needs_grid=True,
    settings=(QcSetting("coast_distance_km", "non_negative_number", 0.0,
                        "reject within this distance of the centre of a model land cell, km; "
                        "0 off"),),
    enabled=lambda settings: settings.coast_distance_km > 0)
declare_reasons(TOO_SHALLOW_CHECK, NEAR_COAST_CHECK)
