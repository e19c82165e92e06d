"""The shared CF decoding layer: every reader finds and decodes its variables through here.

A reader finds its data variable by ``standard_name``, asks this module for positions, times,
errors and flags, and hands plain numpy arrays to :func:`observation_table`.  Nothing in here
knows about a particular product: only the CF conventions (packing, ``standard_name``,
``coordinates``, ``ancillary_variables``, flags, ``grid_mapping``, ``bounds``, time units and
calendars) as described in ``docs/file-conventions.md``.

Units are converted with the CF/udunits pint registry of :mod:`cf_xarray.units`; times with
:mod:`cftime`; map projections with :mod:`pyproj` (PROJ).
"""

from __future__ import annotations

import dataclasses
import os
import tokenize
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.geo.sphere import wrap_longitude  # noqa: F401  (part of this module's interface)
from obsprep.model.quantities import Quantity
from obsprep.model.reasons import REASONS
from obsprep.model.table import make_table

__all__ = [
    "DEFAULT_GOOD_FLAG_MEANINGS", "SourceOptions", "CfOptions", "option", "option_meanings",
    "parse_string", "parse_names", "parse_lowercase_set", "parse_positive_seconds", "reader_options",
    "open_dataset", "find_variable", "require_variable", "find_coordinate", "find_coordinates",
    "ancillary_variable_names", "find_standard_error", "find_flag_variables",
    "good_flag_mask", "decode_time", "decode_time_variable", "convert_units",
    "values_in_units", "wrap_longitude", "broadcast_to_variable", "crs_for_variable",
    "lonlat_from_projection", "grid_axis_azimuths", "rotate_grid_vectors_to_east_north",
    "horizontal_position", "observation_time", "observation_interval", "labels_as_strings",
    "platform_attribute", "DecodedVariable", "decode_data_variable", "require_values",
    "observation_table", "flag_meaning_masks", "apply_reader_profile", "READER_PROFILE_KEYS",
    "reader_profile_roles", "variable_units",
]

#: flag meanings kept by default (docs/file-conventions.md)
DEFAULT_GOOD_FLAG_MEANINGS = frozenset(
    ("good", "good_data", "nominal", "ok", "valid", "probably_good"))


# --------------------------------------------------------------------------------------------
# reader options
# --------------------------------------------------------------------------------------------

def option(default, meaning: str, parse=None):
    """A reader option: a dataclass field with its ``meaning`` (shown in errors and docs) and
    ``parse(name, value)``, which checks a given value and returns it in the field's type
    (raising ``ValueError`` naming the option)."""
    return dataclasses.field(default=default, metadata={"meaning": meaning, "parse": parse})


def parse_string(name, value) -> str:
    """A str option."""
    if not isinstance(value, str):
        raise ValueError(f"option '{name}' must be a string, got {value!r}")
    return value


def parse_names(name, value) -> tuple:
    """A list of str, or one space-separated str, as a tuple."""
    names = value.split() if isinstance(value, str) else value
    if isinstance(names, (bytes, dict)) or not hasattr(names, "__iter__"):
        raise ValueError(f"option '{name}' must be strings, got {value!r}")
    names = tuple(names)
    if not all(isinstance(n, str) for n in names):
        raise ValueError(f"option '{name}' must be strings, got {value!r}")
    return names


def parse_lowercase_set(name, value) -> frozenset:
    """A list of str, or one space-separated str, as a set of lowercase str."""
    return frozenset(n.lower() for n in parse_names(name, value))


def parse_positive_seconds(name, value) -> float:
    """A positive number of seconds as float."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
        raise ValueError(f"option '{name}' must be a positive number of seconds, got {value!r}")
    return float(value)


@dataclass(frozen=True)
class SourceOptions:
    """Options every reader accepts."""

    sensor: str = option("", "source name written to the 'sensor' column (default: empty)",
                         parse_string)
    platform: str | None = option(
        None, "platform identifier written to every row, overriding the file's own "
              "(default: the file's 'platform' global attribute)", lambda name, value: str(value))


@dataclass(frozen=True)
class CfOptions(SourceOptions):
    """Options of the CF-generic readers, which keep rows by their flag meanings."""

    good_flag_meanings: frozenset = option(
        DEFAULT_GOOD_FLAG_MEANINGS, "flag meanings whose rows are kept (list of str, or one "
                                    "space-separated str; default: good good_data nominal ok "
                                    "valid probably_good)", parse_lowercase_set)


def option_meanings(options_class) -> dict[str, str]:
    """Name -> meaning of the options of a reader's options dataclass, in declaration order."""
    return {f.name: f.metadata["meaning"] for f in dataclasses.fields(options_class)}


def reader_options(reader, options: dict):
    """Check ``options`` against ``reader.Options`` and return an instance of it.

    Raises ``TypeError`` naming an unknown option and listing the accepted ones, and
    ``ValueError`` for a value of the wrong kind, so a typo in a configuration fails at once.
    A value of None means the option's default.
    """
    fields = {f.name: f for f in dataclasses.fields(reader.Options)}
    unknown = sorted(set(options) - set(fields))
    if unknown:
        raise TypeError(
            f"unknown option(s) {', '.join(repr(u) for u in unknown)} for reader "
            f"'{reader.kind}'; accepted options: {', '.join(fields)}")
    values = {}
    for name, value in options.items():
        if value is None:
            continue
        parse = fields[name].metadata.get("parse")
        values[name] = parse(name, value) if parse is not None else value
    return reader.Options(**values)


# --------------------------------------------------------------------------------------------
# opening
# --------------------------------------------------------------------------------------------

_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")


def open_dataset(path, profile: dict | None = None, load: bool = True) -> xr.Dataset:
    """Open a netCDF file with CF packing and fill decoded, times left as numbers.

    ``profile`` is a reader profile (:func:`apply_reader_profile`): attribute and fill-value
    overrides are applied to the raw variables before the CF decoding, variable roles after.
    ``load=False`` keeps the variables lazy and the file open (the caller closes the dataset);
    for reading a few metadata variables of a large file.

    ``scale_factor``/``add_offset`` are applied and ``_FillValue``/``missing_value`` become NaN
    (``mask_and_scale=True``); times and durations stay numeric (``decode_times=False``) so
    :func:`decode_time` can handle every calendar; attributes such as ``coordinates`` and
    ``grid_mapping`` stay on the variables.  The data are loaded into memory, so a truncated
    file fails here rather than half-way through a reader.

    Raises
    ------
    InputFileError
        The file is missing, empty, not netCDF, or cannot be read (e.g. truncated); the
        message is one line naming the file and the reason.
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise InputFileError(path, "file not found")
    if os.path.isdir(path):
        raise InputFileError(path, "is a directory, expected a netCDF file")
    size = os.path.getsize(path)
    if size == 0:
        raise InputFileError(path, "file is empty (0 bytes), expected a netCDF file")
    try:
        ds = xr.open_dataset(path, engine="netcdf4", mask_and_scale=not profile,
                             decode_times=False, decode_timedelta=False, decode_coords=False)
    except (OSError, RuntimeError, ValueError, KeyError, IndexError) as exc:
        with open(path, "rb") as fh:
            head = fh.read(8)
        if not head.startswith(_NETCDF_MAGIC):
            raise InputFileError(
                path, f"not a netCDF file (starts with {head[:4]!r}, expected netCDF-3 'CDF' "
                      f"or netCDF-4/HDF5 signature)") from exc
        raise InputFileError(path, f"cannot open netCDF file ({size} bytes; truncated or "
                                   f"corrupt?): {_one_line(exc)}") from exc
    if not load:
        return apply_reader_profile(ds, profile, path) if profile else ds
    try:
        ds.load()
    except (OSError, RuntimeError, ValueError, IndexError) as exc:
        ds.close()
        raise unreadable_data(path, exc) from exc
    ds.close()  # the data are in memory; release the file handle
    return apply_reader_profile(ds, profile, path) if profile else ds


def unreadable_data(path, exc: BaseException) -> InputFileError:
    """The error for data the netCDF/HDF5 library fails to read (truncated or corrupt)."""
    return InputFileError(path, f"cannot read the data ({os.path.getsize(path)} bytes; "
                                f"truncated or corrupt?): {_one_line(exc)}")


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


# --------------------------------------------------------------------------------------------
# finding variables
# --------------------------------------------------------------------------------------------

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


# --------------------------------------------------------------------------------------------
# flags
# --------------------------------------------------------------------------------------------

def good_flag_mask(flag: xr.DataArray, good_meanings, path) -> np.ndarray:
    """Boolean array, True where the CF flag variable ``flag`` says "good".

    CF 3.5: ``flag_meanings`` names each entry of ``flag_values`` (mutually exclusive states)
    or of ``flag_masks`` (bit fields; with both attributes a state is set when
    ``value & mask == flag_value``, with masks only when ``value & mask != 0``).
    With ``flag_values`` a value is good when its meaning is in ``good_meanings``; with
    ``flag_masks`` a value is good when every meaning set in it is in ``good_meanings``
    (a value with no bit set is good).  A fill (NaN) flag is not good: the provider gave no
    verdict.  Meanings are compared case-insensitively.
    """
    good_meanings = {m.lower() for m in good_meanings}
    set_by_meaning = flag_meaning_masks(flag, path)
    finite = np.isfinite(np.asarray(flag.values, dtype=np.float64))
    if flag.attrs.get("flag_masks") is None:  # exclusive states: good when a good state is set
        good = np.zeros(finite.shape, dtype=bool)
        for meaning, is_set in set_by_meaning.items():
            if meaning in good_meanings:
                good |= is_set
        return good
    bad = np.zeros(finite.shape, dtype=bool)  # bit fields: good when no bad bit is set
    for meaning, is_set in set_by_meaning.items():
        if meaning not in good_meanings:
            bad |= is_set
    return finite & ~bad


def flag_meaning_masks(flag: xr.DataArray, path, only=None) -> dict[str, np.ndarray]:
    """Meaning -> boolean array (the flag's shape), True where that state or bit is set.

    CF 3.5: with ``flag_values`` only, meaning m is set where ``value == flag_values[m]``; with
    ``flag_masks`` only, where ``value & flag_masks[m] != 0``; with both, where
    ``value & flag_masks[m] == flag_values[m]``.  A fill (NaN) flag sets nothing.  Meanings are
    lower-cased.  ``only`` (meanings) limits the result to those meanings.  Raises
    :class:`InputFileError` naming the variable when the attributes are missing or their
    lengths disagree.
    """
    name = flag.name
    meanings = str(flag.attrs.get("flag_meanings", "")).lower().split()
    masks = flag.attrs.get("flag_masks")
    values = flag.attrs.get("flag_values")
    if (masks is None and values is None) or not meanings:
        raise InputFileError(path, "flag variable needs flag_meanings and flag_values or "
                                   "flag_masks (CF 3.5)", variable=name)
    for attr, entries in (("flag_masks", masks), ("flag_values", values)):
        if entries is not None and np.size(entries) != len(meanings):
            raise InputFileError(
                path, f"{attr} has {np.size(entries)} entries but flag_meanings has "
                      f"{len(meanings)} words", variable=name)
    raw = np.asarray(flag.values)
    if raw.dtype.kind in "iu":
        finite = None  # integer flags have no fill left to mask
        ints = raw  # bit tests in the file's own integer type: no widened copy per pixel
    else:
        raw = raw.astype(np.float64, copy=False)
        finite = np.isfinite(raw)
        ints = np.where(finite, raw, 0).astype(np.int64)
    states = None if values is None else np.atleast_1d(values).astype(np.int64)
    # the masks in the flags' own type (the same bits; CF gives them that type anyway)
    bits = None if masks is None else np.atleast_1d(masks).astype(np.int64).astype(ints.dtype)
    wanted = None if only is None else {str(m).lower() for m in only}
    out: dict[str, np.ndarray] = {}
    for k, meaning in enumerate(meanings):  # loop over the few meanings, not the observations
        if wanted is not None and meaning not in wanted:
            continue
        if bits is None:
            is_set = ints == states[k]
        elif states is None:
            is_set = (ints & bits[k]) != 0
        else:
            is_set = (ints & bits[k]) == states[k]
        if finite is not None:
            is_set &= finite
        out[meaning] = out[meaning] | is_set if meaning in out else is_set
    return out


# --------------------------------------------------------------------------------------------
# time
# --------------------------------------------------------------------------------------------

_SECONDS_PER_UNIT = {
    **dict.fromkeys(("days", "day", "d"), 86400.0),
    **dict.fromkeys(("hours", "hour", "hr", "hrs", "h"), 3600.0),
    **dict.fromkeys(("minutes", "minute", "min", "mins"), 60.0),
    **dict.fromkeys(("seconds", "second", "sec", "secs", "s"), 1.0),
    **dict.fromkeys(("milliseconds", "millisecond", "msec", "msecs", "ms"), 1e-3),
    **dict.fromkeys(("microseconds", "microsecond", "usec", "usecs", "us"), 1e-6),
}
_NS_PER_DAY = 86_400 * 10**9


def _seconds_per_unit(unit: str, path, variable) -> float:
    try:
        return _SECONDS_PER_UNIT[unit.strip().lower()]
    except KeyError:
        raise InputFileError(
            path, f"time unit '{unit}' not understood; expected days, hours, minutes, seconds, "
                  f"milliseconds or microseconds (months and years are not fixed lengths)",
            variable=variable) from None


def _label_to_datetime64_ns(label) -> np.int64:
    """A cftime date label -> int64 nanoseconds since 1970 in the proleptic Gregorian calendar,
    or NaT's integer when the year is outside datetime64[ns] (1678-2261)."""
    if not 1678 <= label.year <= 2261:
        return np.datetime64("NaT", "ns").astype(np.int64)
    stamp = np.datetime64(
        f"{label.year:04d}-{label.month:02d}-{label.day:02d}T{label.hour:02d}:"
        f"{label.minute:02d}:{label.second:02d}", "ns")
    return (stamp + np.timedelta64(label.microsecond, "us")).astype(np.int64)


def decode_time(values, units: str, calendar: str | None, path, variable=None) -> np.ndarray:
    """Decode CF times ``"<unit> since <epoch>"`` in any CF calendar to UTC ``datetime64[ns]``.

    The calendar date each value denotes (cftime's ``num2date``) is written as the same
    year-month-day hh:mm:ss in ``datetime64``; for the non-standard calendars (``noleap``,
    ``360_day``, ...) that keeps the date label the file means.  A time zone offset in the
    epoch ("... +02:00") is applied by cftime, so the result is UTC.

    Vectorised: values are split into whole days since the epoch and a remainder (s); cftime
    decodes only the distinct days (every CF calendar has 86 400-s days), and the remainder is
    added in numpy.  NaN gives NaT, as do dates outside 1678-2261 (the ``datetime64[ns]`` range).

    Parameters
    ----------
    values : array-like
        Numbers of ``unit`` since the epoch, any shape.
    units, calendar : str
        The CF ``units`` and ``calendar`` attributes (calendar default "standard").

    Raises
    ------
    InputFileError
        Units not of the form "<unit> since <epoch>", unknown calendar, or a date that has no
        equivalent in the real calendar (e.g. 30 February in the ``360_day`` calendar).
    """
    import cftime

    units = str(units or "")
    if " since " not in units:
        raise InputFileError(path, f"time units '{units}' are not of the CF form "
                                   f"'<unit> since <epoch>'", variable=variable)
    unit, epoch = units.split(" since ", 1)
    seconds = np.asarray(values, dtype=np.float64) * _seconds_per_unit(unit, path, variable)
    finite = np.isfinite(seconds)
    days = np.floor(seconds[finite] / 86400.0)
    remainder_ns = np.round((seconds[finite] - days * 86400.0) * 1e9).astype(np.int64)
    unique_days, inverse = np.unique(days, return_inverse=True)
    try:
        labels = cftime.num2date(unique_days, f"days since {epoch}",
                                 calendar=calendar or "standard",
                                 only_use_cftime_datetimes=True)
        day_ns = np.array([_label_to_datetime64_ns(lab) for lab in np.atleast_1d(labels)],
                          dtype=np.int64)
    except (ValueError, TypeError, OverflowError) as exc:
        raise InputFileError(path, f"cannot decode times with units '{units}' and calendar "
                                   f"'{calendar or 'standard'}': {_one_line(exc)}",
                             variable=variable) from exc
    nat = np.datetime64("NaT", "ns").astype(np.int64)
    out = np.full(seconds.shape, nat, dtype=np.int64)
    decoded = day_ns[inverse.ravel()]
    out[finite] = np.where(decoded == nat, nat, decoded + remainder_ns)
    return out.view("datetime64[ns]")


def decode_time_variable(da: xr.DataArray, path, units=None, calendar=None) -> np.ndarray:
    """:func:`decode_time` for a variable, using its own ``units``/``calendar`` unless given
    (CF 7.1: a ``bounds`` variable inherits them from its parent)."""
    units = units if units is not None else da.attrs.get("units")
    calendar = calendar if calendar is not None else da.attrs.get("calendar")
    return decode_time(da.values, units, calendar, path, variable=da.name)


# --------------------------------------------------------------------------------------------
# units
# --------------------------------------------------------------------------------------------

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
                path, f"units '{units}' cannot be converted to '{canonical}' ({_one_line(exc)})",
                variable=variable) from exc
        offset, scale = float(at[0]), float(at[1] - at[0])
        if not np.isclose(at[2], offset + 1000.0 * scale, rtol=1e-12, atol=1e-12 * abs(offset)):
            raise InputFileError(path, f"units '{units}' -> '{canonical}' is not an affine "
                                       f"conversion; obsprep converts factors and offsets only",
                                 variable=variable)
        _AFFINE_CONVERSIONS[key] = (scale, offset)
    return _AFFINE_CONVERSIONS[key]


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


# --------------------------------------------------------------------------------------------
# positions and map projections
# --------------------------------------------------------------------------------------------

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
                                   f"{_one_line(exc)}", variable=mapping) from exc


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


def grid_axis_azimuths(crs, lon, lat, step=1000.0) -> tuple[np.ndarray, np.ndarray]:
    """Azimuths (degrees clockwise from true north) of the projection's +x and +y axes.

    Computed from the CRS itself by central differences: the point P is projected to (x, y),
    the points P+ = (x + h, y) and P- = (x - h, y) (and likewise along y) are inverted back to
    longitude/latitude, and the azimuth of the axis at P is the circular mean of the geodesic
    azimuths P -> P+ and (P -> P-) + 180 deg (``pyproj.Geod`` on the CRS's ellipsoid).  The
    two one-sided chords deviate from the tangent by equal and opposite first-order amounts, so
    the error is second order, about (h/R)^2 rad; ``step`` h = 1 km (CRS axis units) also keeps
    the micrometre noise of PROJ's iterative inverse projections below 1e-8 rad.

    The +y azimuth alpha is the angle from true north to grid north, positive clockwise
    (towards east); for conformal projections it equals PROJ's ``meridian_convergence``
    (``pyproj.Proj.get_factors``) and the +x azimuth is alpha + 90 degrees.
    """
    import pyproj

    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    forward = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    inverse = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    geod = crs.get_geod()
    x, y = forward.transform(lon, lat)
    azimuths = []
    for dx, dy in ((step, 0.0), (0.0, step)):
        lon_plus, lat_plus = inverse.transform(x + dx, y + dy)
        lon_minus, lat_minus = inverse.transform(x - dx, y - dy)
        ahead, _, _ = geod.inv(lon, lat, lon_plus, lat_plus)
        behind, _, _ = geod.inv(lon, lat, lon_minus, lat_minus)
        ahead, behind = np.radians(ahead), np.radians(behind) + np.pi
        mean = np.arctan2(np.sin(ahead) + np.sin(behind), np.cos(ahead) + np.cos(behind))
        azimuths.append(np.degrees(np.asarray(mean, dtype=np.float64)).reshape(lon.shape))
    return azimuths[0], azimuths[1]


def rotate_grid_vectors_to_east_north(crs, lon, lat, u, v, sigma_u=None, sigma_v=None):
    """Rotate vector components along the projection axes into east/north components.

    With beta and alpha the azimuths of the grid +x and +y axes (:func:`grid_axis_azimuths`,
    degrees clockwise from true north) and the vector written as u e_x + v e_y:

    .. math::

        east  = u \\sin\\beta + v \\sin\\alpha, \\qquad
        north = u \\cos\\beta + v \\cos\\alpha

    For a conformal projection (beta = alpha + 90 deg) this is the rotation by the meridian
    convergence alpha: east = u cos(alpha) + v sin(alpha), north = -u sin(alpha) + v cos(alpha).
    Units of u, v are kept (m for displacements).  Errors ``sigma_u``, ``sigma_v`` (same units)
    are propagated assuming independent component errors:
    sigma_east^2 = (sigma_u sin beta)^2 + (sigma_v sin alpha)^2, and likewise north with cosines.

    Returns ``(east, north)`` or ``(east, north, sigma_east, sigma_north)`` when errors are
    given.
    """
    azimuth_x, azimuth_y = grid_axis_azimuths(crs, lon, lat)
    beta, alpha = np.radians(azimuth_x), np.radians(azimuth_y)
    east = u * np.sin(beta) + v * np.sin(alpha)
    north = u * np.cos(beta) + v * np.cos(alpha)
    if sigma_u is None and sigma_v is None:
        return east, north
    sigma_u = np.full(np.shape(u), np.nan) if sigma_u is None else sigma_u
    sigma_v = np.full(np.shape(v), np.nan) if sigma_v is None else sigma_v
    sigma_east = np.hypot(sigma_u * np.sin(beta), sigma_v * np.sin(alpha))
    sigma_north = np.hypot(sigma_u * np.cos(beta), sigma_v * np.cos(alpha))
    return east, north, sigma_east, sigma_north


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


def _absolute_and_offset_times(ds, name, path):
    """(absolute time variables, duration variables) on ``name``'s dimensions."""
    found = find_coordinates(ds, name, "time")
    absolute = [t for t in found if " since " in str(ds[t].attrs.get("units", ""))]
    offsets = [t for t in found if t not in absolute
               and str(ds[t].attrs.get("units", "")).strip().lower() in _SECONDS_PER_UNIT]
    if not absolute:
        raise InputFileError(path, "no time coordinate: expected a variable with "
                                   "standard_name 'time' and units '<unit> since <epoch>' on the "
                                   f"variable's dimensions {ds[name].dims}", variable=name)
    return absolute, offsets


def observation_time(ds: xr.Dataset, name: str, path) -> np.ndarray:
    """UTC ``datetime64[ns]`` time of every value of ``name`` (its shape).

    The time variable with the most dimensions wins (per-pixel time over the scalar or
    length-1 ``time`` coordinate).  A ``standard_name = "time"`` variable with duration units
    ("seconds", no "since", like a per-pixel offset) is added to the reference time.
    """
    var = ds[name]
    absolute, offsets = _absolute_and_offset_times(ds, name, path)
    chosen = max(absolute, key=lambda t: ds[t].ndim)
    time = broadcast_to_variable(decode_time_variable(ds[chosen], path), ds[chosen].dims, var, path=path)
    offsets = [o for o in offsets if ds[o].ndim > ds[chosen].ndim]
    if offsets:
        offset = max(offsets, key=lambda t: ds[t].ndim)
        seconds = values_in_units(ds[offset], "s", path)
        offset_ns = np.round(broadcast_to_variable(seconds, ds[offset].dims, var, path=path) * 1e9)
        time = time + offset_ns.astype("timedelta64[ns]")  # NaN -> NaT
    return time


def observation_interval(ds: xr.Dataset, name: str, path) -> tuple[np.ndarray, np.ndarray]:
    """(start, end) UTC ``datetime64[ns]`` of every value of ``name`` from the time variable's
    CF ``bounds`` (CF 7.1: last dimension of length 2, units/calendar of the parent)."""
    var = ds[name]
    absolute, _ = _absolute_and_offset_times(ds, name, path)
    with_bounds = [t for t in absolute if ds[t].attrs.get("bounds") in ds.variables]
    if not with_bounds:
        raise InputFileError(path, f"no interval: the time variable(s) {', '.join(absolute)} "
                                   f"have no 'bounds' variable giving start and end",
                             variable=name)
    time = max(with_bounds, key=lambda t: ds[t].ndim)
    bounds = ds[ds[time].attrs["bounds"]]
    if bounds.ndim == 0 or bounds.shape[-1] != 2:
        raise InputFileError(path, f"time bounds have shape {bounds.shape}, expected a last "
                                   f"dimension of length 2", variable=bounds.name)
    decoded = decode_time_variable(bounds, path, units=ds[time].attrs.get("units"),
                                   calendar=ds[time].attrs.get("calendar"))
    dims = bounds.dims[:-1]
    return (broadcast_to_variable(decoded[..., 0], dims, var, path=path),
            broadcast_to_variable(decoded[..., 1], dims, var, path=path))


def labels_as_strings(values) -> np.ndarray:
    """Identifier values (bytes, str, integers, integer-valued floats) as a str array;
    fill (NaN) becomes ""."""
    values = np.asarray(values)
    if values.dtype.kind == "S":
        return np.char.strip(np.char.decode(values, "utf-8", errors="replace"))
    if values.dtype.kind == "U":
        return np.char.strip(values)
    if values.dtype.kind in "iu":
        return values.astype(str)
    if values.dtype.kind == "f":
        finite = np.isfinite(values)
        out = np.where(finite, np.where(finite, values, 0).astype(np.int64).astype(str), "")
        whole = finite & (values == np.round(np.where(finite, values, 0)))
        return np.where(finite & ~whole, values.astype(str), out)
    return np.array([str(v).strip() for v in values.ravel()], dtype=str).reshape(values.shape)


def platform_attribute(ds: xr.Dataset, opts: SourceOptions) -> str:
    """Platform from the option, else the ``platform`` global attribute, else ""."""
    if opts.platform is not None:
        return opts.platform
    return str(ds.attrs.get("platform", "")).strip()


# --------------------------------------------------------------------------------------------
# data variables and the observation table
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class DecodedVariable:
    """One data variable decoded to canonical units, with its file error and provider flags.

    ``values`` and ``error`` are float64 arrays of the variable's shape, in the quantity's
    canonical units; ``error`` is None without a standard_error ancillary variable; ``good``
    is a boolean array (None without flag variables).
    """

    quantity: Quantity
    variable: str
    values: np.ndarray
    error: np.ndarray | None = None
    good: np.ndarray | None = None

    def replace(self, **changes) -> DecodedVariable:
        """A copy with some fields changed."""
        return dataclasses.replace(self, **changes)


def decode_data_variable(ds: xr.Dataset, name: str, quantity: Quantity, path,
                         good_flag_meanings=DEFAULT_GOOD_FLAG_MEANINGS) -> DecodedVariable:
    """Decode data variable ``name`` as ``quantity``: values in canonical units, the
    ``standard_error`` ancillary variable (converted as a difference, units defaulting to the
    data's) and the combined "good" mask of every flag ancillary variable."""
    var = ds[name]
    values = values_in_units(var, quantity.units, path, quantity=quantity)
    error = None
    error_name = find_standard_error(ds, name)
    if error_name is not None:
        sigma = values_in_units(ds[error_name], quantity.units, path, quantity=quantity,
                                difference=True, default_units=var.attrs.get("units"))
        error = np.array(broadcast_to_variable(sigma, ds[error_name].dims, var, path=path))
    good = None
    for flag_name in find_flag_variables(ds, name):
        mask = broadcast_to_variable(
            good_flag_mask(ds[flag_name], good_flag_meanings, path), ds[flag_name].dims, var, path=path)
        good = mask.copy() if good is None else good & mask
    return DecodedVariable(quantity, name, values, error, good)


def require_values(path, decoded: list[DecodedVariable], *, reading_part: bool) -> None:
    """Raise :class:`InputFileError` when the data variables hold values but every one is fill
    (an all-fill file is a broken product, not a night without data).

    Not for a part of a file (``reading_part``, see ``row_slice`` of
    :func:`obsprep.readers.read`): rows of fill at the edge of a swath or the polar rows of a
    global grid are ordinary; their values are counted as ``missing_value``."""
    if reading_part:
        return
    total = sum(d.values.size for d in decoded)
    if total and not any(np.isfinite(d.values).any() for d in decoded):
        names = ", ".join(d.variable for d in decoded)
        raise InputFileError(path, f"all {total} values are fill/NaN; nothing to read",
                             variable=names)


#: table attribute: {reason: rows} the reader rejected and left out of the table
NOT_IN_TABLE = "rejected_not_in_table"
#: table attribute: the variable whose flat index the ``row`` column is
ROW_VARIABLE = "row_variable"

def observation_table(path, opts: SourceOptions, decoded: DecodedVariable, *, lon, lat, time,
                      time_end=None, depth=None, group="", platform="", row=None, keep=None,
                      missing=None, rejections=(),
                      leave_out_rejected=False) -> pd.DataFrame:
    """The observation table for one decoded variable.

    Every array argument is broadcast to the variable's shape and flattened in source order.
    ``row`` defaults to the flat index of the value in the source variable; ``keep`` (boolean)
    drops entries that are not observations at all (profile padding); ``missing`` (boolean)
    marks extra rows as ``missing_value`` (e.g. the vertical coordinate is fill).

    Rows with a NaN value are rejected ``missing_value``; rows whose provider flag is not good,
    ``provider_flag``; then each ``(mask, reason)`` of ``rejections`` (masks of the variable's
    shape), the first reason of a row winning.  ``file_id`` is ``path``, ``sensor`` the option,
    ``error`` the file's standard_error where finite (``error_origin`` "file", else "unset").

    ``leave_out_rejected=True`` (for the nightly build, which only counts those rows: on a
    cloudy swath they are most rows) counts the rejected rows in ``table.attrs[NOT_IN_TABLE]``
    and leaves them out; only for a reader that changes no rows afterwards.  ``obsprep read``
    and ``inspect`` keep every row with its reason.
    """
    shape = decoded.values.shape

    def flat(a, dtype=None):
        a = np.asarray(a, dtype=dtype)
        # an array of the full shape is flattened as it is (a view, no copy); others broadcast
        a = a.ravel() if a.shape == shape else np.broadcast_to(a, shape).ravel()
        return a if keep_flat is None else a[keep_flat]

    keep_flat = None if keep is None else np.broadcast_to(keep, shape).ravel()
    values = flat(decoded.values)
    # reason of each row, the first that applies (-1 kept), as codes into REASONS
    reasons = list(REASONS)
    code = np.full(values.size, -1, dtype=np.int8)
    missing_rows = ~np.isfinite(values)
    if missing is not None:
        missing_rows |= flat(missing, bool)
    ordered = [(missing_rows, "missing_value")]
    if decoded.good is not None:
        ordered.append((~flat(decoded.good, bool), "provider_flag"))
    ordered += [(flat(mask, bool), reason) for mask, reason in rejections]
    for mask, reason in ordered:  # loop over the few reasons, not the rows
        code[mask & (code < 0)] = reasons.index(reason)
    leave_out = bool(leave_out_rejected)
    select = None
    not_in_table = {}
    if leave_out:
        counts = np.bincount(code + 1, minlength=len(reasons) + 1)
        not_in_table = {reasons[k - 1]: int(c) for k, c in enumerate(counts) if k and c}
        if not_in_table:
            select = np.flatnonzero(code < 0)  # indices: one scan, then cheap gathers
            values, code = values[select], code[select]

    def column(a, dtype=None):
        a = flat(a, dtype)
        return a if select is None else a.take(select)

    rows_number_the_variable = row is None and keep_flat is None
    if rows_number_the_variable:
        # the flat index in the source variable: for a selection, the selection itself
        row_column = np.arange(values.size) if select is None else select
    else:
        row_column = column(np.arange(decoded.values.size).reshape(shape) if row is None else row,
                            np.int64)

    error = column(decoded.error) if decoded.error is not None else np.full(values.size, np.nan)
    has_error = np.isfinite(error)
    columns = dict(
        quantity=decoded.quantity.name,
        value=values,
        error=error,
        error_origin=pd.Categorical.from_codes(has_error.astype(np.int8), ["unset", "file"]),
        lon=column(lon, np.float64),
        lat=column(lat, np.float64),
        time=column(time, "datetime64[ns]"),
        sensor=opts.sensor,
        file_id=str(path),
        row=row_column.astype(np.int64, copy=False),
        rejected=pd.Categorical.from_codes(code, categories=reasons),
    )
    if depth is not None:
        columns["depth"] = column(depth, np.float64)
    if time_end is not None:
        columns["time_end"] = column(time_end, "datetime64[ns]")
    for name, label in (("group", group), ("platform", platform)):
        columns[name] = str(label) if np.ndim(label) == 0 else column(label)
    table = make_table(n=values.size, **columns)
    if leave_out:
        table.attrs[NOT_IN_TABLE] = not_in_table
    if rows_number_the_variable:
        table.attrs[ROW_VARIABLE] = decoded.variable
    return table


def variable_units(ds: xr.Dataset, names) -> dict[str, str]:
    """``{variable: units attribute}`` of the named variables present in ``ds`` ("" without
    units), for reporting which variables a reader used (``table.attrs["variables"]``)."""
    return {str(n): str(ds[n].attrs.get("units", "")) for n in names
            if n is not None and n in ds.variables}


# --------------------------------------------------------------------------------------------
# reader profiles: per-source overrides for products that bend the conventions
# --------------------------------------------------------------------------------------------

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
                                   f"{_one_line(exc)}") from exc

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
