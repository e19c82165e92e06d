"""Model equivalents of super-observations from model states on the model grid.

Model files: netCDF on the run's model grid, one variable per quantity found by CF
``standard_name`` (any the quantity accepts) or by the quantity's name, whose last two
dimensions are the grid's (ny, nx).  Other dimensions may be: a member dimension (named
``member``/``realization``/``ensemble``/``number``, or with a coordinate of standard_name
``realization``), a time dimension (coordinate of standard_name ``time`` or named ``time``) and,
for sub-surface quantities, a depth dimension (coordinate of standard_name ``depth`` or axis
``Z``; m, positive down, or negated when ``positive = "up"``).  An ensemble is several files of
one member each, or one file with a member dimension.  Units convert to the quantity's
canonical units.

Model equivalent H(x) of a super-observation, for each member:

- time: the output time nearest to the super-observation's mean time;
- horizontal: bilinear interpolation between the four cell centres around its mean position,
  in the grid's index space (fractional indices from the grid's own mapping: map projection,
  lon/lat offsets, or a local tangent plane of the cell centres for curvilinear grids); land
  (NaN) corners are left out and the weights renormalised; beyond the outermost centres the
  edge value is held;
- vertical: linear between the two model levels around its mean depth (none outside them).

Interval quantities (ice drift) have no equivalent here.  Members are read one at a time, so
memory holds one member and the point values only; the ensemble mean and variance (ddof = 1)
at the points are accumulated with Welford's update ([Welford1962], Technometrics 4, 419-420).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import QUANTITIES

MEMBER_DIMS = ("member", "realization", "ensemble", "number", "realisation")


@dataclass
class ModelEquivalents:
    """Per super-observation (rows of the table given): ensemble mean and variance of H(x)
    (NaN where none), number of members, and the time to the output time used (s)."""

    mean: np.ndarray
    variance: np.ndarray
    members: int
    time_gap: np.ndarray


def fractional_indices(grid, lon, lat, i, j):
    """Fractional grid indices (fi, fj) of positions, cell centre (j, i) at (i, j).

    Regular and projected grids: exact offsets from their own mapping.  Other grids: the
    position in the local tangent plane at the centre of its cell (j, i), in the basis of the
    centre differences to the neighbouring cells (an affine approximation, exact where the grid
    is locally uniform).
    """
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    if hasattr(grid, "lonlat_to_xy") and hasattr(grid, "x_min"):
        x, y = grid.lonlat_to_xy(lon, lat)
        return (np.asarray(x) - grid.x_min) / grid.dx - 0.5, (np.asarray(y) - grid.y_min) / grid.dy - 0.5
    if hasattr(grid, "lon_min") and hasattr(grid, "dlon"):
        return (((lon - grid.lon_min) % 360.0) / grid.dlon - 0.5,
                (lat - grid.lat_min) / grid.dlat - 0.5)
    from obsprep.geo.sphere import unit_vectors_from_lonlat

    i = np.asarray(i, dtype=np.int64)
    j = np.asarray(j, dtype=np.int64)
    centres = unit_vectors_from_lonlat(grid.lon_center, grid.lat_center)   # (ny, nx, 3)
    c = centres[j, i]
    p = unit_vectors_from_lonlat(lon, lat)
    # gnomonic projection onto the tangent plane at c
    offset = p / np.sum(p * c, axis=-1, keepdims=True) - c
    ip, im = np.minimum(i + 1, grid.nx - 1), np.maximum(i - 1, 0)
    jp, jm = np.minimum(j + 1, grid.ny - 1), np.maximum(j - 1, 0)
    along_i = (centres[j, ip] - centres[j, im]) / np.maximum(ip - im, 1)[:, None]
    along_j = (centres[jp, i] - centres[jm, i]) / np.maximum(jp - jm, 1)[:, None]
    # least squares offset = a along_i + b along_j (2 x 2 normal equations per point)
    aa = np.sum(along_i * along_i, -1)
    bb = np.sum(along_j * along_j, -1)
    ab = np.sum(along_i * along_j, -1)
    ra = np.sum(offset * along_i, -1)
    rb = np.sum(offset * along_j, -1)
    det = aa * bb - ab * ab
    return i + (ra * bb - rb * ab) / det, j + (rb * aa - ra * ab) / det


def bilinear_weights(fi, fj, nx, ny):
    """Corner indices (4 arrays each of j and i) and weights of bilinear interpolation at
    fractional indices, held constant beyond the outermost centres."""
    fi = np.clip(np.asarray(fi, dtype=np.float64), 0.0, nx - 1.0)
    fj = np.clip(np.asarray(fj, dtype=np.float64), 0.0, ny - 1.0)
    i0 = np.minimum(np.floor(fi).astype(np.int64), max(nx - 2, 0))
    j0 = np.minimum(np.floor(fj).astype(np.int64), max(ny - 2, 0))
    s, t = fi - i0, fj - j0
    i1, j1 = np.minimum(i0 + 1, nx - 1), np.minimum(j0 + 1, ny - 1)
    corners_j = (j0, j0, j1, j1)
    corners_i = (i0, i1, i0, i1)
    weights = ((1 - s) * (1 - t), s * (1 - t), (1 - s) * t, s * t)
    return corners_j, corners_i, weights


def interpolate_corners(values, weights):
    """Weighted mean of corner values (list of arrays), NaN corners left out, weights
    renormalised; NaN where every corner is NaN."""
    total = np.zeros(np.shape(values[0]))
    weight = np.zeros(np.shape(values[0]))
    for v, w in zip(values, weights):  # the four corners
        ok = np.isfinite(v)
        total += np.where(ok, v, 0.0) * w
        weight += np.where(ok, w, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(weight > 1e-12, total / weight, np.nan)


def nearest_time_index(output_times, times):
    """Index of the nearest output time and the gap (s) for each time (datetime64)."""
    out = np.asarray(output_times, dtype="datetime64[ns]").astype(np.int64)
    t = np.asarray(times, dtype="datetime64[ns]").astype(np.int64)
    order = np.argsort(out)
    sorted_out = out[order]
    right = np.clip(np.searchsorted(sorted_out, t), 0, len(out) - 1)
    left = np.clip(right - 1, 0, len(out) - 1)
    pick = np.where(np.abs(sorted_out[left] - t) <= np.abs(sorted_out[right] - t), left, right)
    return order[pick], np.abs(sorted_out[pick] - t) / 1e9


@dataclass
class _ModelVariable:
    path: str
    name: str
    member_dim: str | None
    time_dim: str | None
    depth_dim: str | None
    times: np.ndarray | None
    depths: np.ndarray | None
    units: str


def _find_variable(ds, quantity):
    q = QUANTITIES[quantity]
    for name, var in ds.data_vars.items():
        if str(var.attrs.get("standard_name", "")) in q.accepted_standard_names:
            return name
    return quantity if quantity in ds.data_vars else None


def _describe(ds, path, name, grid, quantity) -> _ModelVariable:
    var = ds[name]
    if var.ndim < 2 or tuple(var.shape[-2:]) != grid.shape:
        raise InputFileError(path, f"expected the last two dimensions to be the model grid "
                                   f"(ny, nx) = {grid.shape}, found {dict(var.sizes)}",
                             variable=name)
    member_dim = time_dim = depth_dim = None
    for dim in var.dims[:-2]:
        coord = ds[dim] if dim in ds.variables else None
        standard = str(coord.attrs.get("standard_name", "")) if coord is not None else ""
        axis = str(coord.attrs.get("axis", "")) if coord is not None else ""
        if dim.lower() in MEMBER_DIMS or standard == "realization":
            member_dim = dim
        elif standard == "time" or dim.lower() == "time" or axis == "T":
            time_dim = dim
        elif standard == "depth" or axis == "Z" or dim.lower() in ("depth", "z", "level", "lev"):
            depth_dim = dim
        else:
            raise InputFileError(path, f"dimension '{dim}' is neither member, time nor depth; "
                                       "expected (member, time, depth, y, x) in any subset",
                                 variable=name)
    times = depths = None
    if time_dim is not None:
        times = np.asarray(ds[time_dim].values).astype("datetime64[ns]") if time_dim in ds.variables \
            else None
        if times is None or times.dtype.kind != "M":
            raise InputFileError(path, "time coordinate not decodable as CF time", variable=time_dim)
    if depth_dim is not None:
        if depth_dim not in ds.variables:
            raise InputFileError(path, "depth dimension without a coordinate variable",
                                 variable=depth_dim)
        depths = np.asarray(ds[depth_dim].values, dtype=np.float64)
        if str(ds[depth_dim].attrs.get("positive", "down")).lower() == "up":
            depths = -depths
        if np.any(np.diff(depths) <= 0):
            raise InputFileError(path, f"expected depths increasing downwards, got {depths[:5]}...",
                                 variable=depth_dim)
    return _ModelVariable(str(path), name, member_dim, time_dim, depth_dim, times, depths,
                          str(var.attrs.get("units", QUANTITIES[quantity].units)))


def _open(path):
    import xarray as xr

    try:
        return xr.open_dataset(path)
    except (OSError, ValueError) as exc:
        raise InputFileError(path, f"cannot open the model file ({exc})") from exc


def _member_values(ds, info, member_index, points):
    """H(x) of one member at the points (dict of index arrays and weights)."""
    var = ds[info.name]
    if info.member_dim is not None:
        var = var.isel({info.member_dim: member_index})
    dims = [d for d in var.dims]
    array = np.asarray(var.values, dtype=np.float64)      # one member: (time?, depth?, y, x)
    if info.time_dim is None:
        array = array[None]
    if info.depth_dim is None:
        array = array[:, None]
    elif dims.index(info.depth_dim) < (dims.index(info.time_dim) if info.time_dim else -1):
        array = np.swapaxes(array, 0, 1)
    t = points["time_index"]
    levels = []
    for k in points["levels"]:  # the two levels around each depth (one for 2-D fields)
        corners = [array[t, k, jj, ii] for jj, ii in zip(points["corners_j"], points["corners_i"])]
        levels.append(interpolate_corners(corners, points["weights"]))
    if len(levels) == 1:
        return levels[0]
    u = points["level_weight"]
    return np.where(points["inside"], (1 - u) * levels[0] + u * levels[1], np.nan)


def model_equivalents(paths, superobs: pd.DataFrame, grid) -> dict:
    """Ensemble mean and variance of the model equivalents of the super-observations.

    Parameters
    ----------
    paths : list of model files (one per member, or one file with a member dimension; a
        single background state is one file without a member dimension)
    superobs : the audit's long super-observation table (quantity, lon, lat, depth, time,
        i, j, time_end)
    grid : the run's model grid

    Returns
    -------
    dict
        Quantity -> :class:`ModelEquivalents` for the rows of that quantity (in table order);
        quantities without a model variable, and interval quantities, are absent.
    """
    from obsprep.readers.cf import convert_units

    datasets = [_open(p) for p in paths]
    try:
        result = {}
        for quantity in sorted(superobs["quantity"].unique()):
            q = QUANTITIES[quantity]
            if q.vector is not None:
                continue  # displacements over intervals: no state equivalent here
            found = [(ds, _find_variable(ds, quantity), p) for ds, p in zip(datasets, paths)]
            found = [(ds, name, p) for ds, name, p in found if name is not None]
            if not found:
                continue
            rows = superobs[superobs["quantity"] == quantity]
            infos = [(ds, _describe(ds, p, name, grid, quantity)) for ds, name, p in found]
            first = infos[0][1]
            for _, info in infos[1:]:
                same_times = (first.times is None) == (info.times is None) and (
                    first.times is None or np.array_equal(first.times, info.times))
                same_depths = (first.depths is None) == (info.depths is None) and (
                    first.depths is None or np.allclose(first.depths, info.depths))
                if not (same_times and same_depths):
                    raise InputFileError(info.path, f"times or depths differ from those of "
                                                    f"{first.path}; members must share them",
                                         variable=info.name)
            points = _points(rows, grid, infos[0][1], q.surface)
            count = 0
            mean = np.zeros(len(rows))
            m2 = np.zeros(len(rows))
            for ds, info in infos:
                n_members = ds.sizes[info.member_dim] if info.member_dim else 1
                for m in range(n_members):  # members, read one at a time
                    values = convert_units(_member_values(ds, info, m, points), info.units,
                                           q.units, info.path, info.name)
                    count += 1
                    delta = values - mean
                    mean = mean + delta / count
                    m2 = m2 + delta * (values - mean)
            variance = m2 / (count - 1) if count > 1 else np.full(len(rows), np.nan)
            result[quantity] = ModelEquivalents(mean, variance, count, points["time_gap"])
        return result
    finally:
        for ds in datasets:
            ds.close()


def _points(rows, grid, info, surface):
    """Interpolation indices and weights of the rows (shared by all members)."""
    lon, lat = rows["lon"].to_numpy(float), rows["lat"].to_numpy(float)
    i, j = rows["i"].to_numpy().astype(np.int64), rows["j"].to_numpy().astype(np.int64)
    fi, fj = fractional_indices(grid, lon, lat, i, j)
    corners_j, corners_i, weights = bilinear_weights(fi, fj, grid.nx, grid.ny)
    n = len(rows)
    if info.times is not None:
        time_index, gap = nearest_time_index(info.times, rows["time"].to_numpy())
    else:
        time_index, gap = np.zeros(n, dtype=np.int64), np.full(n, np.nan)
    points = {"corners_j": corners_j, "corners_i": corners_i, "weights": weights,
              "time_index": time_index, "time_gap": gap}
    if info.depths is None or surface:
        points["levels"] = [np.zeros(n, dtype=np.int64)]
        return points
    z = info.depths
    depth = rows["depth"].to_numpy(float)
    k0 = np.clip(np.searchsorted(z, depth, side="right") - 1, 0, max(z.size - 2, 0))
    k1 = np.minimum(k0 + 1, z.size - 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        u = np.where(k1 > k0, (depth - z[k0]) / (z[k1] - z[k0]), 0.0)
    points["levels"] = [k0, k1]
    points["level_weight"] = u
    points["inside"] = (depth >= z[0]) & (depth <= z[-1])
    return points
