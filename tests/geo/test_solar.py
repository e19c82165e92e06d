"""Solar zenith angle ([NOAASolar], [Spencer1971]) against facts of the sun's apparent motion."""

from __future__ import annotations

import numpy as np
import pytest

from obsprep.geo.solar import (
    equation_of_time_minutes,
    is_daytime,
    solar_declination,
    solar_zenith_angle,
)

#: obliquity of the ecliptic, about 23.44 degrees in this century (from memory)
OBLIQUITY = 23.44


def t(text):
    return np.datetime64(text, "ns")


def test_declination_at_the_solstices_and_the_equinox():
    # the sun's declination is +-obliquity at the solstices (June 21 and December 21, 2026,
    # from memory) and 0 at the March equinox (2026-03-20 about 14:46 UTC, from memory).  The
    # series describes one mean year of 365 days: over the leap-year cycle the equinox moves
    # by up to about a day against it, and near the equinox the declination changes by
    # 0.4 degree a day, hence 0.5 degree there (flat at the solstices: 0.1)
    assert np.degrees(solar_declination(t("2026-06-21T08:24"))) == pytest.approx(OBLIQUITY, abs=0.1)
    assert np.degrees(solar_declination(t("2026-12-21T20:50"))) == pytest.approx(-OBLIQUITY, abs=0.1)
    assert np.degrees(solar_declination(t("2026-03-20T14:46"))) == pytest.approx(0.0, abs=0.5)


def test_equation_of_time_extremes():
    # about +16.4 min in early November and -14.2 min in mid-February (from memory)
    assert equation_of_time_minutes(t("2026-11-03T12:00")) == pytest.approx(16.4, abs=0.6)
    assert equation_of_time_minutes(t("2026-02-11T12:00")) == pytest.approx(-14.2, abs=0.6)


def test_zenith_at_local_noon_is_latitude_minus_declination():
    # spherical astronomy: at the true solar noon the zenith angle is |lat - declination|
    lon, lat = 40.0, 45.0
    day = t("2026-08-05T00:00")
    eot = float(equation_of_time_minutes(day + np.timedelta64(12, "h") - np.timedelta64(160, "m")))
    noon = day + np.timedelta64(int(round((720.0 - eot - 4.0 * lon) * 60.0)), "s")
    decl = np.degrees(solar_declination(noon))
    assert solar_zenith_angle(noon, lon, lat) == pytest.approx(lat - decl, abs=0.05)
    # an hour before and after: larger and nearly equal (the sun climbs, then sinks)
    hour = np.timedelta64(3600, "s")
    before, after = solar_zenith_angle(noon - hour, lon, lat), solar_zenith_angle(noon + hour, lon, lat)
    assert before > lat - decl + 1 and after == pytest.approx(before, abs=0.1)


def test_sunrise_on_the_equator_at_the_equinox_and_the_polar_day_and_night():
    # equator, equinox: the sun on the horizon at 06:00 local solar time (eqtime ~ -7 min)
    zenith = solar_zenith_angle(t("2026-03-20T06:07"), 0.0, 0.0)
    assert zenith == pytest.approx(90.0, abs=0.5)
    hours = t("2026-06-21T00:00") + np.arange(0, 24 * 3600, 1800) * np.timedelta64(1, "s")
    # north of the Arctic circle: sun up all day at the June solstice (midnight sun) ...
    assert is_daytime(hours, 20.0, 80.0).all()
    # ... and down all day at the December solstice (polar night)
    december = hours + (t("2026-12-21") - t("2026-06-21"))
    assert not is_daytime(december, 20.0, 80.0).any()


def test_missing_time_or_position_is_neither_day_nor_night():
    zenith = solar_zenith_angle(np.array(["NaT", "2026-03-20T12:00"], dtype="datetime64[ns]"),
                                np.array([0.0, np.nan]), 0.0)
    assert np.isnan(zenith).all()
    assert not is_daytime(np.array(["NaT"], dtype="datetime64[ns]"), 0.0, 0.0).any()
