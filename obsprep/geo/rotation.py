"""Vector rotation between east/north and the local grid axes, and grid angles computed from
cell centres.

Convention, the one used everywhere in obsprep (the same as the CF standard name
``angle_of_rotation_from_east_to_x``): the angle of a direction is measured counterclockwise
from local east, in radians.  For a model grid, the axis angle ``a`` of a cell is the angle of
its +i direction, and +j is taken to be 90 degrees counterclockwise from +i (a right-handed,
orthogonal grid).  For a map projection's axes, where x and y need not be perpendicular on the
Earth, both angles are kept (:func:`projection_axis_angles`).
"""

from __future__ import annotations

import numpy as np

from obsprep.geo.sphere import (
    WGS84_FLATTENING,
    WGS84_SEMI_MAJOR_AXIS_M,
    direction_from_east,
    ellipsoid_ecef_from_lonlat,
)


def east_north_to_grid(u_east, v_north, angle):
    """Rotate east/north vector components onto grid axes whose +i axis is at ``angle``.

    .. math:: u_x = u \\cos a + v \\sin a, \\qquad v_y = -u \\sin a + v \\cos a

    (the standard rotation of axes by ``a`` counterclockwise, e.g. Boas, *Mathematical Methods
    in the Physical Sciences*, ch. 3; from memory).  ``u_east``, ``v_north`` in any common unit;
    ``angle`` in radians.  Returns ``(u_x, v_y)`` in the same unit; the length is preserved.
    """
    cos_a = np.cos(angle)
    sin_a = np.sin(angle)
    u_east = np.asarray(u_east, dtype=float)
    v_north = np.asarray(v_north, dtype=float)
    return u_east * cos_a + v_north * sin_a, -u_east * sin_a + v_north * cos_a


def grid_to_east_north(u_x, v_y, angle):
    """Inverse of :func:`east_north_to_grid`: grid components back to east/north.

    .. math:: u = u_x \\cos a - v_y \\sin a, \\qquad v = u_x \\sin a + v_y \\cos a
    """
    cos_a = np.cos(angle)
    sin_a = np.sin(angle)
    u_x = np.asarray(u_x, dtype=float)
    v_y = np.asarray(v_y, dtype=float)
    return u_x * cos_a - v_y * sin_a, u_x * sin_a + v_y * cos_a


def axis_angle_from_centres(lon, lat) -> np.ndarray:
    """Axis angle (radians) of a logically rectangular grid from its 2-D cell centres.

    ``lon``, ``lat``: geodetic degrees (WGS 84), shape (ny, nx) with i the last axis, nx >= 2.
    The +i direction at cell (j, i) is the chord between the Earth-centred positions of the
    centres (j, i-1) and (j, i+1) (centred difference, second-order accurate; at the first and
    last column the second-order one-sided difference ``-3 r_0 + 4 r_1 - r_2``, first-order when
    nx = 2), and its angle from east follows from its components on the local east and north
    unit vectors (:func:`obsprep.geo.sphere.direction_from_east`).  Working with Earth-centred
    positions on the ellipsoid avoids any trouble at the dateline and the poles and matches the
    angles of conformal map projections on the ellipsoid.
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    r = ellipsoid_ecef_from_lonlat(lon, lat)
    d = np.empty_like(r)
    d[:, 1:-1] = r[:, 2:] - r[:, :-2]
    if r.shape[1] >= 3:
        # second-order one-sided differences keep the edge columns as accurate as the interior
        d[:, 0] = -3.0 * r[:, 0] + 4.0 * r[:, 1] - r[:, 2]
        d[:, -1] = 3.0 * r[:, -1] - 4.0 * r[:, -2] + r[:, -3]
    else:
        d[:, 0] = r[:, 1] - r[:, 0]
        d[:, -1] = r[:, -1] - r[:, -2]
    return direction_from_east(lon, lat, d)


def crs_ellipsoid(crs) -> tuple[float, float]:
    """(semi-major axis m, flattening) of a pyproj CRS's ellipsoid (WGS 84 if it has none)."""
    ellipsoid = crs.ellipsoid
    if ellipsoid is None:
        return WGS84_SEMI_MAJOR_AXIS_M, WGS84_FLATTENING
    inverse_flattening = ellipsoid.inverse_flattening
    flattening = 0.0 if not inverse_flattening else 1.0 / inverse_flattening
    return ellipsoid.semi_major_metre, flattening


def projection_axis_angle(to_lonlat, x, y, step, axis, ellipsoid, centre=None) -> np.ndarray:
    """Angle (radians, counterclockwise from local east) of a map projection's +x (``axis``
    "x") or +y ("y") direction at projected points ``(x, y)``.

    ``to_lonlat(x, y) -> (lon, lat)`` is the inverse projection (degrees).  The points
    ``P -+ step`` along the axis are placed on the ellipsoid (``(a, f)``) in Earth-centred
    coordinates; their difference, resolved on local east and north
    (:func:`obsprep.geo.sphere.direction_from_east`), is the axis direction: a centred
    difference, whose error is second order, about (step/R)^2 rad.  ``step`` in the
    projection's units (m).  On a conformal projection the +y angle is pi/2 minus the meridian
    convergence PROJ reports (true north to grid north, clockwise positive).  ``centre``:
    the (lon, lat) of the points when already known.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    dx, dy = (step, 0.0) if axis == "x" else (0.0, step)
    lon, lat = to_lonlat(x, y) if centre is None else centre
    lon_ahead, lat_ahead = to_lonlat(x + dx, y + dy)
    lon_behind, lat_behind = to_lonlat(x - dx, y - dy)
    displacement = (ellipsoid_ecef_from_lonlat(lon_ahead, lat_ahead, *ellipsoid)
                    - ellipsoid_ecef_from_lonlat(lon_behind, lat_behind, *ellipsoid))
    return direction_from_east(lon, lat, displacement)


def projection_axis_angles(crs, lon, lat, step=100.0) -> tuple[np.ndarray, np.ndarray]:
    """Angles (radians, counterclockwise from local east) of the +x and +y axes of map
    projection ``crs`` (a pyproj CRS) at geodetic ``lon``, ``lat`` (degrees), by
    :func:`projection_axis_angle` with ``step`` m.  The default 100 m balances the
    micrometre noise of PROJ's iterative inverse projections (larger for shorter steps)
    against the second-order error of the centred difference (larger for longer ones):
    at most 5e-12 rad on EPSG:3413 from 61 to 89 degrees north, against 2e-9 rad at 1 m and
    7e-10 rad at 1 km (measured against the polar stereographic meridian geometry)."""
    import pyproj

    forward = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    inverse = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    x, y = forward.transform(lon, lat)
    ellipsoid = crs_ellipsoid(crs)
    return tuple(projection_axis_angle(inverse.transform, x, y, step, axis, ellipsoid,
                                       centre=(lon, lat)) for axis in ("x", "y"))


def projection_to_east_north(u, v, angle_x, angle_y, sigma_u=None, sigma_v=None):
    r"""East/north components of a vector given along a map projection's axes.

    With the vector ``u e_x + v e_y`` and the axes at angles ``angle_x``, ``angle_y`` from east
    (:func:`projection_axis_angles`):

    .. math:: east = u \cos a_x + v \cos a_y, \qquad north = u \sin a_x + v \sin a_y

    For perpendicular axes (``a_y = a_x + pi/2``) this is :func:`grid_to_east_north`.  Errors
    ``sigma_u``, ``sigma_v`` (same units) propagate as for independent component errors,
    ``sigma_east^2 = (sigma_u cos a_x)^2 + (sigma_v cos a_y)^2`` and likewise north with sines
    (common practice).  Returns ``(east, north)``, or ``(east, north, sigma_east,
    sigma_north)`` when errors are given.
    """
    cos_x, sin_x = np.cos(angle_x), np.sin(angle_x)
    cos_y, sin_y = np.cos(angle_y), np.sin(angle_y)
    east = u * cos_x + v * cos_y
    north = u * sin_x + v * sin_y
    if sigma_u is None and sigma_v is None:
        return east, north
    sigma_u = np.full(np.shape(u), np.nan) if sigma_u is None else sigma_u
    sigma_v = np.full(np.shape(v), np.nan) if sigma_v is None else sigma_v
    return (east, north, np.hypot(sigma_u * cos_x, sigma_v * cos_y),
            np.hypot(sigma_u * sin_x, sigma_v * sin_y))


def projection_scale_factor(crs, lon, lat) -> np.ndarray:
    """Point scale factor k (dimensionless) of map projection ``crs`` (a pyproj CRS) at
    geodetic ``lon``, ``lat`` (degrees): map distance / ground distance, from PROJ's
    ``pyproj.Proj.get_factors``.  On a conformal projection (polar stereographic, Lambert
    conformal, Mercator) the meridional and parallel scales are equal and this is k; on another
    projection it is their geometric mean, an approximation good enough for errors only."""
    import pyproj

    factors = pyproj.Proj(crs).get_factors(np.asarray(lon, dtype=np.float64),
                                           np.asarray(lat, dtype=np.float64))
    return np.sqrt(np.asarray(factors.meridional_scale) * np.asarray(factors.parallel_scale))


def map_displacement_to_east_north(crs, lon, lat, dx, dy) -> tuple[np.ndarray, np.ndarray]:
    """Ground east/north displacement (m) of a vector given as differences ``dx``, ``dy`` of
    projected coordinates (m, map units of ``crs``) from the start position ``lon``, ``lat``
    (degrees).

    The end position is the start's projected point plus ``(dx, dy)``, projected back; the
    geodesic from start to end on the CRS's ellipsoid (``pyproj.Geod.inv``) gives the ground
    length s and the forward azimuth z at the start (clockwise from north), and the result is
    ``(s sin z, s cos z)``: the displacement's ground length, pointing along the start of the
    geodesic.  This applies the map scale factor exactly, including its change along the
    vector (a distance on a conformal map is the ground distance times k; [Snyder1987], from
    memory).  Missing (non-finite) inputs give missing outputs.
    """
    import pyproj

    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    dx = np.asarray(dx, dtype=np.float64)
    dy = np.asarray(dy, dtype=np.float64)
    forward = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    inverse = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    finite = np.isfinite(dx) & np.isfinite(dy) & np.isfinite(lon) & np.isfinite(lat)
    x, y = forward.transform(lon, lat)
    end_lon, end_lat = inverse.transform(np.where(finite, x + dx, x), np.where(finite, y + dy, y))
    azimuth, _, length = crs.get_geod().inv(lon, lat, end_lon, end_lat)
    azimuth = np.radians(np.asarray(azimuth, dtype=np.float64))
    length = np.asarray(length, dtype=np.float64)
    east = np.where(finite, length * np.sin(azimuth), np.nan)
    north = np.where(finite, length * np.cos(azimuth), np.nan)
    return east, north
