"""Positions: latitude/longitude coordinates or CF grid_mapping projections (PROJ via
pyproj), and the rotation of grid vectors to east/north."""

from __future__ import annotations

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.geo.sphere import wrap_longitude
from obsprep.readers.cf.find import find_coordinate
from obsprep.readers.cf.messages import one_line
from obsprep.readers.cf.units import values_in_units


def broadcast_to_variable(values, dims, var: xr.DataArray, *, path=None) -> np.ndarray:
    """Broadcast ``values`` (an array with dimension names ``dims``) to ``var``'s shape.

    ``dims`` must be a subset of ``var.dims`` (in any order); scalars broadcast everywhere.
    Returns a view when no copy is needed: read-only where values are repeated, a plain
    (writeable) reshape when ``values`` already has one value per element.  With ``path``
    (the values come from that file) a mismatch is the file's: :class:`InputFileError`.
    """
    dims = tuple(dims)
    extra = set(dims) - set(var.dims)
    if extra:
        reason = (f"dimensions {sorted(extra)} are not dimensions of variable "
                  f"'{var.name}' {var.dims}; expected a subset of them")
        if path is not None:
            raise InputFileError(path, reason, variable=var.name)
        raise ValueError(reason)
    values = np.asarray(values)
    order = [d for d in var.dims if d in dims]
    values = np.transpose(values, [dims.index(d) for d in order])
    shape = [var.sizes[d] if d in dims else 1 for d in var.dims]
    if values.size == var.size and values.flags.writeable:
        return values.reshape(var.shape)  # nothing to broadcast: a plain view, no copy later
    return np.broadcast_to(values.reshape(shape), var.shape)


def crs_for_variable(ds: xr.Dataset, name: str, path):
    """The :class:`pyproj.CRS` of the variable's CF ``grid_mapping`` (``pyproj.CRS.from_cf``).

    Accepts the simple form ``grid_mapping = "crs"`` and the extended form
    ``"crs: x y"`` (CF 5.6), taking the first mapping.
    """
    import pyproj

    attribute = str(ds[name].attrs.get("grid_mapping", "")).strip()
    if not attribute:
        raise InputFileError(path, "no latitude/longitude coordinates and no grid_mapping "
                                   "attribute to compute them from", variable=name)
    mapping = attribute.split()[0].rstrip(":")
    if mapping not in ds.variables:
        raise InputFileError(path, f"grid_mapping variable '{mapping}' not found in the file",
                             variable=name)
    try:
        return pyproj.CRS.from_cf(dict(ds[mapping].attrs))
    except (pyproj.exceptions.CRSError, KeyError, ValueError, TypeError) as exc:
        raise InputFileError(path, f"grid_mapping attributes do not define a CRS: "
                                   f"{one_line(exc)}", variable=mapping) from exc


def _projection_xy(ds: xr.Dataset, name: str, crs, path) -> tuple[np.ndarray, np.ndarray]:
    """Projection x/y of every value of ``name`` in the CRS's own axis units."""
    var = ds[name]
    out = []
    for kind in ("projection_x_coordinate", "projection_y_coordinate"):
        coord = find_coordinate(ds, name, kind)
        if coord is None:
            raise InputFileError(path, f"grid_mapping given but no {kind} coordinate on the "
                                       f"variable's dimensions {var.dims}", variable=name)
        metres = values_in_units(ds[coord], "m", path, default_units="m")
        out.append(broadcast_to_variable(metres, ds[coord].dims, var, path=path))
    factors = [axis.unit_conversion_factor for axis in crs.axis_info[:2]]
    return out[0] / factors[0], out[1] / factors[1]


def lonlat_from_projection(crs, x, y) -> tuple[np.ndarray, np.ndarray]:
    """Longitude, latitude (degrees, on the CRS's own datum) of projected ``x``, ``y``
    (CRS axis units, usually m), via ``pyproj.Transformer`` (PROJ)."""
    import pyproj

    transformer = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    lon, lat = transformer.transform(np.asarray(x, dtype=np.float64),
                                     np.asarray(y, dtype=np.float64))
    return np.asarray(lon), np.asarray(lat)


def horizontal_position(ds: xr.Dataset, name: str, path, *,
                        reading_part: bool) -> tuple[np.ndarray, np.ndarray]:
    """Longitude in [-180, 180) and latitude (degrees) of every value of variable ``name``.

    From latitude/longitude coordinates (``coordinates`` attribute, dimensions, or any variable
    on a subset of the dimensions); when there are none, from ``projection_x/y_coordinate`` and
    the CF ``grid_mapping`` through ``pyproj.CRS.from_cf``.  Arrays have ``name``'s shape.
    A whole file (not ``reading_part``) without one finite position is an error.
    """
    var = ds[name]
    lat_name = find_coordinate(ds, name, "latitude")
    lon_name = find_coordinate(ds, name, "longitude")
    if lat_name and lon_name:
        lat = broadcast_to_variable(ds[lat_name].values.astype(np.float64), ds[lat_name].dims, var, path=path)
        lon = broadcast_to_variable(ds[lon_name].values.astype(np.float64), ds[lon_name].dims, var, path=path)
        checked = ((lat_name, lat), (lon_name, lon))
    else:
        crs = crs_for_variable(ds, name, path)
        x, y = _projection_xy(ds, name, crs, path)
        lon, lat = lonlat_from_projection(crs, x, y)
        checked = ((name, lat),)
    for variable, values in checked:
        if values.size and not reading_part and not np.isfinite(values).any():
            raise InputFileError(path, "every position value is fill/NaN", variable=variable)
    return wrap_longitude(lon), np.asarray(lat, dtype=np.float64)
