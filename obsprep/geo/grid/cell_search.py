"""Compiled first step of the curvilinear cell search: lookup-table guess and the four pieces.

:class:`obsprep.geo.grid.curvilinear.CurvilinearGrid` finds the cell of a position in three
steps (its module docstring): (1) a first guess of the nearest centre from a lookup table and
the four bilinear pieces around it, (2) the pieces around the KD-tree's nearest centres for what
(1) misses, (3) slivers between pieces.  Step (1) places nearly every position; done in numpy
it makes a dozen passes over full-size temporaries per try.  :func:`table_search` does step (1)
for each position in one compiled pass, with the same arithmetic in the same order as the numpy
code (IEEE-754 double operations, no reassociation, no fused multiply-add), so the cells, the
near misses and the positions left for step (2) are bit for bit those of the numpy path.

Transcendental functions are not evaluated in the kernel: numpy and the compiled code may use
different libraries for them (differing in the last bit).  The tangents of the positions' half
angles, from which the kernel computes their unit vectors, come in from numpy; so do the polar
stereographic coordinates a piece in a polar cap needs, computed beforehand for the positions
near a cap and on request (status :data:`NEEDS_NORTH` / :data:`NEEDS_SOUTH`) for the others.

The kernel is compiled with numba, imported on first use only, so that importing obsprep does
not import numba.  numba's on-disk cache is kept next to this file when its ``__pycache__`` is
writable and otherwise in the user's cache directory (``$XDG_CACHE_HOME/numba``, by default
``~/.cache/numba``), numba's own fallback; ``NUMBA_CACHE_DIR``, when set, takes precedence.
When no cache directory is writable at all the kernel is compiled in memory for each process,
with a warning.
"""

from __future__ import annotations

import functools
import math
from typing import NamedTuple

import numpy as np

#: status of a position after :func:`table_search`
FOUND = 0
#: the four pieces around the guessed centre were tried, none holds the position (step 2)
PENDING = 1
#: outside the lookup table or on the far side of the sphere: outside the grid
OUTSIDE = 2
#: a tried piece lies in the northern (southern) polar cap and the position's polar
#: stereographic coordinates about that pole were not given: call again with them
NEEDS_NORTH = 3
NEEDS_SOUTH = 4


class SearchTables(NamedTuple):
    """A grid's search tables in the kernel's layout (built once by :func:`search_tables`).

    ``basis`` (3, 3), ``x0``, ``y0``, ``inverse_size``: the stereographic plane and its bins
    (1 / bin size, in bins per plane unit); ``table`` (nby, nbx) int32 flat centre per bin;
    ``centres`` (ncells, 8): plane x, y of each centre, its differences along +i and +j
    (x, y each), its j and i; ``pieces`` (npieces, width): e, f, g, p00 (x, y each) of each
    bilinear piece, and at ``reference_column`` its reference longitude (degrees);
    ``hemisphere`` (npieces,) int8: +1 / -1 for a piece in the northern / southern polar cap,
    else 0.  Rows of ``centres`` and ``pieces`` start on 64-byte boundaries: one cache line
    per row (two for the wide layout).
    """

    basis: np.ndarray
    x0: float
    y0: float
    inverse_size: float
    table: np.ndarray
    centres: np.ndarray
    pieces: np.ndarray
    reference_column: int
    hemisphere: np.ndarray
    nx: int
    ny: int


def search_tables(lookup, piece_table, nx, ny) -> SearchTables:
    """:class:`SearchTables` from ``CurvilinearGrid._lookup`` (basis, x0, y0, bin size, table,
    (ncells, 6) centre rows) and ``CurvilinearGrid._piece_table`` (rows e, f, g, p00,
    hemisphere, reference longitude), the same values, rearranged."""
    basis, x0, y0, size, table, axes = lookup
    ncells = nx * ny
    jc, ic = np.divmod(np.arange(ncells), nx)
    centres = _aligned_rows(ncells, 8)
    centres[:, :6] = axes
    centres[:, 6] = jc
    centres[:, 7] = ic
    hemisphere = np.ascontiguousarray(piece_table[:, 8], dtype=np.int8)
    # for a lon/lat piece the corner's x is its own longitude unwrapped about itself, which is
    # that longitude bit for bit (x - x = +0): the row then needs no reference column
    lonlat = hemisphere == 0
    same = np.array_equal(piece_table[lonlat, 6].view(np.int64),
                          piece_table[lonlat, 9].view(np.int64))
    pieces = _aligned_rows(len(piece_table), 8 if same else 16)
    pieces[:, :8] = piece_table[:, :8]
    if not same:
        pieces[:, 8] = piece_table[:, 9]
    return SearchTables(np.ascontiguousarray(basis, dtype=np.float64), float(x0), float(y0),
                        1.0 / size, np.ascontiguousarray(table, dtype=np.int32), centres, pieces,
                        6 if same else 8, hemisphere, int(nx), int(ny))


def _aligned_rows(n_rows, width):
    """An (n_rows, width) float64 array whose data start on a 64-byte boundary."""
    buffer = np.empty(n_rows * width + 8)
    start = (-buffer.ctypes.data % 64) // 8
    return buffer[start:start + n_rows * width].reshape(n_rows, width)


def table_search(lon, lat, half_tangents, tables, polar=None):
    """Step (1) of the curvilinear cell search for every position, in one compiled pass.

    Parameters
    ----------
    lon, lat : numpy.ndarray
        float64 positions in degrees (finite, latitude within +-90), 1-D, length n.
    half_tangents : tuple of numpy.ndarray
        ``tan(lon / 2)``, ``tan(lat / 2)`` (dimensionless) by
        :func:`obsprep.geo.sphere.half_angle_tangent`, from which the kernel computes the unit
        vectors as :func:`obsprep.geo.sphere.unit_vector_components` does (the tangent is left
        to numpy: the compiled code's may differ in the last bit; the rest is arithmetic).
    tables : SearchTables
        The grid's tables (:func:`search_tables`).
    polar : tuple of numpy.ndarray, optional
        (x, y, hemisphere): polar stereographic coordinates (unit sphere) of each position about
        the pole of ``hemisphere`` (+1 north, -1 south, 0 where not given), computed as
        ``curvilinear._polar_stereographic`` computes them.

    Returns
    -------
    i, j : numpy.ndarray
        int64 cell indices where the status is :data:`FOUND`, else -1.
    near_miss : numpy.ndarray
        (n, 5) float64, set for the positions of status :data:`PENDING` only (what the next
        step reads): smallest violation (index-space distance outside a piece, cells), j0, i0,
        s, t of the nearest piece tried that did not hold the position (violation +inf if none;
        the other columns are then undefined).
    status : numpy.ndarray
        int8, one of :data:`FOUND`, :data:`PENDING`, :data:`OUTSIDE`, :data:`NEEDS_NORTH`,
        :data:`NEEDS_SOUTH`.
    """
    n = lon.size
    if polar is None:
        polar_x = polar_y = np.zeros(n)
        hemisphere = np.zeros(n, dtype=np.int8)
    else:
        polar_x, polar_y, hemisphere = polar
    tan_lon, tan_lat = (_contiguous(c) for c in half_tangents)
    i = np.empty(n, dtype=np.int64)
    j = np.empty(n, dtype=np.int64)
    near_miss = np.empty((n, 5))
    status = np.empty(n, dtype=np.int8)
    t = tables
    _compiled_table_search()(
        _contiguous(lon), _contiguous(lat), tan_lon, tan_lat, t.basis, t.x0, t.y0,
        t.inverse_size, t.table, t.centres, t.pieces, t.reference_column, t.hemisphere, t.nx,
        t.ny, _contiguous(polar_x), _contiguous(polar_y),
        np.ascontiguousarray(hemisphere, dtype=np.int8), i, j, near_miss, status)
    return i, j, near_miss, status


def _contiguous(values):
    return np.ascontiguousarray(values, dtype=np.float64)


#: positions per block of the staged loop: enough independent table and row reads in flight
#: to hide the memory latency of random positions, few enough for the block to stay in cache
_BLOCK = 256


def _table_search_loop(lon, lat, tan_lon, tan_lat, basis, x0, y0, inverse_size, table,
                       centres, pieces, reference_column, piece_hemisphere, nx, ny, polar_x,
                       polar_y, hemisphere, found_i, found_j, near_miss, status):
    """The per-position search of :func:`table_search` (plain Python; compiled by
    :func:`_compiled_table_search`).  Every expression mirrors one of the numpy path in
    :mod:`obsprep.geo.grid.curvilinear`, operand order included: the unit vectors of
    :func:`obsprep.geo.sphere.unit_vector_components`, ``_first_guess`` (the
    stereographic plane and the bin), the facing piece of ``_locate_numpy``, the four tries of
    ``_try_pieces`` and the root choice of ``_solve_bilinear``.

    Positions are taken in blocks, each in stages (bin; table entry; the guessed centre's row;
    the first piece's row; the tries): within a stage the reads of different positions do not
    depend on each other, so the processor has many of them in flight at once, where one
    position after the other would wait for each of its dependent reads in turn (the tables
    are tens of megabytes and random positions miss every cache).  On random positions
    this ran several times faster than one position after the other (measured here).
    Returns a checksum of the rows read ahead (nothing to use; it keeps the reads).
    """
    n = lon.size
    nby, nbx = table.shape
    flat_table = table.ravel()
    last_i = nx - 2
    last_j = ny - 2
    nan = math.nan
    block_centre = np.empty(_BLOCK, dtype=np.int64)
    block_x = np.empty(_BLOCK)
    block_y = np.empty(_BLOCK)
    block_di = np.empty(_BLOCK, dtype=np.int64)
    block_dj = np.empty(_BLOCK, dtype=np.int64)
    read_ahead = 0.0
    for begin in range(0, n, _BLOCK):
        stop = min(begin + _BLOCK, n)
        # stage 1: stereographic plane about the table's centre direction and the bin
        for k in range(begin, stop):
            b = k - begin
            found_i[k] = -1
            found_j[k] = -1
            status[k] = PENDING
            # unit vector: sphere.cos_sin_degrees, cos = 2 / (t^2 + 1) - 1, sin = t 2 / (..)
            two_lon = 2.0 / (tan_lon[k] * tan_lon[k] + 1.0)
            two_lat = 2.0 / (tan_lat[k] * tan_lat[k] + 1.0)
            cos_lat = two_lat - 1.0
            x = cos_lat * (two_lon - 1.0)
            y = cos_lat * (tan_lon[k] * two_lon)
            z = tan_lat[k] * two_lat
            along = x * basis[0, 0] + y * basis[1, 0] + z * basis[2, 0]
            scale = 2.0 / (1.0 + along)
            plane_x = (x * basis[0, 1] + y * basis[1, 1] + z * basis[2, 1]) * scale
            plane_y = (x * basis[0, 2] + y * basis[1, 2] + z * basis[2, 2]) * scale
            # floats until the range test: a non-finite plane position has no integer bin
            bx = np.floor((plane_x - x0) * inverse_size)
            by = np.floor((plane_y - y0) * inverse_size)
            if bx >= 0 and bx < nbx and by >= 0 and by < nby and along > 0.0:
                block_centre[b] = int(by) * nbx + int(bx)  # the bin, for now
            else:
                status[k] = OUTSIDE
                block_centre[b] = -1
            block_x[b] = plane_x
            block_y[b] = plane_y
        # stage 2: the bins' centres, then a read of each centre's row: short loops, so that
        # many of these reads are in flight together
        for b in range(stop - begin):
            if block_centre[b] >= 0:
                block_centre[b] = flat_table[block_centre[b]]
        for b in range(stop - begin):
            if block_centre[b] >= 0:
                read_ahead += centres[block_centre[b], 0]
        # the piece facing the position first, from the offset against the axes
        for b in range(stop - begin):
            centre = block_centre[b]
            if centre < 0:
                continue
            ox = block_x[b] - centres[centre, 0]
            oy = block_y[b] - centres[centre, 1]
            along_i = ox * centres[centre, 2] + oy * centres[centre, 3]
            along_j = ox * centres[centre, 4] + oy * centres[centre, 5]
            block_di[b] = -1 if along_i < 0 else 0
            block_dj[b] = -1 if along_j < 0 else 0
        # stage 3: read ahead the row of the first piece tried
        for b in range(stop - begin):
            centre = block_centre[b]
            if centre < 0:
                continue
            j0 = min(max(int(centres[centre, 6]) + block_dj[b], 0), last_j)
            i0 = min(max(int(centres[centre, 7]) + block_di[b], 0), last_i)
            row = j0 * (nx - 1) + i0
            read_ahead += pieces[row, 0] + piece_hemisphere[row]
        # stage 4: the four tries
        for k in range(begin, stop):
            b = k - begin
            centre = block_centre[b]
            if centre < 0:
                continue
            jc = int(centres[centre, 6])
            ic = int(centres[centre, 7])
            di = block_di[b]
            dj = block_dj[b]
            # the best near miss so far, kept here and written only if no piece holds it
            best = math.inf
            best_j0 = best_i0 = 0
            best_s = best_t = 0.0
            for attempt in range(4):
                j0 = jc + (-1 - dj if attempt >= 2 else dj)
                i0 = ic + (-1 - di if attempt % 2 == 1 else di)
                if j0 < 0 or j0 > last_j or i0 < 0 or i0 > last_i:
                    continue
                row = j0 * (nx - 1) + i0
                polar_piece = piece_hemisphere[row]
                if polar_piece != 0:
                    if hemisphere[k] != polar_piece:
                        status[k] = NEEDS_NORTH if polar_piece > 0 else NEEDS_SOUTH
                        break
                    px = polar_x[k]
                    py = polar_y[k]
                else:
                    reference = pieces[row, reference_column]
                    difference = lon[k] - reference
                    px = reference + (difference - 360.0 * np.rint(difference / 360.0))
                    py = lat[k]
                ex = pieces[row, 0]
                ey = pieces[row, 1]
                fx = pieces[row, 2]
                fy = pieces[row, 3]
                gx = pieces[row, 4]
                gy = pieces[row, 5]
                hx = px - pieces[row, 6]
                hy = py - pieces[row, 7]
                # the quadratic in t, its cancellation-free roots (curvilinear._solve_bilinear)
                k2 = gx * fy - gy * fx
                k1 = (ex * fy - ey * fx) + (hx * gy - hy * gx)
                k0 = hx * ey - hy * ex
                discriminant = k1 * k1 - 4.0 * k0 * k2
                q = -0.5 * (k1 + np.copysign(np.sqrt(discriminant), k1))
                t_small = k0 / q if q != 0.0 else nan
                t_large = q / k2 if k2 != 0.0 else nan
                if math.isnan(t_small):
                    t = t_large
                elif abs(t_large - 0.5) < abs(t_small - 0.5):
                    t = t_large
                else:
                    t = t_small
                dx = ex + t * gx
                dy = ey + t * gy
                s = ((hx - t * fx) * dx + (hy - t * fy) * dy) / (dx * dx + dy * dy)
                if math.isnan(s) or math.isnan(t):
                    continue  # no real solution: never inside, never a near miss
                # how far outside the piece, in cells; edge pieces reach to -1/2 (resp. 3/2)
                low_i = -0.5 if i0 == 0 else 0.0
                high_i = 1.5 if i0 == last_i else 1.0
                low_j = -0.5 if j0 == 0 else 0.0
                high_j = 1.5 if j0 == last_j else 1.0
                violation = max(max(low_i - s, s - high_i), max(low_j - t, t - high_j), 0.0)
                if ((i0 == 0 and s < -0.5) or (i0 == last_i and s >= 1.5)
                        or (j0 == 0 and t < -0.5) or (j0 == last_j and t >= 1.5)):
                    continue  # beyond the outermost half cell: cannot hold it
                if violation == 0.0:
                    cell_i = int(np.floor(i0 + s + 0.5))
                    cell_j = int(np.floor(j0 + t + 0.5))
                    found_i[k] = min(max(cell_i, 0), nx - 1)
                    found_j[k] = min(max(cell_j, 0), ny - 1)
                    status[k] = FOUND
                    break
                if violation < best:
                    best = violation
                    best_j0 = j0
                    best_i0 = i0
                    best_s = s
                    best_t = t
            if status[k] == PENDING:
                near_miss[k, 0] = best
                near_miss[k, 1] = best_j0
                near_miss[k, 2] = best_i0
                near_miss[k, 3] = best_s
                near_miss[k, 4] = best_t
    return read_ahead


@functools.cache
def _compiled_table_search():
    """The compiled loop, built (or loaded from numba's on-disk cache) on first call."""
    from obsprep.compiled import compile_cached

    return compile_cached(_table_search_loop, "obsprep.geo.grid.cell_search (the cell-search kernel)", nogil=True, error_model="numpy")[0]
