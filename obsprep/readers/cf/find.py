"""Finding variables: by standard_name, coordinates by kind, ancillary (error and flag) variables."""

from __future__ import annotations

import xarray as xr

from obsprep.exceptions import InputFileError


def find_variable(ds: xr.Dataset, standard_names, ndim=None) -> str | None:
    """Name of the first variable whose ``standard_name`` is one of ``standard_names``.

    The order of ``standard_names`` is the order of preference; ``ndim`` (an int or a
    collection of ints) restricts the number of dimensions.  Returns None when there is none.
    """
    if isinstance(ndim, int):
        ndim = (ndim,)
    for wanted in standard_names:
        for name, var in ds.variables.items():
            if var.attrs.get("standard_name") == wanted and (ndim is None or var.ndim in ndim):
                return str(name)
    return None


def rows_dimension(ds: xr.Dataset, name: str | None) -> str | None:
    """The first dimension longer than one of variable ``name`` when it has at least two such
    dimensions (the rows of a swath or grid; a length-1 ``time`` is skipped), else None: the
    slice dimension of readers of gridded and swath files."""
    if name is None or name not in ds.variables:
        return None
    longer = [d for d in ds[name].dims if ds.sizes[d] > 1]
    return longer[0] if len(longer) >= 2 else None


def require_variable(ds: xr.Dataset, path, standard_names, what: str, ndim=None) -> str:
    """Like :func:`find_variable` but raise :class:`InputFileError` listing what was expected."""
    name = find_variable(ds, standard_names, ndim=ndim)
    if name is None:
        dims = f" with {ndim} dimension(s)" if ndim is not None else ""
        raise InputFileError(
            path, f"no {what} variable{dims}: expected a variable with standard_name "
                  f"{' or '.join(repr(s) for s in standard_names)}")
    return name


_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}


_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}


def _is_coordinate_of_kind(var: xr.Variable, kind: str) -> bool:
    standard_name = var.attrs.get("standard_name")
    if standard_name == kind:
        return True
    if standard_name is not None:
        return False
    # CF 4.1/4.4: latitude, longitude and time are also recognised by units / axis
    units = str(var.attrs.get("units", "")).strip().lower()
    if kind == "latitude":
        return units in _LAT_UNITS
    if kind == "longitude":
        return units in _LON_UNITS
    if kind == "time":
        return var.attrs.get("axis") == "T" or " since " in units
    return False


def find_coordinates(ds: xr.Dataset, name: str, kind: str, anywhere: bool = False) -> list[str]:
    """Names of the coordinate variables of kind ``kind`` for data variable ``name``.

    ``kind`` is a CF standard name (``latitude``, ``longitude``, ``time``, ``depth``,
    ``sea_water_pressure``, ``projection_x_coordinate``, ``projection_y_coordinate``);
    latitude, longitude and time are also recognised by their units or ``axis`` (CF 4.1, 4.4).
    Searched in order: the variable's ``coordinates`` attribute, its dimension variables, then
    every variable whose dimensions are a subset of its own (any variable when ``anywhere``,
    as for the per-profile coordinates of a ragged array).
    """
    var = ds[name]
    listed = str(var.attrs.get("coordinates", "")).split()
    candidates = [c for c in listed if c in ds.variables]
    candidates += [d for d in var.dims if d in ds.variables]
    candidates += [str(v) for v in ds.variables
                   if anywhere or set(ds[v].dims) <= set(var.dims)]
    found: list[str] = []
    for c in candidates:
        if c != name and c not in found and _is_coordinate_of_kind(ds[c].variable, kind):
            found.append(c)
    return found


def find_coordinate(ds: xr.Dataset, name: str, kind: str, anywhere: bool = False) -> str | None:
    """First of :func:`find_coordinates`, or None."""
    found = find_coordinates(ds, name, kind, anywhere=anywhere)
    return found[0] if found else None


def ancillary_variable_names(ds: xr.Dataset, name: str) -> list[str]:
    """Variables listed in ``name``'s ``ancillary_variables`` attribute that exist in ``ds``."""
    return [a for a in str(ds[name].attrs.get("ancillary_variables", "")).split()
            if a in ds.variables]


def find_standard_error(ds: xr.Dataset, name: str) -> str | None:
    """The ancillary variable with standard_name ``"<standard_name of name> standard_error"``."""
    wanted = f"{ds[name].attrs.get('standard_name', '')} standard_error"
    for a in ancillary_variable_names(ds, name):
        if " ".join(str(ds[a].attrs.get("standard_name", "")).split()) == wanted:
            return a
    return None


def find_flag_variables(ds: xr.Dataset, name: str) -> list[str]:
    """Ancillary variables whose standard_name ends in ``status_flag`` or ``quality_flag``."""
    return [a for a in ancillary_variable_names(ds, name)
            if str(ds[a].attrs.get("standard_name", "")).strip().endswith(
                ("status_flag", "quality_flag"))]
