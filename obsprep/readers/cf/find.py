"""Finding variables: by standard_name, coordinates by kind, ancillary (error and flag) variables."""

from __future__ import annotations

import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.readers.cf.quirks import file_warning


def candidate_variables(ds: xr.Dataset, standard_names, ndim=None) -> list[str]:
    """Every variable with the first of ``standard_names`` that any variable carries, best
    first by :func:`find_variable`'s rule; ``ndim`` (an int or a collection of ints)
    restricts the number of dimensions."""
    if isinstance(ndim, int):
        ndim = (ndim,)
    for wanted in standard_names:
        found = [str(name) for name, var in ds.variables.items()
                 if var.attrs.get("standard_name") == wanted
                 and (ndim is None or var.ndim in ndim)]
        if found:
            return _best_first(ds, found)
    return []


def _best_first(ds: xr.Dataset, names: list[str]) -> list[str]:
    """Candidates for one role (one standard_name) in order of preference: a variable named in
    another's ``ancillary_variables`` last (it describes the other), then the one with most
    ancillary variables present in the file (a product's primary variable carries its
    uncertainty and quality flags), then file order."""
    listed = {a for n in names for a in ancillary_variable_names(ds, n)}
    order = {n: k for k, n in enumerate(names)}
    return sorted(names, key=lambda n: (n in listed, -len(ancillary_variable_names(ds, n)),
                                        order[n]))


def find_variable(ds: xr.Dataset, standard_names, ndim=None) -> str | None:
    """Name of the variable whose ``standard_name`` is one of ``standard_names``.

    The order of ``standard_names`` is the order of preference; ``ndim`` (an int or a
    collection of ints) restricts the number of dimensions.  When several variables carry
    the same standard_name (one file, several retrieval algorithms) the rule of
    :func:`candidate_variables` chooses (no warning here: :func:`require_variable` warns).
    Returns None when there is none.
    """
    found = candidate_variables(ds, standard_names, ndim=ndim)
    return found[0] if found else None


def rows_dimension(ds: xr.Dataset, name: str | None) -> str | None:
    """The first dimension longer than one of variable ``name`` when it has at least two such
    dimensions (the rows of a swath or grid; a length-1 ``time`` is skipped), else None: the
    slice dimension of readers of gridded and swath files."""
    if name is None or name not in ds.variables:
        return None
    longer = [d for d in ds[name].dims if ds.sizes[d] > 1]
    return longer[0] if len(longer) >= 2 else None


def require_variable(ds: xr.Dataset, path, standard_names, what: str, ndim=None) -> str:
    """Like :func:`find_variable` but raise :class:`InputFileError` listing what was expected,
    and record a per-file warning naming the others when several variables qualify."""
    found = candidate_variables(ds, standard_names, ndim=ndim)
    if not found:
        dims = f" with {ndim} dimension(s)" if ndim is not None else ""
        raise InputFileError(
            path, f"no {what} variable{dims}: expected a variable with standard_name "
                  f"{' or '.join(repr(s) for s in standard_names)}")
    if len(found) > 1:
        file_warning(f"{len(found)} variables have standard_name "
                     f"'{ds[found[0]].attrs.get('standard_name')}' ({', '.join(found)}); read "
                     f"'{found[0]}' (not an ancillary of another, most ancillary variables, "
                     f"first in the file); a reader profile's 'variables' chooses another")
    return found[0]


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


def find_uncertainty_variable(ds: xr.Dataset, name: str, path) -> str | None:
    """The uncertainty of data variable ``name``: its ``standard_error`` ancillary variable
    (:func:`find_standard_error`), else the one ancillary variable with no standard_name, no
    flag attributes and units of the same dimension as the data's (a displacement's error in
    km for a displacement in m), recorded as a per-file warning.  Several such candidates are
    ambiguous: none is used, and the warning says so."""
    from obsprep.readers.cf.flags import has_flag_attributes
    from obsprep.readers.cf.units import convertible_units

    named = find_standard_error(ds, name)
    if named is not None:
        return named
    data_units = ds[name].attrs.get("units")
    if data_units is None:
        return None
    found = [a for a in ancillary_variable_names(ds, name)
             if not str(ds[a].attrs.get("standard_name", "")).strip()
             and not has_flag_attributes(ds[a]) and a != name
             and ds[a].attrs.get("units") is not None
             and convertible_units(str(ds[a].attrs["units"]), str(data_units))]
    if len(found) == 1:
        file_warning(f"uncertainty taken from ancillary variable '{found[0]}' (no "
                     f"standard_name; units '{ds[found[0]].attrs['units']}' match the data's, "
                     f"no flag attributes)", variable=name)
        return found[0]
    if found:
        file_warning(f"ancillary variables {', '.join(found)} could each be the uncertainty "
                     f"(no standard_name, units of the data); none used: give one the "
                     f"standard_name '<standard_name> standard_error' in a reader profile",
                     variable=name)
    return None


def find_flag_variables(ds: xr.Dataset, name: str) -> list[str]:
    """Ancillary variables whose standard_name ends in ``status_flag`` or ``quality_flag``."""
    return [a for a in ancillary_variable_names(ds, name)
            if str(ds[a].attrs.get("standard_name", "")).strip().endswith(
                ("status_flag", "quality_flag"))]
