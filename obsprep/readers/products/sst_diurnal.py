"""The diurnal-warming guard of the SST readers (no reader of its own).

By day in calm weather the top metres of the sea warm by up to a few kelvin, and skin and subskin
SST show it (GDS 2.0 "SST definitions" [GDS2]); foundation SST and SST at a depth do not.  The
guard, off by default, keeps skin and subskin values only by night (sun below the horizon: solar
zenith angle above 90 degrees from each value's time and position, [NOAASolar], [Spencer1971]),
or also by day where the file's wind speed is at least a threshold (about 6 m/s, common
practice, from memory).  The values it drops are counted as ``diurnal_warming``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from obsprep.geo.solar import is_daytime
from obsprep.model.reasons import register_reason
from obsprep.readers import cf

#: the SST types warmed by day in calm weather: the guard's scope
DIURNAL_WARMING_TYPES = ("sea_surface_skin_temperature", "sea_surface_subskin_temperature")
#: option diurnal_guard: off; night only; night, or day where the wind is at least
#: diurnal_min_wind_speed
DIURNAL_GUARDS = ("off", "night", "night_or_windy")
#: wind speed from which daytime warming is mixed away, m/s (common practice, from memory)
DEFAULT_DIURNAL_MIN_WIND_SPEED = 6.0
#: the GDS 2.0 name of the wind speed of an L2P, used where no variable has standard_name
#: wind_speed
GDS2_WIND_VARIABLE = "wind_speed"

register_reason("diurnal_warming", "skin or subskin SST by day (sun above the horizon) where "
                                   "the diurnal guard keeps night values only, or day values "
                                   "only in wind above its threshold", stage="reader")


def parse_choice(choices):
    """A parser of an option that is one of ``choices``."""
    def parse(name, value) -> str:
        if value not in choices:
            raise ValueError(f"option '{name}' must be one of {', '.join(choices)}, got {value!r}")
        return value
    return parse


def parse_wind_speed(name, value) -> float:
    """A wind speed in m/s, >= 0."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value >= 0:
        raise ValueError(f"option '{name}' must be a wind speed >= 0 in m/s, got {value!r}")
    return float(value)


@dataclass(frozen=True)
class DiurnalGuardOptions(cf.SourceOptions):
    """The guard's options, shared by the SST readers."""

    diurnal_guard: str = cf.option(
        "off", "skin and subskin SST: off (default), night (keep values with the sun below "
               "the horizon only) or night_or_windy (also day values where the file's "
               "wind_speed is at least diurnal_min_wind_speed); others rejected as "
               "diurnal_warming", parse_choice(DIURNAL_GUARDS))
    diurnal_min_wind_speed: float = cf.option(
        DEFAULT_DIURNAL_MIN_WIND_SPEED, "m/s: daytime skin/subskin SST kept at or above this "
                                        "wind speed by diurnal_guard = night_or_windy "
                                        "(default 6)", parse_wind_speed)


def find_wind_speed(ds, name) -> str | None:
    """The wind speed on the dimensions of variable ``name``: a variable with standard_name
    ``wind_speed``, else the GDS 2.0 ``wind_speed`` variable; None without one."""
    dims = set(ds[name].dims)
    for v, var in ds.variables.items():
        if var.attrs.get("standard_name") == "wind_speed" and set(var.dims) <= dims:
            return str(v)
    if GDS2_WIND_VARIABLE in ds.variables and set(ds[GDS2_WIND_VARIABLE].dims) <= dims:
        return GDS2_WIND_VARIABLE
    return None


def diurnal_warming_rejections(ds, name, path, options, quantity, time, lon, lat, warnings,
                               used) -> list:
    """``[(mask, "diurnal_warming")]`` for the values of ``name`` (SST type ``quantity``) the
    guard drops, or ``[]`` (guard off, or a type it does not apply to).

    ``time``, ``lon``, ``lat`` broadcast to the variable's shape; a wind speed (m s-1, a fill
    wind is not windy) is read for ``night_or_windy``; a one-line warning is appended to
    ``warnings`` when the file has no wind, and the wind variable to ``used``."""
    if options.diurnal_guard == "off" or quantity.name not in DIURNAL_WARMING_TYPES:
        return []
    shape = ds[name].shape
    day = is_daytime(np.broadcast_to(time, shape), np.broadcast_to(lon, shape),
                     np.broadcast_to(lat, shape))
    if options.diurnal_guard == "night":
        return [(day, "diurnal_warming")]
    wind_name = find_wind_speed(ds, name)
    if wind_name is None:
        warnings.append("no wind_speed variable: no daytime value passes the diurnal guard "
                        "(rejected as diurnal_warming)")
        return [(day, "diurnal_warming")]
    wind = cf.values_in_units(ds[wind_name], "m s-1", path)
    wind = np.asarray(cf.broadcast_to_variable(wind, ds[wind_name].dims, ds[name], path=path))
    used.append(wind_name)
    if day.any() and not np.isfinite(wind[day]).any():
        warnings.append(f"variable '{wind_name}' is fill wherever it is day: no daytime value "
                        "passes the diurnal guard")
    return [(day & ~(wind >= options.diurnal_min_wind_speed), "diurnal_warming")]
