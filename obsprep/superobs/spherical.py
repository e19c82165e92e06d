"""Mean positions on the sphere.

Longitude cannot be averaged as a number: the mean of 179.9 and -179.9 degrees east is 180, not
0.  Each position is turned into a unit vector from the centre of the Earth, the vectors are
summed (sums are mergeable), and the direction of the sum is the mean position.  For two points
this direction is the great-circle midpoint; it is well defined across the dateline and at the
poles, and undefined only when the vectors cancel (points spread evenly around a great circle).

The Earth is treated as a sphere here; for points within one model grid cell the difference from
the ellipsoid is far below the cell size.
"""

from __future__ import annotations

import numpy as np

from obsprep.geo.sphere import unit_vector_components


def unit_vectors(lon, lat):
    """Unit vectors (x, y, z) of positions on the unit sphere.

    .. math::
        x = \\cos\\varphi \\cos\\lambda, \\quad y = \\cos\\varphi \\sin\\lambda, \\quad
        z = \\sin\\varphi

    (spherical to Cartesian coordinates, any geometry textbook); sines and cosines by
    :func:`obsprep.geo.sphere.cos_sin_degrees` (tangent half-angle identities); the same as
    :func:`obsprep.geo.sphere.unit_vector_components`.

    Parameters
    ----------
    lon : array_like
        Longitude lambda, degrees east (any range; 190 and -170 give the same vector).
    lat : array_like
        Latitude phi, degrees north, -90..90.

    Returns
    -------
    x, y, z : numpy.ndarray
        Dimensionless components; x points to (0 N, 0 E), y to (0 N, 90 E), z to the North Pole.
    """
    return unit_vector_components(lon, lat)


def mean_position(sum_x, sum_y, sum_z):
    """Mean position of points from the sum of their unit vectors.

    .. math::
        \\bar\\lambda = \\operatorname{atan2}(\\textstyle\\sum y, \\sum x), \\quad
        \\bar\\varphi = \\operatorname{atan2}\\big(\\textstyle\\sum z,
        \\sqrt{(\\sum x)^2 + (\\sum y)^2}\\big)

    i.e. the direction of the resultant vector, the "mean direction" of directional statistics
    ([MardiaJupp2000], *Directional Statistics*, Wiley 2000, chapter on spherical data; from
    memory).  ``atan2`` for latitude keeps
    full precision near the poles, where ``arcsin`` of the normalised z would not.

    Parameters
    ----------
    sum_x, sum_y, sum_z : array_like
        Sums of unit vectors from :func:`unit_vectors` (dimensionless).  Only the direction
        matters, so means or sums over any number of points may be passed.

    Returns
    -------
    lon : numpy.ndarray
        Degrees east in -180..180 (both ends possible for a point on the dateline).  At a pole,
        where longitude is undefined, 0 (or 180) is returned.
    lat : numpy.ndarray
        Degrees north, -90..90.

    Where the resultant is exactly zero both are NaN: the mean direction does not exist.
    """
    sum_x = np.asarray(sum_x, dtype=np.float64)
    sum_y = np.asarray(sum_y, dtype=np.float64)
    sum_z = np.asarray(sum_z, dtype=np.float64)
    horizontal = np.hypot(sum_x, sum_y)
    lon = np.degrees(np.arctan2(sum_y, sum_x))
    lat = np.degrees(np.arctan2(sum_z, horizontal))
    undefined = (horizontal == 0.0) & (sum_z == 0.0)
    if np.any(undefined):
        lon = np.where(undefined, np.nan, lon)
        lat = np.where(undefined, np.nan, lat)
    return lon, lat
