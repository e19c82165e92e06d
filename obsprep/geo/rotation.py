"""Vector rotation between east/north and the local grid axes, and grid angles computed from
cell centres.

Convention (the same as the CF standard name ``angle_of_rotation_from_east_to_x``): the axis
angle ``a`` of a cell is the angle of the grid's +i direction measured counterclockwise from
local east, in radians.  The +j direction is taken to be 90 degrees counterclockwise from +i
(a right-handed, orthogonal grid).
"""

from __future__ import annotations

import numpy as np

from obsprep.geo.sphere import direction_from_east, ellipsoid_ecef_from_lonlat


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
