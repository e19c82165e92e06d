"""Geometry on the sphere shared by the grid classes: longitude wrapping, unit vectors and
great-circle distances."""

from __future__ import annotations

import numpy as np

#: Mean radius R1 = (2a + b) / 3 of the GRS 80 / WGS 84 ellipsoid, m
#: ([Moritz2000], "Geodetic Reference System 1980", J. Geodesy 74, 128-133; from memory).
EARTH_MEAN_RADIUS_M = 6_371_008.8


#: the largest longitude magnitude (degrees) taken as a longitude at all: files encode
#: longitudes in [-180, 180], [0, 360] or, rarely, unwrapped over a second turn; anything
#: beyond two turns is not a position (common practice)
PLAUSIBLE_LONGITUDE_DEGREES = 720.0


def wrap_longitude(lon):
    """Longitude in degrees wrapped into [-180, 180): ((lon + 180) mod 360) - 180, float64.

    NaN stays NaN; +-inf and any ``|lon| >`` :data:`PLAUSIBLE_LONGITUDE_DEGREES` become NaN (a
    bad position, rejected later as such), so that 1e300 is not wrapped onto some meridian.
    """
    lon = np.asarray(lon, dtype=np.float64)
    if lon.size and -180.0 <= lon.min() and lon.max() < 180.0:  # NaN fails this: the slow way
        return lon  # already in range (the common case): no modulo per value
    with np.errstate(invalid="ignore"):
        wrapped = (lon + 180.0) % 360.0 - 180.0
        implausible = ~(np.abs(lon) <= PLAUSIBLE_LONGITUDE_DEGREES)
    # (x % 360) can round up to 360 for tiny negative x; keep the half-open interval
    wrapped = np.where(wrapped >= 180.0, wrapped - 360.0, wrapped)
    return np.where(implausible, np.nan, wrapped)


def unit_vectors_from_lonlat(lon, lat):
    """Earth-centred unit vectors (x, y, z) stacked on a last axis of length 3.

    ``lon``, ``lat`` in degrees; x points to (0 E, 0 N), y to (90 E, 0 N), z to the north pole.
    Sines and cosines by :func:`cos_sin_degrees`.
    """
    return np.stack(unit_vector_components(lon, lat), axis=-1)


def unit_vector_components(lon, lat):
    """The three components of :func:`unit_vectors_from_lonlat` as separate arrays:
    x = cos(lat) cos(lon), y = cos(lat) sin(lon), z = sin(lat)."""
    cos_lon, sin_lon = cos_sin_degrees(np.asarray(lon, dtype=np.float64))
    cos_lat, sin_lat = cos_sin_degrees(np.asarray(lat, dtype=np.float64))
    return cos_lat * cos_lon, cos_lat * sin_lon, sin_lat


_HALF_DEGREE_IN_RADIANS = np.pi / 360.0


def half_angle_tangent(angle, out=None):
    """``tan(angle / 2)`` of ``angle`` in degrees (dimensionless), the ``t`` of
    :func:`cos_sin_degrees`, into ``out`` when given."""
    half_tangent = np.multiply(angle, _HALF_DEGREE_IN_RADIANS, out=out)
    return np.tan(half_tangent, out=half_tangent)


def cos_sin_degrees(angle, cos_out=None, sin_out=None):
    """(cos, sin) of ``angle`` (degrees) from the tangent of the half angle.

    .. math:: t = \\tan(\\alpha / 2), \\quad \\cos\\alpha = \\frac{2}{1 + t^2} - 1,
              \\quad \\sin\\alpha = \\frac{2 t}{1 + t^2}

    (the tangent half-angle identities, any trigonometry handbook): one transcendental function
    instead of two, as accurate (a few units in the last place), and periodic in 360 degrees,
    so any longitude range works.  At exactly +-180 degrees ``t`` is about 1.6e16 and the
    identities still give cos = -1, sin ~ 1e-16.  ``cos_out`` and ``sin_out`` (arrays like
    ``angle``, optional) receive the results.
    """
    half_tangent = half_angle_tangent(angle, out=sin_out)
    # 2 / (1 + t^2), then cos = 2 / (1 + t^2) - 1 and sin = t * 2 / (1 + t^2)
    cos_angle = np.multiply(half_tangent, half_tangent, out=cos_out)
    cos_angle += 1.0
    np.divide(2.0, cos_angle, out=cos_angle)
    sin_angle = np.multiply(half_tangent, cos_angle, out=half_tangent)
    cos_angle -= 1.0
    return cos_angle, sin_angle


def great_circle_distance(lon1, lat1, lon2, lat2, radius=EARTH_MEAN_RADIUS_M):
    """Great-circle distance in m between points given in degrees, on a sphere of ``radius`` m.

    Haversine formula ([Sinnott1984], "Virtues of the haversine", Sky and Telescope 68(2), 159;
    from memory), accurate for small and large separations alike:

    .. math:: d = 2 R \\arcsin\\sqrt{\\sin^2\\frac{\\Delta\\varphi}{2}
              + \\cos\\varphi_1 \\cos\\varphi_2 \\sin^2\\frac{\\Delta\\lambda}{2}}

    On the mean sphere this differs from the WGS 84 geodesic by -0.45 % to +0.56 % (the ratio
    of R to the extreme radii of curvature, polar a / sqrt(1 - e^2) and equatorial meridional
    a (1 - e^2)), ample for thinning and super-observation footprints.  NaN in, NaN out.
    """
    lat1_rad = np.radians(lat1)
    lat2_rad = np.radians(lat2)
    half_dlat = 0.5 * (lat2_rad - lat1_rad)
    half_dlon = 0.5 * np.radians(np.asarray(lon2, dtype=float) - np.asarray(lon1, dtype=float))
    h = np.sin(half_dlat) ** 2 + np.cos(lat1_rad) * np.cos(lat2_rad) * np.sin(half_dlon) ** 2
    return 2.0 * radius * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))


#: WGS 84 ellipsoid: semi-major axis a in m and flattening f (NIMA TR8350.2; from memory)
WGS84_SEMI_MAJOR_AXIS_M = 6_378_137.0
WGS84_FLATTENING = 1.0 / 298.257223563


def ellipsoid_ecef_from_lonlat(lon, lat, semi_major_axis=WGS84_SEMI_MAJOR_AXIS_M,
                               flattening=WGS84_FLATTENING):
    """Earth-centred Cartesian coordinates (m, last axis x, y, z) of points on the ellipsoid.

    ``lon``, ``lat`` geodetic, degrees.  With the prime-vertical radius
    ``N = a / sqrt(1 - e^2 sin^2 lat)`` and ``e^2 = f (2 - f)``:

    .. math:: X = N \\cos\\varphi \\cos\\lambda,\\quad Y = N \\cos\\varphi \\sin\\lambda,\\quad
              Z = N (1 - e^2) \\sin\\varphi

    (Hofmann-Wellenhof, Lichtenegger & Wasle, *GNSS*, 2008, sect. 2.2.2; from memory).
    """
    e2 = flattening * (2.0 - flattening)
    lon_rad = np.radians(lon)
    lat_rad = np.radians(lat)
    sin_lat = np.sin(lat_rad)
    cos_lat = np.cos(lat_rad)
    prime_vertical = semi_major_axis / np.sqrt(1.0 - e2 * sin_lat ** 2)
    return np.stack([prime_vertical * cos_lat * np.cos(lon_rad),
                     prime_vertical * cos_lat * np.sin(lon_rad),
                     prime_vertical * (1.0 - e2) * sin_lat], axis=-1)


def direction_from_east(lon, lat, displacement):
    """Angle in radians, counterclockwise from local east, of Earth-centred ``displacement``
    vectors (last axis x, y, z) at geodetic (``lon``, ``lat``) in degrees.

    The displacement is projected on the local east and north unit vectors of the ellipsoid
    (normal-based, so geodetic latitude), ``e = (-sin lon, cos lon, 0)`` and
    ``n = (-sin lat cos lon, -sin lat sin lon, cos lat)``:
    ``angle = atan2(d . n, d . e)``.
    """
    lon_rad = np.radians(lon)
    lat_rad = np.radians(lat)
    sin_lon, cos_lon = np.sin(lon_rad), np.cos(lon_rad)
    sin_lat, cos_lat = np.sin(lat_rad), np.cos(lat_rad)
    east = -sin_lon * displacement[..., 0] + cos_lon * displacement[..., 1]
    north = (-sin_lat * cos_lon * displacement[..., 0] - sin_lat * sin_lon * displacement[..., 1]
             + cos_lat * displacement[..., 2])
    return np.arctan2(north, east)
