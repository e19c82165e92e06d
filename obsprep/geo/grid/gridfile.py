"""netCDF grid files: reading cell centres, land/sea mask, bathymetry and axis angle by CF
standard_name, and writing the same layout.

Layout written by :func:`write_grid_file` (and read back by :func:`read_grid_file`)::

    dimensions: y = ny, x = nx
    lon(y, x)        standard_name = "longitude", units = "degrees_east"
    lat(y, x)        standard_name = "latitude",  units = "degrees_north"
    sea_mask(y, x)   standard_name = "sea_binary_mask" (1 = sea, 0 = land), int8
    bathymetry(y, x) standard_name = "sea_floor_depth_below_geoid", units = "m", positive down,
                     NaN (the _FillValue) where unknown
    angle(y, x)      standard_name = "angle_of_rotation_from_east_to_x", units = "degree"

The reader finds variables by standard_name, never by a variable name of its own, so files
from other tools that follow CF are read as well: the mask may instead be a ``land_binary_mask``
(1 = land), the bathymetry any of :data:`BATHYMETRY_STANDARD_NAMES`, and lon/lat may be 1-D (a
regular grid).  A file without those standard names is read by the variable names the
configuration gives for the mask and the bathymetry (``grid.mask_variable``,
``grid.bathymetry_variable``).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from obsprep.exceptions import GridError, InputFileError
from obsprep.geo.grid.limits import check_cell_count

BATHYMETRY_STANDARD_NAMES = (
    "sea_floor_depth_below_geoid",
    "sea_floor_depth_below_sea_surface",
    "model_sea_floor_depth_below_geoid",
    "sea_floor_depth_below_mean_sea_level",
)
ANGLE_STANDARD_NAME = "angle_of_rotation_from_east_to_x"
_METRE_UNITS = {"m", "meter", "meters", "metre", "metres"}
_DEGREE_UNITS = {"degree", "degrees", "deg"}
_RADIAN_UNITS = {"radian", "radians", "rad"}
# CF longitude/latitude units, lower-cased (degreeE -> "degreee")
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}
_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}


@dataclass
class GridFileContents:
    """What a grid or mask file holds, as arrays of shape (ny, nx) (None when absent).

    ``lon``, ``lat``: cell centres in degrees; ``sea_mask``: bool, True = sea;
    ``bathymetry``: m positive down, +inf where unknown; ``angle``: radians, NaN where missing.
    ``names`` maps each field to the variable it was read from (for error messages).
    """

    path: str
    shape: tuple[int, int]
    lon: np.ndarray | None
    lat: np.ndarray | None
    sea_mask: np.ndarray | None
    bathymetry: np.ndarray | None
    angle: np.ndarray | None
    names: dict[str, str]


def _open(path) -> xr.Dataset:
    """The file opened lazily: only metadata is read until a variable's values are asked for,
    so sizes can be checked before anything is loaded."""
    path = Path(path)
    if not path.exists():
        raise InputFileError(path, "file does not exist")
    try:
        return xr.open_dataset(path, decode_times=False)
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputFileError(path, f"cannot be opened as a netCDF grid file ({exc})") from exc


def _find_variable(ds, path, standard_names, units=None):
    """Name of the variable with one of ``standard_names`` (first name wins), else None.

    Falls back to the ``units`` set (CF identifies longitude/latitude by units too).  Several
    candidates for one standard name: the one with most dimensions; a tie is an error.
    """
    matched = standard_names[0]
    for standard_name in standard_names:
        found = [n for n, v in ds.variables.items()
                 if v.attrs.get("standard_name") == standard_name]
        if found:
            matched = standard_name
            break
    else:
        found = []
        if units:
            found = [n for n, v in ds.variables.items() if v.ndim in (1, 2)
                     and str(v.attrs.get("units", "")).strip().lower().replace(" ", "") in units]
        if not found:
            return None
    most = max(ds[n].ndim for n in found)
    best = [n for n in found if ds[n].ndim == most]
    if len(best) > 1:
        raise InputFileError(path, f"several variables have standard_name '{matched}': "
                             f"{', '.join(best)}; expected one")
    return best[0]


def _as_grid_array(ds, path, name, dims, shape):
    """Variable ``name`` as a float array on the grid dimensions ``dims`` (length-1 extra
    dimensions such as time are dropped)."""
    var = ds[name]
    extra = [d for d in var.dims if d not in dims] if dims is not None else []
    if any(var.sizes[d] != 1 for d in extra):
        raise InputFileError(path, f"expected dimensions {dims}, found {var.dims} with sizes "
                             f"{tuple(var.shape)}", variable=name)
    var = var.squeeze(extra, drop=True) if extra else var
    if dims is not None and set(var.dims) == set(dims):
        var = var.transpose(*dims)
    if tuple(var.shape) != tuple(shape):  # checked on the metadata, before loading the values
        raise InputFileError(path, f"expected shape {tuple(shape)} (ny, nx), found shape "
                             f"{tuple(var.shape)} with dimensions {var.dims}", variable=name)
    return np.asarray(var.values, dtype=float)


def _named_variable(ds, path, name, role):
    """``name`` if the file has that variable, else InputFileError listing the variables."""
    if name not in ds.variables:
        raise InputFileError(path, f"no variable '{name}' (named as the {role} in the "
                             f"configuration); variables: {', '.join(map(str, ds.variables))}")
    return name


def _missing_field_message(ds, role, standard_names, key):
    names = " or ".join(f"'{n}'" for n in standard_names)
    return (f"no {role} found: expected a variable with standard_name {names}, or its name "
            f"given as grid.{key}; variables: {', '.join(map(str, ds.variables)) or 'none'}")


def _units(ds, name):
    return str(ds[name].attrs.get("units", "")).strip().lower()


def read_grid_file(path, expected_shape=None, *, need_coordinates=False, mask_variable=None,
                   bathymetry_variable=None, need_mask_and_bathymetry=False) -> GridFileContents:
    """Read cell centres, mask, bathymetry and angle of a netCDF grid or mask file.

    ``expected_shape``: (ny, nx) the fields must have (InputFileError naming file, variable,
    expected and found shape otherwise); None takes the shape of the coordinates.
    ``need_coordinates``: 2-D (or 1-D lon and lat) cell centres are required.
    ``mask_variable``, ``bathymetry_variable``: names of the variables holding the land/sea
    mask (1 = sea, 0 = land, unless its standard_name is ``land_binary_mask``: 1 = land) and the
    bathymetry (m positive down), for files whose variables lack the standard names; otherwise
    both are found by standard_name.  ``need_mask_and_bathymetry``: both must be found;
    otherwise a missing mask gives None (the caller takes all sea), a missing bathymetry None.
    Sizes are checked on the metadata before any values are loaded (at most
    :data:`~obsprep.geo.grid.limits.MAX_GRID_CELLS` cells).  Raises :class:`InputFileError`
    naming the file and the variable for unusable content.
    """
    ds = _open(path)
    try:
        return _read_grid_dataset(ds, str(path), expected_shape, need_coordinates, mask_variable,
                                  bathymetry_variable, need_mask_and_bathymetry)
    except InputFileError:
        raise
    except (OSError, RuntimeError, ValueError) as exc:  # e.g. a file cut short, bad encoding
        raise InputFileError(path, f"cannot be read as a netCDF grid file ({exc})") from exc
    finally:
        ds.close()


def _read_grid_dataset(ds, path, expected_shape, need_coordinates, mask_variable,
                       bathymetry_variable, need_mask_and_bathymetry) -> GridFileContents:
    """:func:`read_grid_file` on the opened dataset ``ds``."""
    names: dict[str, str] = {}
    lon_name = _find_variable(ds, path, ("longitude",), _LON_UNITS)
    lat_name = _find_variable(ds, path, ("latitude",), _LAT_UNITS)
    mask_name = land_name = None
    if mask_variable is not None:
        _named_variable(ds, path, mask_variable, "land/sea mask")
        if ds[mask_variable].attrs.get("standard_name") == "land_binary_mask":
            land_name = mask_variable
        else:
            mask_name = mask_variable
    else:
        mask_name = _find_variable(ds, path, ("sea_binary_mask",))
        land_name = None if mask_name else _find_variable(ds, path, ("land_binary_mask",))
    if bathymetry_variable is not None:
        bathymetry_name = _named_variable(ds, path, bathymetry_variable, "bathymetry")
    else:
        bathymetry_name = _find_variable(ds, path, BATHYMETRY_STANDARD_NAMES)
    angle_name = _find_variable(ds, path, (ANGLE_STANDARD_NAME,))
    # sizes from the metadata, before any values are loaded
    for name in (lon_name, lat_name, mask_name, land_name, bathymetry_name, angle_name):
        if name is not None and ds[name].ndim == 2:
            try:
                check_cell_count(*ds[name].shape)
            except GridError as exc:
                raise InputFileError(path, str(exc), variable=name) from None
    if lon_name and lat_name and ds[lon_name].ndim == 1 and ds[lat_name].ndim == 1:
        try:
            check_cell_count(ds[lat_name].size, ds[lon_name].size)
        except GridError as exc:
            raise InputFileError(path, str(exc), variable=lon_name) from None
    if need_mask_and_bathymetry:
        if mask_name is None and land_name is None:
            raise InputFileError(path, _missing_field_message(
                ds, "land/sea mask", ("sea_binary_mask", "land_binary_mask"), "mask_variable"))
        if bathymetry_name is None:
            raise InputFileError(path, _missing_field_message(
                ds, "bathymetry", BATHYMETRY_STANDARD_NAMES, "bathymetry_variable"))

    lon = lat = None
    dims = None
    if lon_name and lat_name:
        lon_var, lat_var = ds[lon_name], ds[lat_name]
        if lon_var.ndim == 2 and lat_var.ndim == 2:
            if set(lon_var.dims) != set(lat_var.dims):
                raise InputFileError(path, f"longitude has dimensions {lon_var.dims} but latitude "
                                     f"'{lat_name}' has {lat_var.dims}; expected the same",
                                     variable=lon_name)
            dims = lon_var.dims
            lon = np.asarray(lon_var.values, dtype=float)
            lat = np.asarray(lat_var.transpose(*dims).values, dtype=float)
        elif lon_var.ndim == 1 and lat_var.ndim == 1 and lon_var.dims != lat_var.dims:
            dims = (lat_var.dims[0], lon_var.dims[0])
            lon, lat = np.meshgrid(np.asarray(lon_var.values, dtype=float),
                                   np.asarray(lat_var.values, dtype=float))
        else:
            raise InputFileError(path, f"expected 2-D cell-centre longitude and latitude (or 1-D "
                                 f"on two different dimensions), found dimensions {lon_var.dims} "
                                 f"and {lat_var.dims}", variable=lon_name)
        names.update(lon=lon_name, lat=lat_name)
        for label, values, name in (("longitude", lon, lon_name), ("latitude", lat, lat_name)):
            missing = int(np.count_nonzero(~np.isfinite(values)))
            if missing:
                raise InputFileError(path, f"{missing} cell-centre {label}s are missing; expected "
                                     "a position for every cell (land included)", variable=name)
        if np.any(np.abs(lat) > 90.0):
            raise InputFileError(path, "latitudes outside -90..90 degrees", variable=lat_name)
    elif need_coordinates:
        missing = "longitude" if not lon_name else "latitude"
        raise InputFileError(path, f"no cell-centre {missing} found (expected a variable with "
                             f"standard_name '{missing}')")

    if lon is not None:
        shape = lon.shape
    elif expected_shape is not None:
        shape = tuple(expected_shape)
    else:
        first = mask_name or land_name or bathymetry_name
        if first is None:
            raise InputFileError(path, "no longitude/latitude, mask or bathymetry variable found")
        shape = ds[first].shape
    if expected_shape is not None and tuple(shape) != tuple(expected_shape):
        raise InputFileError(path, f"expected shape {tuple(expected_shape)} (ny, nx), found shape "
                             f"{tuple(shape)}", variable=lon_name)
    if dims is None:
        # no coordinates: take the data variables' own dimensions
        first = mask_name or land_name or bathymetry_name or angle_name
        dims = ds[first].dims if first is not None and ds[first].ndim == 2 else None

    sea_mask = None
    for name, sea_value in ((mask_name, 1.0), (land_name, 0.0)):
        if name is None:
            continue
        values = _as_grid_array(ds, path, name, dims, shape)
        finite = np.isfinite(values)
        if np.any(finite & (values != 0.0) & (values != 1.0)):
            bad = np.unique(values[finite & (values != 0.0) & (values != 1.0)])[:5]
            raise InputFileError(path, f"a binary mask must hold 0 or 1, found {bad.tolist()}",
                                 variable=name)
        sea_mask = finite & (values == sea_value)  # missing values are taken as land
        names["sea_mask"] = name

    bathymetry = None
    if bathymetry_name:
        units = _units(ds, bathymetry_name)
        if units and units not in _METRE_UNITS:
            raise InputFileError(path, f"expected bathymetry in m, found units '{units}'",
                                 variable=bathymetry_name)
        values = _as_grid_array(ds, path, bathymetry_name, dims, shape)
        sea = sea_mask if sea_mask is not None else np.ones(shape, bool)
        finite_sea = values[sea & np.isfinite(values)]
        if finite_sea.size and np.median(finite_sea) < 0.0:
            raise InputFileError(path, "bathymetry on sea cells is mostly negative; expected depth "
                                 "in m positive down (found elevation, positive up?)",
                                 variable=bathymetry_name)
        bathymetry = np.where(np.isfinite(values), values, np.inf)
        names["bathymetry"] = bathymetry_name

    angle = None
    if angle_name:
        units = _units(ds, angle_name)
        values = _as_grid_array(ds, path, angle_name, dims, shape)
        if units in _DEGREE_UNITS:
            angle = np.radians(values)
        elif units in _RADIAN_UNITS:
            angle = values
        else:
            raise InputFileError(path, f"expected units 'degree' or 'radian' for the grid angle, "
                                 f"found '{units}'", variable=angle_name)
        names["angle"] = angle_name
    return GridFileContents(path=path, shape=tuple(shape), lon=lon, lat=lat, sea_mask=sea_mask,
                            bathymetry=bathymetry, angle=angle, names=names)


def grid_dataset(lon, lat, sea_mask, bathymetry, angle=None, layer_interfaces=None,
                 attrs=None) -> xr.Dataset:
    """The CF dataset of a grid, in the layout of this module's docstring.

    ``lon``, ``lat`` degrees, (ny, nx); ``sea_mask`` bool (True = sea); ``bathymetry`` m positive
    down (+inf or NaN unknown, written as NaN); ``angle`` radians (written in degrees), optional;
    ``layer_interfaces`` m, optional (a variable on dimension ``interface``).
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    if lon.ndim != 2 or lon.shape != lat.shape:
        raise ValueError(f"lon and lat must be 2-D of one shape, got {lon.shape} and {lat.shape}")
    shape = lon.shape
    sea_mask = np.broadcast_to(np.asarray(sea_mask, dtype=bool), shape)
    bathymetry = np.broadcast_to(np.asarray(bathymetry, dtype=float), shape)
    dims = ("y", "x")
    data_vars = {
        "sea_mask": (dims, sea_mask.astype(np.int8), {
            "standard_name": "sea_binary_mask", "long_name": "model sea mask (1 = sea, 0 = land)",
            "units": "1", "flag_values": np.array([0, 1], dtype=np.int8),
            "flag_meanings": "land sea", "coordinates": "lat lon"}),
        "bathymetry": (dims, np.where(np.isfinite(bathymetry), bathymetry, np.nan), {
            "standard_name": "sea_floor_depth_below_geoid", "long_name": "model bathymetry",
            "units": "m", "positive": "down", "coordinates": "lat lon"}),
    }
    if angle is not None:
        angle = np.broadcast_to(np.asarray(angle, dtype=float), shape)
        data_vars["angle"] = (dims, np.degrees(angle), {
            "standard_name": ANGLE_STANDARD_NAME,
            "long_name": "angle of the grid +i axis, counterclockwise from east",
            "units": "degree", "coordinates": "lat lon"})
    if layer_interfaces is not None:
        data_vars["layer_interfaces"] = (("interface",), np.asarray(layer_interfaces, float), {
            "standard_name": "depth", "long_name": "depth of model layer interfaces",
            "units": "m", "positive": "down"})
    coords = {
        "lon": (dims, lon, {"standard_name": "longitude", "long_name": "longitude of cell centre",
                            "units": "degrees_east"}),
        "lat": (dims, lat, {"standard_name": "latitude", "long_name": "latitude of cell centre",
                            "units": "degrees_north"}),
    }
    ds = xr.Dataset(data_vars, coords=coords, attrs={"Conventions": "CF-1.10", **(attrs or {})})
    for name in ("lon", "lat", "sea_mask"):
        ds[name].encoding["_FillValue"] = None
    if "angle" in ds:
        ds["angle"].encoding["_FillValue"] = None
    return ds


def write_grid_file(path, lon, lat, sea_mask, bathymetry, angle=None, attrs=None) -> Path:
    """Write a curvilinear grid file that :meth:`CurvilinearGrid.from_file` reads.

    ``lon``, ``lat``: cell centres, degrees, shape (ny, nx); ``sea_mask``: bool (True = sea);
    ``bathymetry``: m positive down (+inf/NaN unknown); ``angle``: axis angle in radians
    (counterclockwise from east to the +i axis), stored in degrees; optional.  Returns the path.
    """
    path = Path(path)
    ds = grid_dataset(lon, lat, sea_mask, bathymetry, angle,
                      attrs={"title": "obsprep model grid", **(attrs or {})})
    ds.to_netcdf(path)
    return path
