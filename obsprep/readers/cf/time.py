"""CF times: units and calendars decoded with cftime to datetime64[ns] UTC; observation times and intervals."""

from __future__ import annotations

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.readers.cf.find import find_coordinates
from obsprep.readers.cf.messages import one_line
from obsprep.readers.cf.positions import broadcast_to_variable
from obsprep.readers.cf.units import values_in_units

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


#: the first and one past the last year ``datetime64[ns]`` holds whole (1678-2261)
_FIRST_YEAR, _END_YEAR = 1678, 2262


def _representable_days(epoch: str, calendar: str) -> tuple[float, float]:
    """Days since ``epoch`` of 1678-01-01 and 2262-01-01 in ``calendar`` (cftime's
    ``date2num``): whole days outside [first, end) decode to no ``datetime64[ns]``."""
    import cftime

    bounds = [cftime.datetime(year, 1, 1, calendar=calendar) for year in (_FIRST_YEAR, _END_YEAR)]
    first, end = cftime.date2num(bounds, f"days since {epoch}", calendar=calendar)
    return float(first), float(end)


def decode_time(values, units: str, calendar: str | None, path, variable=None) -> np.ndarray:
    """Decode CF times ``"<unit> since <epoch>"`` in any CF calendar to UTC ``datetime64[ns]``.

    The calendar date each value denotes (cftime's ``num2date``) is written as the same
    year-month-day hh:mm:ss in ``datetime64``; for the non-standard calendars (``noleap``,
    ``360_day``, ...) that keeps the date label the file means.  A time zone offset in the
    epoch ("... +02:00") is applied by cftime, so the result is UTC.

    Vectorised: values are split into whole days since the epoch and a remainder (s); cftime
    decodes only the distinct days (every CF calendar has 86 400-s days), and the remainder is
    added in numpy.  NaN gives NaT, as do dates outside 1678-2261 (the ``datetime64[ns]``
    range): a value beyond it (1e19 s, say) is that row's ``bad_time``, not the file's error, and
    is never handed to cftime, which cannot represent it.

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
    calendar_name = calendar or "standard"
    with np.errstate(over="ignore", invalid="ignore"):
        seconds = np.asarray(values, dtype=np.float64) * _seconds_per_unit(unit, path, variable)
    try:
        first_day, end_day = _representable_days(epoch, calendar_name)
    except (ValueError, TypeError, OverflowError) as exc:
        raise InputFileError(path, f"cannot decode times with units '{units}' and calendar "
                                   f"'{calendar_name}': {one_line(exc)}",
                             variable=variable) from exc
    with np.errstate(invalid="ignore"):
        all_days = np.floor(seconds / 86400.0)
        finite = (all_days >= first_day) & (all_days < end_day)  # NaN and inf fail too
    days = all_days[finite]
    remainder_ns = np.round((seconds[finite] - days * 86400.0) * 1e9).astype(np.int64)
    unique_days, inverse = np.unique(days, return_inverse=True)
    try:
        labels = cftime.num2date(unique_days, f"days since {epoch}", calendar=calendar_name,
                                 only_use_cftime_datetimes=True)
        day_ns = np.array([_label_to_datetime64_ns(lab) for lab in np.atleast_1d(labels)],
                          dtype=np.int64)
    except (ValueError, TypeError, OverflowError) as exc:
        raise InputFileError(path, f"cannot decode times with units '{units}' and calendar "
                                   f"'{calendar_name}': {one_line(exc)}",
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
        time = add_seconds(time, broadcast_to_variable(seconds, ds[offset].dims, var, path=path))
    return time


#: the largest magnitude of a ``datetime64[ns]`` as int64 nanoseconds, with a margin for the
#: float64 arithmetic of the test (2^63 - 1 is about 9.223e18)
_LARGEST_NS = 9.2e18


def add_seconds(time, seconds) -> np.ndarray:
    """``time`` (``datetime64[ns]``) plus ``seconds`` (float, broadcast together): NaT where
    either is missing or the sum is outside the ``datetime64[ns]`` range (a per-pixel offset of
    1e19 s is that pixel's ``bad_time``, never an integer overflow to some other date)."""
    time = np.asarray(time, dtype="datetime64[ns]")
    with np.errstate(over="ignore", invalid="ignore"):
        offset_ns = np.round(np.asarray(seconds, dtype=np.float64) * 1e9)
        total = time.view(np.int64).astype(np.float64) + offset_ns
        valid = ~np.isnat(time) & np.isfinite(total) & (np.abs(total) < _LARGEST_NS)
    offset = np.where(valid, offset_ns, 0.0).astype(np.int64)
    summed = time.view(np.int64) + offset
    return np.where(valid, summed, np.datetime64("NaT", "ns").astype(np.int64)).view("datetime64[ns]")


#: words of a name or long_name that mark the start / the end of an interval
_START_WORDS = frozenset(("start", "begin", "beginning", "first", "initial", "t0", "dt0"))
_END_WORDS = frozenset(("end", "stop", "last", "final", "t1", "dt1"))


def _interval_end_of(var: xr.DataArray) -> str | None:
    """"start", "end" or None from the words of the variable's name and long_name."""
    import re

    words = set(re.findall(r"[a-z0-9]+", f"{var.name} {var.attrs.get('long_name', '')}".lower()))
    start, end = bool(words & _START_WORDS), bool(words & _END_WORDS)
    return "start" if start and not end else "end" if end and not start else None


def per_vector_interval(ds: xr.Dataset, name: str, path, nominal=None):
    """(start, end) UTC ``datetime64[ns]`` of every value of ``name`` from two per-value time
    variables, or None when the file has no such pair.

    Candidates are variables on a subset of ``name``'s dimensions that include a dimension of
    more than one value, with time units: absolute (``"<unit> since <epoch>"``, each decoded
    with its own epoch and calendar) or a duration (a ``standard_name = "time"`` variable, or
    one whose long_name speaks of time and whose name or long_name marks a start or an end)
    added to the nominal interval's start or end (``nominal``: (start, end) broadcast to the
    variable).  Which one is the start: the words of its name or long_name (start, begin,
    first, t0 / end, stop, last, t1), else the one earlier at the median.  Only a pair is used;
    more candidates are ambiguous unless exactly two are marked by those words (a per-file
    warning, and the nominal interval stays).  A time variable with ``bounds`` is the nominal
    time, not a candidate.
    """
    from obsprep.readers.cf.quirks import file_warning

    var = ds[name]
    long_dims = {d for d in var.dims if var.sizes[d] > 1}
    candidates = []
    for other in ds.variables:
        v = ds[other]
        if other == name or not set(v.dims) <= set(var.dims) or not set(v.dims) & long_dims \
                or "bounds" in v.attrs:  # a time with bounds is the nominal (central) time
            continue
        units = str(v.attrs.get("units", ""))
        absolute = " since " in units
        # a duration: standard_name time, or a long_name about time marking a start or end
        duration = units.strip().lower() in _SECONDS_PER_UNIT and (
            v.attrs.get("standard_name") == "time"
            or ("time" in str(v.attrs.get("long_name", "")).lower()
                and _interval_end_of(v) is not None))
        if absolute or duration:
            candidates.append((str(other), absolute))
    if len(candidates) < 2:
        return None
    if len(candidates) > 2:
        marked = [c for c in candidates if _interval_end_of(ds[c[0]]) is not None]
        if len(marked) == 2:
            candidates = marked
    if len(candidates) > 2:
        file_warning(f"{len(candidates)} per-value time variables "
                     f"({', '.join(c for c, _ in candidates)}); expected a start and an end; "
                     f"the nominal interval is used", variable=name)
        return None
    ends = [_interval_end_of(ds[c]) for c, _ in candidates]
    if set(ends) != {"start", "end"} and any(not absolute for _, absolute in candidates):
        file_warning(f"per-value time offsets {candidates[0][0]}, {candidates[1][0]}: cannot "
                     f"tell which is the start; the nominal interval is used", variable=name)
        return None
    decoded = []
    for (other, absolute), end in zip(candidates, ends):
        if absolute:
            t = decode_time_variable(ds[other], path)
        else:
            if nominal is None:
                return None
            base = nominal[0 if end == "start" else 1]
            base = np.asarray(base)
            seconds = broadcast_to_variable(values_in_units(ds[other], "s", path), ds[other].dims,
                                            var, path=path)
            decoded.append(add_seconds(base, seconds))
            continue
        decoded.append(np.asarray(broadcast_to_variable(t, ds[other].dims, var, path=path)))
    if set(ends) != {"start", "end"}:
        def median(t):
            ns = t.view(np.int64)[~np.isnat(t)]
            return np.median(ns) if ns.size else 0

        ends = ["start", "end"] if median(decoded[0]) <= median(decoded[1]) else ["end", "start"]
    start = decoded[ends.index("start")]
    end = decoded[ends.index("end")]
    return start, end


def observation_interval(ds: xr.Dataset, name: str, path) -> tuple[np.ndarray, np.ndarray]:
    """(start, end) UTC ``datetime64[ns]`` of every value of ``name``.

    Per-value start and end times (:func:`per_vector_interval`) win over the nominal interval;
    the nominal one is the time variable's CF ``bounds`` (CF 7.1: last dimension of length 2,
    units/calendar of the parent)."""
    nominal = None
    try:
        nominal = _nominal_interval(ds, name, path)
    except InputFileError:
        found = per_vector_interval(ds, name, path)
        if found is None:
            raise
        return found
    found = per_vector_interval(ds, name, path, nominal=nominal)
    return nominal if found is None else found


def _nominal_interval(ds: xr.Dataset, name: str, path) -> tuple[np.ndarray, np.ndarray]:
    """(start, end) from the time variable's CF ``bounds``."""
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
