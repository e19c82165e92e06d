"""Pair sums of distance-dependent error correlation within error groups.

Raw values of one error group (one satellite pass, one granule, one profile) that fall into one
super-observation have correlated errors.  Here two raw values i, j of the same group are
correlated with

.. math:: \\rho_{ij} = \\rho_0 \\exp(-d_{ij} / L)

(an exponential correlation model, common practice), d_ij the great-circle distance between
them on the mean-radius sphere and L a length scale.  The variance of a mean needs, per group,
the sum over pairs i != j of w_i w_j rho_ij for the weights of that mean; this module computes
two such sums at once in one pass over each group's pairs.

The pair loop is compiled with numba, imported on first use only, so that importing obsprep does
not pay numba's import time.  numba's on-disk cache is kept next to this file when its
``__pycache__`` is writable and otherwise in the user's cache directory
(``$XDG_CACHE_HOME/numba``, by default ``~/.cache/numba``), numba's own fallback;
``NUMBA_CACHE_DIR``, when the user sets it, takes precedence.  When no cache directory is
writable at all the kernel is compiled in memory for each process, with a warning.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from obsprep.geo.sphere import EARTH_MEAN_RADIUS_M

#: how far the squared norm of a unit vector may be from 1: float64 unit vectors from
#: longitude and latitude are within a few 1e-16; degrees or metres passed by mistake are not
_UNIT_NORM_TOLERANCE = 1e-9


def within_group_pair_sums(order, starts, x, y, z, a, b, rho0, length_m):
    """Per error group, the sums over ordered pairs i != j of a_i a_j rho_ij and b_i b_j rho_ij.

    .. math::
        P^a_g = \\sum_{i \\ne j \\in g} a_i a_j \\rho_{ij}, \\quad
        P^b_g = \\sum_{i \\ne j \\in g} b_i b_j \\rho_{ij}, \\quad
        \\rho_{ij} = \\rho_0 \\exp(-d_{ij} / L), \\quad
        d_{ij} = 2 R \\arcsin(\\lVert u_i - u_j \\rVert / 2)

    with u the unit vectors of the rows and R = ``EARTH_MEAN_RADIUS_M`` (6371008.8 m,
    [Moritz2000]); the chord-to-arc relation is plane geometry of a circle.  Each unordered pair
    is visited once and counted twice (rho is symmetric).  With a_i = sigma_i the variance of
    the equally weighted mean of a group's n values is (sum sigma_i^2 + P^a) / n^2; with
    b_i = 1 / sigma_i that of the inverse-variance weighted mean is (sum w_i + P^b) / W^2,
    w_i = 1 / sigma_i^2, W = sum w_i.

    Parameters
    ----------
    order : array_like of int
        Row indices putting the rows of each group together (each row at most once), as the
        ``order`` of :func:`obsprep.superobs.accumulate._group_index`.
    starts : array_like of int
        Position in ``order`` where each group begins: strictly increasing, first 0; group g is
        ``order[starts[g]:starts[g + 1]]``, the last group runs to the end of ``order``.
    x, y, z : array_like of float
        Unit vectors of the rows (dimensionless), e.g. from
        :func:`obsprep.superobs.spherical.unit_vectors`.
    a, b : array_like of float
        Two weights per row, in any units (for instance a = sigma in the value's units and
        b = 1 / sigma); the sums come out in the squared units.
    rho0 : float
        Correlation of two values at zero distance, 0..1 (dimensionless).
    length_m : float
        Length scale L in metres, > 0 (``math.inf`` gives the constant correlation rho0).

    Returns
    -------
    pair_a, pair_b : numpy.ndarray
        float64, one value per group (len(starts)); 0 for a group of one row.
    """
    order, starts, columns = _checked_inputs(order, starts, x, y, z, a, b)
    rho0, length_m = _checked_correlation(rho0, length_m)
    if len(starts) == 0:
        return np.zeros(0), np.zeros(0)
    kernel = _compiled_pair_sums()
    return kernel(order, starts, *columns, rho0, length_m, EARTH_MEAN_RADIUS_M)


def _checked_correlation(rho0, length_m):
    rho0 = float(rho0)
    length_m = float(length_m)
    if not 0.0 <= rho0 <= 1.0:
        raise ValueError(f"rho0 must be a correlation in [0, 1], got {rho0!r}")
    if not length_m > 0.0:
        raise ValueError(f"length_m must be a length scale > 0 metres, got {length_m!r}")
    return rho0, length_m


def _checked_inputs(order, starts, x, y, z, a, b):
    """Arrays in the kernel's types, checked so that the compiled loop (which does no bounds
    checks) reads only valid rows and finite numbers."""
    order = _integer_array("order", order)
    starts = _integer_array("starts", starts)
    names = ("x", "y", "z", "a", "b")
    columns = [np.ascontiguousarray(np.asarray(v, dtype=np.float64)) for v in (x, y, z, a, b)]
    n_rows = len(columns[0])
    for name, column in zip(names, columns):
        if column.ndim != 1 or len(column) != n_rows:
            raise ValueError(f"{name} must be a 1-D array of {n_rows} rows (as x), got shape {column.shape}")
        if not np.all(np.isfinite(column)):
            raise ValueError(f"{name} must be finite, got {np.count_nonzero(~np.isfinite(column))} non-finite values")
    squared_norm = columns[0] ** 2 + columns[1] ** 2 + columns[2] ** 2
    if n_rows and np.max(np.abs(squared_norm - 1.0)) > _UNIT_NORM_TOLERANCE:
        raise ValueError("x, y, z must be unit vectors (x^2 + y^2 + z^2 = 1), got squared norms "
                         f"from {squared_norm.min():.6g} to {squared_norm.max():.6g}")
    if len(order) and (order.min() < 0 or order.max() >= n_rows):
        raise ValueError(f"order must hold row indices in 0..{n_rows - 1}, got {order.min()}..{order.max()}")
    if len(np.unique(order)) != len(order):
        raise ValueError("order must list each row at most once, got repeated row indices")
    if len(starts):
        if starts[0] != 0:
            raise ValueError(f"starts must begin with 0, got {starts[0]}")
        if np.any(np.diff(starts) <= 0) or starts[-1] >= len(order):
            raise ValueError(f"starts must increase strictly and stay below len(order) = {len(order)}")
    elif len(order):
        raise ValueError(f"starts is empty but order has {len(order)} rows")
    return order, starts, columns


def _integer_array(name, values):
    array = np.asarray(values)
    if array.ndim != 1 or not (np.issubdtype(array.dtype, np.integer) or array.size == 0):
        raise ValueError(f"{name} must be a 1-D integer array, got {array.dtype} of shape {array.shape}")
    return np.ascontiguousarray(array, dtype=np.intp)


def _pair_sums_loop(order, starts, x, y, z, a, b, rho0, length_m, radius_m):
    """The pair loop (plain Python; compiled by :func:`_compiled_pair_sums`).

    For row i the inner sums over j > i of a_j rho_ij and b_j rho_ij share one distance and one
    exponential; scaled by a_i and b_i they add up to the group's sums over i < j.

    Within a super-observation the points are close, and there the first six terms of the
    series asin h = h + h^3/6 + 3 h^5/40 + 5 h^7/112 + 35 h^9/1152 + 63 h^11/2816 + ...
    ([AbramowitzStegun1964] 4.4.40, from memory) are cheaper than the library call: the first
    term left out, 231 h^13 / 13312, is below 5e-18 of the sum for h < 0.05.
    """
    n_groups = len(starts)
    pair_a = np.zeros(n_groups)
    pair_b = np.zeros(n_groups)
    # d / L = (2 R / L) asin(chord / 2)
    arc_per_length = 2.0 * radius_m / length_m
    for g in range(n_groups):
        begin = starts[g]
        end = starts[g + 1] if g + 1 < n_groups else len(order)
        sum_a = 0.0
        sum_b = 0.0
        for p in range(begin, end - 1):
            i = order[p]
            xi, yi, zi = x[i], y[i], z[i]
            row_a = 0.0
            row_b = 0.0
            for q in range(p + 1, end):
                j = order[q]
                dx = xi - x[j]
                dy = yi - y[j]
                dz = zi - z[j]
                half_chord = 0.5 * math.sqrt(dx * dx + dy * dy + dz * dz)
                if half_chord < _SERIES_HALF_CHORD:
                    h2 = half_chord * half_chord
                    half_angle = half_chord * (1.0 + h2 * (1.0 / 6.0 + h2 * (3.0 / 40.0 + h2 * (
                        5.0 / 112.0 + h2 * (35.0 / 1152.0 + h2 * (63.0 / 2816.0))))))
                else:
                    # rounding can put two antipodal unit vectors a hair over 2 apart
                    half_angle = math.asin(min(half_chord, 1.0))
                decay = math.exp(-arc_per_length * half_angle)
                row_a += a[j] * decay
                row_b += b[j] * decay
            sum_a += a[i] * row_a
            sum_b += b[i] * row_b
        pair_a[g] = 2.0 * rho0 * sum_a
        pair_b[g] = 2.0 * rho0 * sum_b
    return pair_a, pair_b


#: below this half chord (a distance of about 637 km) the pair loop sums the arcsine's series
_SERIES_HALF_CHORD = 0.05


@functools.cache
def _compiled_pair_sums():
    """The compiled pair loop, built (or loaded from numba's on-disk cache) on first call."""
    from obsprep.compiled import compile_cached

    return compile_cached(_pair_sums_loop, "obsprep.superobs.pairs (the pair kernel)", nogil=True, error_model="numpy")[0]
