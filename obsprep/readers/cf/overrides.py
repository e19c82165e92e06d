"""Reader profiles: overrides of variable names, attributes and fill values for products that bend the conventions."""

from __future__ import annotations

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.readers.cf.find import find_variable
from obsprep.readers.cf.messages import one_line

#: keys of a reader profile (the ``[sources.reader]`` table), name -> meaning
READER_PROFILE_KEYS: dict[str, str] = {
    "variables": "role -> variable name: a quantity name (e.g. sea_surface_temperature) or a "
                 "coordinate (latitude, longitude, time, depth, sea_water_pressure, "
                 "projection_x_coordinate, projection_y_coordinate) gives that variable the "
                 "role's standard_name; '<quantity>_error' / '<quantity>_flag' make it the "
                 "quantity's standard_error / status_flag ancillary variable; any other role "
                 "(a format's own name, e.g. quality_level, sses_bias, TEMP) renames the "
                 "variable to it",
    "attributes": "variable -> {attribute = value} set on the raw variable before decoding "
                  "(units, scale_factor, flag_meanings, ...); false removes the attribute",
    "fill_value": "variable -> fill value in stored (packed) units, a number or a list, "
                  "replacing _FillValue/missing_value; false: the variable has no fill value",
    "good_flag_meanings": "flag meanings kept (the reader option of the same name)",
}


_COORDINATE_ROLES = ("latitude", "longitude", "time", "depth", "sea_water_pressure",
                     "projection_x_coordinate", "projection_y_coordinate")


def reader_profile_roles() -> dict[str, str]:
    """Roles that set a standard_name: role -> the standard_name given to the variable."""
    from obsprep.model.quantities import QUANTITIES

    roles = {name: q.accepted_standard_names[0] for name, q in QUANTITIES.items()}
    roles.update({c: c for c in _COORDINATE_ROLES})
    return roles


def _profile_table(profile, key, path) -> dict:
    table = profile.get(key) or {}
    if not isinstance(table, dict):
        raise InputFileError(path, f"reader profile '{key}' must be a table, got {table!r}")
    return table


def apply_reader_profile(ds: xr.Dataset, profile: dict | None, path) -> xr.Dataset:
    """Apply a reader profile (:data:`READER_PROFILE_KEYS`) to a dataset opened *without* CF
    decoding (``mask_and_scale=False``) and return it CF-decoded.

    Order: ``attributes`` and ``fill_value`` patch the raw variables; then packing and fill are
    decoded (``xarray.decode_cf``, times left numeric); then ``variables`` assigns roles, so a
    reader finds the variable exactly as if the file had followed the conventions.  A
    standard_name role is taken away from any other variable that had it.  Raises
    :class:`InputFileError` naming the file and the variable when the profile names a
    variable the file does not have or has an unknown key.
    """
    profile = dict(profile or {})
    unknown = sorted(set(profile) - set(READER_PROFILE_KEYS))
    if unknown:
        raise InputFileError(path, f"unknown reader profile key(s) {unknown}; known: "
                                   f"{', '.join(READER_PROFILE_KEYS)}")
    ds = ds.copy()

    def require(name, key):
        if name not in ds.variables:
            raise InputFileError(path, f"the reader profile ({key}) names variable '{name}', "
                                       f"which is not in the file", variable=name)
        return ds.variables[name]

    for name, attrs in _profile_table(profile, "attributes", path).items():
        var = require(name, "attributes")
        if not isinstance(attrs, dict):
            raise InputFileError(path, f"reader profile attributes for '{name}' must be a "
                                       f"table, got {attrs!r}", variable=name)
        for attr, value in attrs.items():
            if value is False:
                var.attrs.pop(attr, None)
                var.encoding.pop(attr, None)
            else:
                var.attrs[attr] = value
    for name, fill in _profile_table(profile, "fill_value", path).items():
        var = require(name, "fill_value")
        for attr in ("_FillValue", "missing_value"):
            var.attrs.pop(attr, None)
            var.encoding.pop(attr, None)
        if fill is not False:
            entries = fill if isinstance(fill, (list, tuple)) else [fill]
            if not entries or not all(isinstance(f, (int, float)) and not isinstance(f, bool)
                                      for f in entries):
                raise InputFileError(path, f"reader profile fill_value must be a number, a "
                                           f"list of numbers or false, got {fill!r}",
                                     variable=name)
            dtype = var.dtype if var.dtype.kind in "iuf" else np.float64
            var.attrs["missing_value"] = np.asarray(fill, dtype=dtype)
    try:
        ds = xr.decode_cf(ds, mask_and_scale=True, decode_times=False, decode_coords=False,
                          decode_timedelta=False)
    except (ValueError, TypeError) as exc:
        raise InputFileError(path, f"cannot decode the file with the reader profile: "
                                   f"{one_line(exc)}") from exc

    roles = reader_profile_roles()
    variables = _profile_table(profile, "variables", path)
    deferred = {}
    for role, name in variables.items():
        require(name, "variables")
        if role in roles:
            _give_standard_name(ds, name, roles[role])
        elif role.endswith(("_error", "_flag")) and role.rsplit("_", 1)[0] in roles:
            deferred[role] = name
        elif role != name:
            if role in ds.variables:
                ds = ds.rename_vars({role: f"{role}_replaced_by_reader_profile"})
            ds = ds.rename_vars({name: role})
    for role, name in deferred.items():  # after the data variables got their standard_name
        quantity_role, kind = role.rsplit("_", 1)
        data = variables.get(quantity_role)
        if data is None:
            from obsprep.model.quantities import QUANTITIES

            data = find_variable(ds, QUANTITIES[quantity_role].accepted_standard_names)
        if data is None:
            raise InputFileError(path, f"reader profile role '{role}': no '{quantity_role}' "
                                       f"variable to attach it to", variable=name)
        data_name = str(ds[data].attrs.get("standard_name", ""))
        modifier = "standard_error" if kind == "error" else "status_flag"
        _give_standard_name(ds, name, f"{data_name} {modifier}")
        listed = str(ds[data].attrs.get("ancillary_variables", "")).split()
        if name not in listed:
            ds.variables[data].attrs["ancillary_variables"] = " ".join(listed + [name])
    return ds


def _give_standard_name(ds: xr.Dataset, name: str, standard_name: str) -> None:
    for other, var in ds.variables.items():
        if other != name and var.attrs.get("standard_name") == standard_name:
            var.attrs["standard_name_replaced_by_reader_profile"] = var.attrs.pop("standard_name")
    ds.variables[name].attrs["standard_name"] = standard_name
