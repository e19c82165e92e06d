"""Where the sun is: the solar zenith angle from UTC time and position.

The NOAA "General Solar Position Calculations" [NOAASolar]: the fractional year
gamma = 2 pi / 365 (day of year - 1 + (hour - 12) / 24) (366 in a leap year), the equation of time
and the solar declination as the Fourier series of [Spencer1971], the true solar time
(UTC minutes + equation of time + 4 min per degree of east longitude), the hour angle
ha = true solar time / 4 - 180 degrees and
cos(zenith) = sin(lat) sin(decl) + cos(lat) cos(decl) cos(ha).
The series describe one mean year, so the declination can be off by up to about half a degree
near the equinoxes (the leap-year cycle moves them by up to a day) and the equation of time by
well under a minute: a few minutes of time at sunrise and sunset, fine for telling day from
night.
"""

from __future__ import annotations

import numpy as np

#: the sun's centre on the geometric horizon; a zenith angle above this is night
NIGHT_ZENITH_DEGREES = 90.0


def _fractional_year(time: np.ndarray) -> np.ndarray:
    """Fractional year gamma (radians) of UTC ``time`` (datetime64)."""
    time = np.asarray(time, dtype="datetime64[ns]")
    year = time.astype("datetime64[Y]")
    day_of_year = (time.astype("datetime64[D]") - year.astype("datetime64[D]")).astype(np.float64) + 1.0
    hours = (time - time.astype("datetime64[D]")).astype(np.float64) / 3.6e12
    days_in_year = ((year + 1).astype("datetime64[D]") - year.astype("datetime64[D]")).astype(np.float64)
    return 2.0 * np.pi / days_in_year * (day_of_year - 1.0 + (hours - 12.0) / 24.0)


def solar_declination(time) -> np.ndarray:
    """Solar declination (radians) at UTC ``time`` (datetime64), [Spencer1971] series."""
    g = _fractional_year(time)
    return (0.006918 - 0.399912 * np.cos(g) + 0.070257 * np.sin(g) - 0.006758 * np.cos(2 * g)
            + 0.000907 * np.sin(2 * g) - 0.002697 * np.cos(3 * g) + 0.00148 * np.sin(3 * g))


def equation_of_time_minutes(time) -> np.ndarray:
    """Equation of time (minutes, apparent minus mean solar time) at UTC ``time``,
    [Spencer1971] series as given in [NOAASolar]."""
    g = _fractional_year(time)
    return 229.18 * (0.000075 + 0.001868 * np.cos(g) - 0.032077 * np.sin(g)
                     - 0.014615 * np.cos(2 * g) - 0.040849 * np.sin(2 * g))


def solar_zenith_angle(time, lon, lat) -> np.ndarray:
    """Solar zenith angle (degrees, 0 overhead, 90 on the horizon, up to 180) at UTC ``time``
    (datetime64) and position ``lon``, ``lat`` (degrees east/north); NaN where the time is NaT
    or the position is not finite.  Arrays broadcast."""
    time = np.asarray(time, dtype="datetime64[ns]")
    lon, lat = np.asarray(lon, dtype=np.float64), np.asarray(lat, dtype=np.float64)
    valid = ~np.isnat(time)
    safe_time = np.where(valid, time, np.datetime64("2000-01-01", "ns"))
    minutes = (safe_time - safe_time.astype("datetime64[D]")).astype(np.float64) / 6.0e10
    true_solar_minutes = minutes + equation_of_time_minutes(safe_time) + 4.0 * lon
    hour_angle = np.radians(true_solar_minutes / 4.0 - 180.0)
    decl = solar_declination(safe_time)
    phi = np.radians(lat)
    cos_zenith = np.sin(phi) * np.sin(decl) + np.cos(phi) * np.cos(decl) * np.cos(hour_angle)
    zenith = np.degrees(np.arccos(np.clip(cos_zenith, -1.0, 1.0)))
    return np.where(valid & np.isfinite(lon) & np.isfinite(lat), zenith, np.nan)


def is_daytime(time, lon, lat) -> np.ndarray:
    """True where the sun's centre is above the horizon (zenith angle below
    :data:`NIGHT_ZENITH_DEGREES`); False at night and where time or position is missing."""
    zenith = solar_zenith_angle(time, lon, lat)
    return np.isfinite(zenith) & (zenith < NIGHT_ZENITH_DEGREES)
