"""Units: conversion to a quantity's canonical units with the CF/udunits pint registry of cf_xarray."""

from __future__ import annotations

import tokenize

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import Quantity
from obsprep.readers.cf.messages import one_line

_UNIT_REGISTRY = None


#: unit strings that mean "practical salinity on the PSS-78 scale", canonical "1"
PRACTICAL_SALINITY_UNITS = frozenset(("psu", "pss-78", "pss78", "1e-3", "0.001", "10-3", "1", ""))


def _registry():
    global _UNIT_REGISTRY
    if _UNIT_REGISTRY is None:
        import logging

        # cf_xarray redefines a few pint units on purpose (%, h, degrees_*); pint logs each
        # redefinition as a warning, which is noise in a nightly log.
        pint_log = logging.getLogger("pint.util")
        level = pint_log.level
        pint_log.setLevel(logging.ERROR)
        try:
            from cf_xarray.units import units  # imports pint; only when a conversion is needed
        finally:
            pint_log.setLevel(level)
        _UNIT_REGISTRY = units
    return _UNIT_REGISTRY


def preload() -> None:
    """Import what reading a file needs on first use (the CF/udunits unit registry, xarray's
    netCDF4 backend), so that worker processes forked afterwards inherit it instead of each
    paying the half second of loading it again."""
    import xarray.backends.netCDF4_  # noqa: F401

    _registry()


def convert_units(values, units: str, canonical: str, path, variable=None,
                  difference: bool = False) -> np.ndarray:
    """Convert ``values`` from ``units`` to ``canonical`` with the CF/udunits pint registry.

    Offset units are converted as affine maps (K -> degC: t_C = t_K - 273.15).  With
    ``difference=True`` the values are differences (errors, spreads), converted as
    f(v) - f(0), so 0.3 K -> 0.3 degC and 0.3 degF -> 0.1667 degC.

    Returns float64.  Raises :class:`InputFileError` naming ``variable``, the units found and
    the units expected when the string is not a unit or has the wrong dimension.
    """
    values = np.asarray(values, dtype=np.float64)
    units = str(units).strip()
    if units == canonical:
        return values
    scale, offset = _affine_conversion(units, canonical, path, variable)
    converted = np.multiply(values, scale)  # one new array; the caller's stays as it was
    if not difference and offset:
        converted += offset
    return converted


#: (units, canonical) -> (scale, offset) of the affine map between them, see _affine_conversion
_AFFINE_CONVERSIONS: dict[tuple[str, str], tuple[float, float]] = {}


def _affine_conversion(units: str, canonical: str, path, variable) -> tuple[float, float]:
    """``(scale, offset)`` with ``canonical = scale * units + offset``, from the pint registry.

    Every CF unit conversion obsprep makes is affine (a factor, plus an offset for temperature
    scales); pint is asked for f(0) and f(1) once per pair of unit strings and the map is
    applied with numpy, instead of pint converting every array (slow for offset units).  A
    third point checks that the map is affine.
    """
    key = (units, canonical)
    if key not in _AFFINE_CONVERSIONS:
        import pint

        registry = _registry()
        try:
            at = registry.Quantity(np.array([0.0, 1.0, 1000.0]), units).to(canonical).magnitude
        except (pint.PintError, ValueError, TypeError, AttributeError, AssertionError,
                tokenize.TokenError, SyntaxError) as exc:
            raise InputFileError(
                path, f"units '{units}' cannot be converted to '{canonical}' ({one_line(exc)})",
                variable=variable) from exc
        offset, scale = float(at[0]), float(at[1] - at[0])
        if not np.isclose(at[2], offset + 1000.0 * scale, rtol=1e-12, atol=1e-12 * abs(offset)):
            raise InputFileError(path, f"units '{units}' -> '{canonical}' is not an affine "
                                       f"conversion; obsprep converts factors and offsets only",
                                 variable=variable)
        _AFFINE_CONVERSIONS[key] = (scale, offset)
    return _AFFINE_CONVERSIONS[key]


def convertible_units(units: str, other: str) -> bool:
    """True when ``units`` converts to ``other`` (same dimension) in the CF/udunits registry;
    False for a string that is not a unit or of another dimension."""
    try:
        _affine_conversion(str(units).strip(), str(other).strip(), None, None)
    except InputFileError:
        return False
    return True


def values_in_units(da: xr.DataArray, canonical: str, path, quantity: Quantity | None = None,
                    difference: bool = False, default_units: str | None = None) -> np.ndarray:
    """The values of ``da`` in ``canonical`` units (float64, same shape).

    A missing ``units`` attribute is taken as ``default_units`` when given, else as "1" when the
    canonical unit is dimensionless (CF allows no units there), else it is an error.  For
    practical salinity the PSS-78 spellings (``PSU``, ``psu``, ``1e-3``, ``0.001``) mean the
    canonical "1" (PSS-78 is a dimensionless scale; "1e-3" is the CF 1.x spelling).
    """
    units = da.attrs.get("units", default_units)
    if units is None:
        if canonical != "1":
            raise InputFileError(path, f"no units attribute; expected units convertible to "
                                       f"'{canonical}'", variable=da.name)
        units = "1"
    if quantity is not None and quantity.name == "sea_water_salinity" \
            and str(units).strip().lower() in PRACTICAL_SALINITY_UNITS:
        return np.asarray(da.values, dtype=np.float64)
    return convert_units(da.values, units, canonical, path, variable=da.name,
                         difference=difference)
