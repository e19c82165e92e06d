"""Curvilinear grid given by the 2-D longitude/latitude of its cell centres.

Which cell holds a position
---------------------------
Only the centres are known, so the grid is taken to be the piecewise-bilinear map from index
space to the Earth whose pieces are the "dual quadrilaterals" with four neighbouring centres
(j0, i0), (j0, i0+1), (j0+1, i0), (j0+1, i0+1) as corners.  Inverting it gives fractional
indices (i0 + s, j0 + t), and the cell is the one whose centre is nearest in index space,
``(floor(i0 + s + 1/2), floor(j0 + t + 1/2))``: cell (j, i) is ``[i - 1/2, i + 1/2) x
[j - 1/2, j + 1/2)`` in index coordinates.  The outermost half cells are reached by extending
the edge quadrilaterals linearly to s = -1/2 (resp. 3/2); beyond that a position is outside.

The bilinear pieces are built in longitude/latitude (longitude unwrapped around the piece), so
a grid that is really a regular or rotated (affine) lon/lat grid is located exactly like
:class:`RegularGrid`.  Pieces with a corner poleward of :data:`POLAR_CAP_LATITUDE` use polar
stereographic coordinates on the unit sphere instead, where lon/lat interpolation breaks down.

Vectorised search.  A first guess of the nearest centre comes from a lookup table: the centres
are projected stereographically (on the unit sphere) about their mean direction, the plane is
cut into square bins of half the smallest centre spacing, each bin holding a centre and every
empty bin taking the centre of its nearest occupied bin (``scipy.ndimage.distance_transform_edt``
with indices).  A position is projected the same way and reads its guess from its bin: a matrix
product and a floor, no tree search.  (Grids not within 80 degrees of their mean direction, e.g.
global grids, have no table and use a KD-tree, scipy ``cKDTree`` of the centres as 3-D unit
vectors, for the first guess.)  The four pieces around the guessed centre are tried, the one
facing the position first.  Positions still unplaced (a guess one cell off, strongly skewed cells) try the
pieces around their :attr:`CurvilinearGrid.neighbours` nearest centres from the KD-tree.  Where coordinate systems switch (the
polar cap boundary) neighbouring pieces may leave slivers between them; a position in no piece
is given to the nearest-fitting piece if it is within :data:`SLIVER_TOLERANCE` cells of it.
Positions farther from every centre than the largest centre-to-neighbour distance are outside
without further work.

Compiled search.  With a lookup table, the guess and the four pieces around it are by default
done for each position in one compiled pass (:mod:`obsprep.geo.grid.cell_search`, the same
arithmetic in the same order); the KD-tree step and the slivers stay as above, for the few
positions it leaves.  The cells are identical to the all-numpy search
(:attr:`CurvilinearGrid.search` ``= "numpy"``), which is kept as the reference.

Accuracy: exact (to rounding) when the grid is affine in lon/lat (a regular lon/lat grid,
possibly rotated or sheared); otherwise the cell edges are those of the piecewise-bilinear
model, which differ from the "true" edges of, e.g., a rotated-pole grid by the sagitta of the
grid lines between centres: a fraction of a cell proportional to the cell size (a few
thousandths of a cell for 0.5 degree cells; tests/geo/test_grid.py computes the bound).
"""

from __future__ import annotations

from functools import cached_property
from pathlib import Path

import numpy as np

from obsprep.exceptions import GridError, InputFileError
from obsprep.geo.grid.base import ModelGrid
from obsprep.geo.grid.gridfile import read_grid_file, write_grid_file
from obsprep.geo.rotation import axis_angle_from_centres
from obsprep.geo.sphere import (
    half_angle_tangent,
    unit_vector_components,
    unit_vectors_from_lonlat,
    wrap_longitude,
)

#: pieces with a corner poleward of this latitude (degrees) use polar stereographic coordinates
POLAR_CAP_LATITUDE = 80.0
#: index-space distance (cells) within which a position between pieces is still taken
SLIVER_TOLERANCE = 0.05

_PIECE_OFFSETS = ((0, 0), (0, -1), (-1, 0), (-1, -1))  # (dj, di) of the pieces around a centre


def _cross(ax, ay, bx, by):
    return ax * by - ay * bx


def _inverse_bilinear(p00, p10, p01, p11, p):
    """Solve ``p = p00 + s (p10 - p00) + t (p01 - p00) + s t (p00 - p10 - p01 + p11)``.

    All arguments are (x, y) tuples of 1-D arrays.  Crossing the equation with
    ``e + t g`` (e = p10 - p00, f = p01 - p00, g = p00 - p10 - p01 + p11, h = p - p00) leaves
    the quadratic ``k2 t^2 + k1 t + k0 = 0`` with ``k2 = g x f``, ``k1 = e x f + h x g``,
    ``k0 = h x e`` (2-D cross products); its roots are taken in the cancellation-free form
    ``q = -(k1 + sign(k1) sqrt(k1^2 - 4 k0 k2)) / 2``, ``t = k0 / q`` or ``q / k2``
    (Press et al., *Numerical Recipes*, 3rd ed., sect. 5.6; from memory), choosing the root
    nearer the piece.  Then ``s`` is the least-squares solution of ``h - t f = s (e + t g)``.
    Returns (s, t); NaN where there is no real solution.
    """
    ex, ey, fx, fy, gx, gy = _bilinear_coefficients(p00, p10, p01, p11)
    hx, hy = p[0] - p00[0], p[1] - p00[1]
    return _solve_bilinear(ex, ey, fx, fy, gx, gy, hx, hy)


def _bilinear_coefficients(p00, p10, p01, p11):
    """e = p10 - p00, f = p01 - p00, g = p00 - p10 - p01 + p11 of :func:`_inverse_bilinear`."""
    return (p10[0] - p00[0], p10[1] - p00[1], p01[0] - p00[0], p01[1] - p00[1],
            p00[0] - p10[0] - p01[0] + p11[0], p00[1] - p10[1] - p01[1] + p11[1])


def _solve_bilinear(ex, ey, fx, fy, gx, gy, hx, hy):
    """(s, t) of :func:`_inverse_bilinear` from its coefficients and h = p - p00."""
    k2 = _cross(gx, gy, fx, fy)
    k1 = _cross(ex, ey, fx, fy) + _cross(hx, hy, gx, gy)
    k0 = _cross(hx, hy, ex, ey)
    with np.errstate(invalid="ignore", divide="ignore"):
        discriminant = k1 * k1 - 4.0 * k0 * k2
        q = -0.5 * (k1 + np.copysign(np.sqrt(discriminant), k1))
        t_small = np.where(q != 0.0, k0 / q, np.nan)
        t_large = np.where(k2 != 0.0, q / k2, np.nan)
        # the piece spans t in [0, 1] (extended to [-1/2, 3/2] at the grid edges)
        use_large = np.abs(t_large - 0.5) < np.abs(t_small - 0.5)
        t = np.where(use_large, t_large, t_small)
        t = np.where(np.isnan(t_small), t_large, t)
        dx, dy = ex + t * gx, ey + t * gy
        s = ((hx - t * fx) * dx + (hy - t * fy) * dy) / (dx * dx + dy * dy)
    return s, t


def _unwrap(lon, reference):
    """``lon`` shifted by a multiple of 360 degrees to within 180 degrees of ``reference``."""
    difference = lon - reference
    return reference + (difference - 360.0 * np.rint(difference / 360.0))


def _polar_stereographic(lon, lat, hemisphere):
    """Stereographic coordinates on the unit sphere about the pole of ``hemisphere`` (+-1)."""
    radius = np.tan(np.radians(45.0 - 0.5 * hemisphere * lat))
    lon_rad = np.radians(lon)
    return radius * np.cos(lon_rad), radius * np.sin(lon_rad)


class CurvilinearGrid(ModelGrid):
    """A logically rectangular grid of any shape, given by its cell centres.

    ``lon``, ``lat``: cell centres in degrees, shape (ny, nx), ny, nx >= 2, i the last axis.
    ``sea_mask`` (bool, True = sea; default all sea), ``bathymetry`` (m positive down; default
    +inf, unknown), ``angle`` (radians, the +i axis counterclockwise from east; default
    computed from the centres by centred differences, see
    :func:`obsprep.geo.rotation.axis_angle_from_centres`).  See the module docstring for how a
    position is assigned to a cell.
    """

    grid_type = "curvilinear"
    #: positions per chunk: the search keeps several arrays per position (about 120 bytes);
    #: the compiled search takes a chunk in one call, the numpy search in parts of
    #: :attr:`numpy_chunk_size`
    chunk_size = 262_144
    #: parts of a chunk for the numpy search: parts whose arrays stay in the processor cache
    #: are searched about twice as fast
    numpy_chunk_size = 65_536
    #: number of nearest centres whose surrounding pieces are tried
    neighbours = 4
    #: largest number of bins of the first-guess lookup table (int32 each)
    max_lookup_bins = 16_000_000
    #: "table" (lookup table, KD-tree only for what it misses) or "tree" (KD-tree for all)
    first_guess = "table"
    #: "compiled": step 1 of the table search in one compiled pass
    #: (:mod:`obsprep.geo.grid.cell_search`); "numpy": all of it vectorised (the reference);
    #: the cells are identical
    search = "compiled"
    #: fewer positions than this in a chunk take the numpy search even when ``search`` is
    #: "compiled" (the same cells): a process that only ever locates a few positions does not
    #: import numba and load the kernel (about half a second) to save milliseconds
    compiled_from = 50_000

    def __init__(self, lon, lat, *, sea_mask=None, bathymetry=None, angle=None,
                 layer_interfaces=None, source=None):
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        if lon.ndim != 2 or lon.shape != lat.shape:
            raise GridError(f"lon and lat of the cell centres must be 2-D arrays of one shape, "
                            f"got {lon.shape} and {lat.shape}")
        if lon.shape[0] < 2 or lon.shape[1] < 2:
            raise GridError(f"a curvilinear grid needs at least 2 x 2 cells, got {lon.shape}")
        if not (np.all(np.isfinite(lon)) and np.all(np.isfinite(lat))):
            raise GridError("cell-centre longitudes and latitudes must all be finite")
        if np.any(np.abs(lat) > 90.0):
            raise GridError("cell-centre latitudes must be within -90..90 degrees")
        super().__init__(lon.shape[0], lon.shape[1], sea_mask=sea_mask, bathymetry=bathymetry,
                         layer_interfaces=layer_interfaces)
        self._lon = wrap_longitude(lon)
        self._lat = lat
        computed = axis_angle_from_centres(self._lon, self._lat)
        if angle is None:
            self._angle = computed
        else:
            angle = self._field(angle, np.nan, float, "angle")
            self._angle = np.where(np.isfinite(angle), angle, computed)
        self.source = None if source is None else str(source)

    @classmethod
    def from_file(cls, path, *, layer_interfaces=None, mask_variable=None,
                  bathymetry_variable=None) -> CurvilinearGrid:
        """Read a netCDF grid file (layout: :mod:`obsprep.geo.grid.gridfile`).

        Cell centres by standard_name ``longitude``/``latitude``; mask ``sea_binary_mask``
        (1 = sea) or ``land_binary_mask`` (1 = land); bathymetry (m positive down) by one of
        the sea-floor-depth standard names; or mask and bathymetry by their variable names
        ``mask_variable``, ``bathymetry_variable``; the file must yield both.  Angle
        ``angle_of_rotation_from_east_to_x`` in degree or radian, else computed.  Unusable
        content raises :class:`InputFileError` naming the file and the variable.
        """
        contents = read_grid_file(path, need_coordinates=True, mask_variable=mask_variable,
                                  bathymetry_variable=bathymetry_variable,
                                  need_mask_and_bathymetry=True)
        if contents.shape[0] < 2 or contents.shape[1] < 2:
            raise InputFileError(path, f"a curvilinear grid needs at least 2 x 2 cells, found "
                                 f"shape {contents.shape}", variable=contents.names.get("lon"))
        return cls(contents.lon, contents.lat, sea_mask=contents.sea_mask,
                   bathymetry=contents.bathymetry, angle=contents.angle,
                   layer_interfaces=layer_interfaces, source=path)

    def write(self, path) -> Path:
        """Write the grid with :func:`write_grid_file` (read back by :meth:`from_file`)."""
        return write_grid_file(path, self._lon, self._lat, self.sea_mask, self.bathymetry,
                               self._angle)

    @property
    def lon_center(self) -> np.ndarray:
        return self._lon

    @property
    def lat_center(self) -> np.ndarray:
        return self._lat

    def _axis_angle_valid(self, i, j):
        return self._angle[j, i]

    # --- locating ------------------------------------------------------------------------------

    @cached_property
    def _unit_vectors(self) -> np.ndarray:
        """Cell centres as Earth-centred unit vectors, (ny, nx, 3)."""
        return unit_vectors_from_lonlat(self._lon, self._lat)

    @cached_property
    def _tree(self):
        from scipy.spatial import cKDTree  # imported when a tree is needed (import is slow)

        return cKDTree(self._unit_vectors.reshape(-1, 3))

    @cached_property
    def _lookup(self):
        """The first-guess table (module docstring), or None when the grid is too wide for one
        stereographic plane.  Returns (basis (3, 3): mean direction, e1, e2; x0, y0, bin size in
        plane units; table (nby, nbx) of flat centre indices; (ncells, 6) plane x, y of each
        centre and its differences along +i and +j)."""
        from scipy.ndimage import distance_transform_edt

        r = self._unit_vectors.reshape(-1, 3)
        mean = r.sum(axis=0)
        norm = np.linalg.norm(mean)
        if norm == 0.0:
            return None
        centre = mean / norm
        if (r @ centre).min() < np.cos(np.radians(80.0)):
            return None
        helper = np.array([0.0, 0.0, 1.0]) if abs(centre[2]) < 0.9 else np.array([1.0, 0.0, 0.0])
        e1 = np.cross(helper, centre)
        e1 /= np.linalg.norm(e1)
        e2 = np.cross(centre, e1)
        basis = np.stack([centre, e1, e2], axis=1)
        x, y, _ = self._stereographic_plane(r, basis)
        x = x.reshape(self.shape)
        y = y.reshape(self.shape)
        spacing = min(np.hypot(np.diff(x, axis=1), np.diff(y, axis=1)).min(),
                      np.hypot(np.diff(x, axis=0), np.diff(y, axis=0)).min())
        if not spacing > 0.0:
            return None
        size = 0.5 * spacing
        margin = 2.0 * max(np.hypot(np.diff(x, axis=1), np.diff(y, axis=1)).max(),
                           np.hypot(np.diff(x, axis=0), np.diff(y, axis=0)).max())
        x0, y0 = x.min() - margin, y.min() - margin
        nbx = int(np.ceil((x.max() + margin - x0) / size)) + 1
        nby = int(np.ceil((y.max() + margin - y0) / size)) + 1
        if nbx * nby > self.max_lookup_bins:
            size *= np.sqrt(nbx * nby / self.max_lookup_bins)
            nbx = int(np.ceil((x.max() + margin - x0) / size)) + 1
            nby = int(np.ceil((y.max() + margin - y0) / size)) + 1
        bx = np.floor((x.ravel() - x0) / size).astype(np.intp)
        by = np.floor((y.ravel() - y0) / size).astype(np.intp)
        table = np.full((nby, nbx), -1, dtype=np.int32)
        table[by, bx] = np.arange(self.ny * self.nx, dtype=np.int32)
        nearest = distance_transform_edt(table < 0, return_distances=False, return_indices=True)
        table = table[nearest[0], nearest[1]]
        # per centre: its plane position and the centred differences along +i and +j (one-sided
        # at the edges), rows of one array so that a lookup gathers one row
        jc, ic = np.indices(self.shape)
        right, left = np.minimum(ic + 1, self.nx - 1), np.maximum(ic - 1, 0)
        up, down = np.minimum(jc + 1, self.ny - 1), np.maximum(jc - 1, 0)
        axes = np.stack([x, y, x[jc, right] - x[jc, left], y[jc, right] - y[jc, left],
                         x[up, ic] - x[down, ic], y[up, ic] - y[down, ic]], axis=-1)
        return basis, x0, y0, size, table, np.ascontiguousarray(axes.reshape(-1, 6))

    @staticmethod
    def _stereographic_plane(r, basis):
        """Stereographic coordinates (unit sphere) about ``basis[:, 0]`` of unit vectors r
        ((n, 3), or a tuple of the three components); returns (x, y, cosine of the angle from
        the projection centre)."""
        rx, ry, rz = r if isinstance(r, tuple) else (r[:, 0], r[:, 1], r[:, 2])
        along = rx * basis[0, 0] + ry * basis[1, 0] + rz * basis[2, 0]
        scale = 2.0 / (1.0 + along)
        x = (rx * basis[0, 1] + ry * basis[1, 1] + rz * basis[2, 1]) * scale
        y = (rx * basis[0, 2] + ry * basis[1, 2] + rz * basis[2, 2]) * scale
        return x, y, along

    def _first_guess(self, points):
        """(flat index of a centre near each position (unit vectors), or ncells where the
        position is outside the table; plane x; plane y), or None when the grid has no table."""
        lookup = self._lookup
        if lookup is None:
            return None
        basis, x0, y0, size, table, _ = lookup
        ncells = self.ny * self.nx
        with np.errstate(invalid="ignore", divide="ignore"):
            x, y, along = self._stereographic_plane(points, basis)
            bx = np.floor((x - x0) * (1.0 / size))
            by = np.floor((y - y0) * (1.0 / size))
            inside = (bx >= 0) & (bx < table.shape[1]) & (by >= 0) & (by < table.shape[0])
            inside &= along > 0.0
        if inside.all():
            return table[by.astype(np.intp), bx.astype(np.intp)].astype(np.intp), x, y
        guess = np.full(len(x), ncells, dtype=np.intp)
        guess[inside] = table[by[inside].astype(np.intp), bx[inside].astype(np.intp)]
        return guess, x, y

    @cached_property
    def _centre_axes(self):
        """(ncells, 3) centred differences of the unit vectors along +i and +j at each centre
        (one-sided at the edges): which of the four pieces around a centre faces a position."""
        r = self._unit_vectors
        jc, ic = np.divmod(np.arange(self.ny * self.nx), self.nx)
        along_i = r[jc, np.minimum(ic + 1, self.nx - 1)] - r[jc, np.maximum(ic - 1, 0)]
        along_j = r[np.minimum(jc + 1, self.ny - 1), ic] - r[np.maximum(jc - 1, 0), ic]
        return along_i, along_j

    @cached_property
    def _search_radius(self) -> float:
        """Largest chord (unit sphere) between a centre and any of its 8 neighbours: no point
        of the grid is farther than this from its nearest centre."""
        r = self._unit_vectors
        largest = 0.0
        for a, b in ((r[:, 1:], r[:, :-1]), (r[1:], r[:-1]), (r[1:, 1:], r[:-1, :-1]),
                     (r[1:, :-1], r[:-1, 1:])):
            largest = max(largest, float(np.sqrt(((a - b) ** 2).sum(axis=-1)).max()))
        return largest

    @cached_property
    def _polar_piece(self) -> np.ndarray:
        """(ny-1, nx-1): hemisphere (+1 north, -1 south) of pieces in a polar cap, else 0."""
        lat = self._lat
        corners = np.stack([lat[:-1, :-1], lat[:-1, 1:], lat[1:, :-1], lat[1:, 1:]])
        north = (corners > 0).all(axis=0)
        south = (corners < 0).all(axis=0)
        polar = np.abs(corners).max(axis=0) > POLAR_CAP_LATITUDE
        return np.where(polar & north, 1, np.where(polar & south, -1, 0)).astype(np.int8)

    @cached_property
    def _stereographic_centres(self):
        """Polar stereographic (x, y) of each centre about the pole of its own hemisphere."""
        return _polar_stereographic(self._lon, self._lat, np.where(self._lat >= 0, 1.0, -1.0))

    def _piece_coordinates(self, j0, i0, lon, lat):
        """Plane coordinates of the four corners of pieces (j0, i0) and of the positions."""
        jj = (j0, j0, j0 + 1, j0 + 1)
        ii = (i0, i0 + 1, i0, i0 + 1)
        reference = self._lon[j0, i0]
        # lon/lat pieces: longitudes unwrapped to within 180 degrees of the first corner
        corners = [(_unwrap(self._lon[a, b], reference), self._lat[a, b]) for a, b in zip(jj, ii)]
        point = (_unwrap(lon, reference), lat.copy())
        hemisphere = self._polar_piece[j0, i0]
        polar = hemisphere != 0
        if polar.any():
            x_centres, y_centres = self._stereographic_centres
            for (x, y), a, b in zip(corners, jj, ii):
                x[polar] = x_centres[a[polar], b[polar]]
                y[polar] = y_centres[a[polar], b[polar]]
            x, y = _polar_stereographic(lon[polar], lat[polar], hemisphere[polar])
            point[0][polar] = x
            point[1][polar] = y
        return corners, point

    @cached_property
    def _piece_table(self):
        """Per piece (flat index j0 (nx - 1) + i0): the coefficients e, f, g of
        :func:`_inverse_bilinear` and the corner p00, in the piece's own plane coordinates
        (unwrapped lon/lat, or polar stereographic), computed once with exactly the arithmetic
        of :meth:`_piece_coordinates`, so a lookup gives the same bits as computing them."""
        j0, i0 = np.divmod(np.arange((self.ny - 1) * (self.nx - 1)), self.nx - 1)
        dummy = np.zeros(j0.size)
        corners, _ = self._piece_coordinates(j0, i0, dummy, dummy)
        coefficients = _bilinear_coefficients(*corners)
        columns = coefficients + (corners[0][0], corners[0][1],
                                  self._polar_piece.ravel().astype(np.float64),
                                  self._lon[j0, i0])
        # one row per piece: a lookup gathers one contiguous row instead of ten arrays
        return np.ascontiguousarray(np.stack(columns, axis=1))

    def _try_pieces(self, idx, j0, i0, lon, lat, found, near_miss):
        """Invert the pieces (j0, i0) for positions ``idx``; record hits in ``found`` (i, j
        arrays) and the best near miss so far in ``near_miss`` (violation, j0, i0, s, t).
        Returns a bool array over ``idx``: the position was found."""
        last_i, last_j = self.nx - 2, self.ny - 2
        usable = (j0 >= 0) & (j0 <= last_j) & (i0 >= 0) & (i0 <= last_i)
        hit_mask = np.zeros(idx.size, dtype=bool)
        if not usable.any():
            return hit_mask
        every = bool(usable.all())
        if not every:
            idx, j0, i0 = idx[usable], j0[usable], i0[usable]
        sub = idx
        # gather whole rows (one memory access per position), then make the columns
        # contiguous for the arithmetic below
        rows = np.take(self._piece_table, j0 * (self.nx - 1) + i0, axis=0)
        ex, ey, fx, fy, gx, gy, x00, y00, polar_piece, reference = (
            np.ascontiguousarray(rows[:, c]) for c in range(10))
        if sub.size == lon.size:  # every position, in order (the first try of a chunk)
            lon_sub, lat_sub = lon, lat
        else:
            lon_sub, lat_sub = lon[sub], lat[sub]
        px = _unwrap(lon_sub, reference)
        py = lat_sub
        polar = polar_piece != 0
        if polar.any():
            py = lat_sub.copy()
            px[polar], py[polar] = _polar_stereographic(lon_sub[polar], lat_sub[polar],
                                                        polar_piece[polar])
        s, t = _solve_bilinear(ex, ey, fx, fy, gx, gy, px - x00, py - y00)
        with np.errstate(invalid="ignore"):
            # how far outside [0, 1] x [0, 1] (NaN stays NaN: never inside)
            violation = np.maximum(np.maximum(-s, s - 1.0), np.maximum(-t, t - 1.0))
            np.maximum(violation, 0.0, out=violation)
            edge = np.flatnonzero((i0 == 0) | (i0 == last_i) | (j0 == 0) | (j0 == last_j))
            beyond = np.zeros(s.shape, dtype=bool)
            if edge.size:
                # edge pieces extend to -1/2 (resp. 3/2); beyond that they cannot hold it
                ie, je, se, te = i0[edge], j0[edge], s[edge], t[edge]
                beyond[edge] = (((ie == 0) & (se < -0.5)) | ((ie == last_i) & (se >= 1.5))
                                | ((je == 0) & (te < -0.5)) | ((je == last_j) & (te >= 1.5)))
                violation[edge] = np.maximum.reduce([
                    np.where(ie == 0, -0.5, 0.0) - se, se - np.where(ie == last_i, 1.5, 1.0),
                    np.where(je == 0, -0.5, 0.0) - te, te - np.where(je == last_j, 1.5, 1.0),
                    np.zeros_like(se)])
            inside = (violation == 0.0) & ~beyond
            closer = ~beyond & ~inside & (violation < near_miss[sub, 0])
        if closer.any():
            near_miss[sub[closer]] = np.column_stack([violation[closer], j0[closer], i0[closer],
                                                      s[closer], t[closer]])
        hits = sub[inside]
        found[0][hits] = self._cell_from_fraction(i0[inside], s[inside], self.nx)
        found[1][hits] = self._cell_from_fraction(j0[inside], t[inside], self.ny)
        if every:
            return inside
        hit_mask[np.flatnonzero(usable)[inside]] = True
        return hit_mask

    def _locate_valid(self, lon, lat):
        if self.search not in ("compiled", "numpy"):
            raise ValueError(f"CurvilinearGrid.search must be 'compiled' or 'numpy', got "
                             f"{self.search!r}")
        if (self.search == "compiled" and lon.size >= self.compiled_from
                and self.first_guess == "table" and self._lookup is not None):
            return self._locate_compiled(lon, lat)
        # unit vectors as three contiguous arrays (the table path needs no (n, 3) stack)
        components = unit_vector_components(lon, lat)
        if lon.size <= self.numpy_chunk_size:
            return self._locate_numpy(lon, lat, components)
        i = np.empty(lon.size, dtype=np.int64)
        j = np.empty(lon.size, dtype=np.int64)
        for start in range(0, lon.size, self.numpy_chunk_size):
            part = slice(start, start + self.numpy_chunk_size)
            i[part], j[part] = self._locate_numpy(lon[part], lat[part],
                                                  tuple(c[part] for c in components))
        return i, j

    @cached_property
    def _search_tables(self):
        """The lookup and piece tables in the compiled kernel's layout."""
        from obsprep.geo.grid import cell_search

        return cell_search.search_tables(self._lookup, self._piece_table, self.nx, self.ny)

    def _locate_compiled(self, lon, lat):
        """The search of :meth:`_locate_numpy` with its step 1 (table guess, four pieces) in
        one compiled pass (:func:`obsprep.geo.grid.cell_search.table_search`); steps 2 and 3
        for what it leaves are the numpy code, so the cells are the same."""
        from obsprep.geo.grid import cell_search

        tables = self._search_tables
        # polar stereographic coordinates by numpy (as _try_pieces computes them) for the
        # positions near a polar cap; a position that meets a polar piece without them asks
        # for them (status NEEDS_NORTH / NEEDS_SOUTH) and is searched again
        north_from, south_to = self._polar_cap_reach
        hemisphere = np.zeros(lon.size, dtype=np.int8)
        hemisphere[lat <= south_to] = -1
        hemisphere[lat >= north_from] = 1
        half_tangents = (half_angle_tangent(lon), half_angle_tangent(lat))
        i, j, near_miss, status = cell_search.table_search(
            lon, lat, half_tangents, tables, self._polar_coordinates(lon, lat, hemisphere))
        again_rows = np.flatnonzero(status >= cell_search.NEEDS_NORTH)
        if again_rows.size:
            lon_again, lat_again = lon[again_rows], lat[again_rows]
            hemisphere = np.where(status[again_rows] == cell_search.NEEDS_NORTH, 1, -1)
            again = cell_search.table_search(
                lon_again, lat_again, tuple(t[again_rows] for t in half_tangents), tables,
                self._polar_coordinates(lon_again, lat_again, hemisphere))
            for whole, part in zip((i, j, near_miss, status), again):
                whole[again_rows] = part
            # pieces of both polar caps around one position: the numpy search for those
            both = np.flatnonzero(again[3] >= cell_search.NEEDS_NORTH)
            if both.size:
                rows = again_rows[both]
                i[rows], j[rows] = self._locate_numpy(lon[rows], lat[rows],
                                                      unit_vector_components(lon[rows], lat[rows]))
                status[rows] = cell_search.FOUND
        pending = np.flatnonzero(status == cell_search.PENDING)

        def points_at(rows):
            """(m, 3) unit vectors, as unit_vectors_from_lonlat gives them."""
            return np.stack(unit_vector_components(lon[rows], lat[rows]), axis=-1)

        self._search_near_centres(pending, lon, lat, points_at, (i, j), near_miss,
                                  from_tree=False)
        return i, j

    @staticmethod
    def _polar_coordinates(lon, lat, hemisphere):
        """(x, y, hemisphere) for :func:`obsprep.geo.grid.cell_search.table_search`: polar
        stereographic coordinates (unit sphere) of the positions (degrees) about the pole of
        ``hemisphere`` (+1, -1; 0: none, x = y = 0)."""
        x = np.zeros(lon.size)
        y = np.zeros(lon.size)
        hemisphere = np.asarray(hemisphere, dtype=np.int8)
        rows = np.flatnonzero(hemisphere)
        if rows.size:
            x[rows], y[rows] = _polar_stereographic(lon[rows], lat[rows],
                                                    hemisphere[rows].astype(np.float64))
        return x, y, hemisphere

    @cached_property
    def _polar_cap_reach(self):
        """(from, to) latitudes in degrees: positions north of the first (south of the second)
        are likely to meet a northern (southern) polar piece in the search: the lowest corner
        latitude of those pieces, less twice the largest latitude step between neighbouring
        centres.  Only a shortcut: a position outside meets them too, then asks for them."""
        lat = self._lat
        step = max(np.abs(np.diff(lat, axis=0)).max(), np.abs(np.diff(lat, axis=1)).max())
        corners = np.stack([lat[:-1, :-1], lat[:-1, 1:], lat[1:, :-1], lat[1:, 1:]])
        lowest = corners.min(axis=0)
        highest = corners.max(axis=0)
        north = self._polar_piece > 0
        south = self._polar_piece < 0
        north_from = lowest[north].min() - 2.0 * step if north.any() else np.inf
        south_to = highest[south].max() + 2.0 * step if south.any() else -np.inf
        return float(north_from), float(south_to)

    def _locate_numpy(self, lon, lat, components):
        """The vectorised search (module docstring) of positions ``lon``, ``lat`` (degrees,
        finite) with unit vectors ``components``: cell indices (i, j), -1 outside."""
        n = lon.size
        ncells = self.ny * self.nx
        found = (np.full(n, -1, dtype=np.int64), np.full(n, -1, dtype=np.int64))
        near_miss = np.empty((n, 5))  # violation, j0, i0, s, t; read only where finite
        near_miss[:, 0] = np.inf

        def points_at(rows=None):
            """(m, 3) unit vectors, as unit_vectors_from_lonlat gives them."""
            if rows is None:
                return np.stack(components, axis=-1)
            return np.stack([c[rows] for c in components], axis=-1)

        guess = self._first_guess(components) if self.first_guess == "table" else None
        from_tree = guess is None
        if from_tree:
            points = points_at()
            _, nearest = self._tree.query(points, k=1, distance_upper_bound=self._search_radius)
        else:
            nearest, plane_x, plane_y = guess
        pending = np.flatnonzero(nearest < ncells)  # the others are far from every centre
        # 1) the four pieces around the nearest centre, the one facing the position first
        centre = nearest[pending]
        jc, ic = np.divmod(centre, self.nx)
        if from_tree:  # facing: offset from the centre against the grid axes, in 3-D
            r = self._unit_vectors.reshape(-1, 3)
            along_i, along_j = self._centre_axes
            offset = points[pending] - r[centre]
            di = np.where(np.einsum("ij,ij->i", offset, along_i[centre]) < 0, -1, 0)
            dj = np.where(np.einsum("ij,ij->i", offset, along_j[centre]) < 0, -1, 0)
        else:  # ... or in the table's plane (conformal: the same sides), cheaper
            axes = np.take(self._lookup[5], centre, axis=0)
            xc, yc, aix, aiy, ajx, ajy = (np.ascontiguousarray(axes[:, c]) for c in range(6))
            if pending.size != n:
                plane_x, plane_y = plane_x[pending], plane_y[pending]
            ox, oy = plane_x - xc, plane_y - yc
            di = np.where(ox * aix + oy * aiy < 0, -1, 0)
            dj = np.where(ox * ajx + oy * ajy < 0, -1, 0)
        for flip_j, flip_i in ((False, False), (False, True), (True, False), (True, True)):
            if pending.size == 0:
                break
            piece_j = jc + np.where(flip_j, -1 - dj, dj)
            piece_i = ic + np.where(flip_i, -1 - di, di)
            hit = self._try_pieces(pending, piece_j, piece_i, lon, lat, found, near_miss)
            pending, jc, ic, di, dj = (a[~hit] for a in (pending, jc, ic, di, dj))
        self._search_near_centres(pending, lon, lat, points_at, found, near_miss, from_tree)
        return found

    def _search_near_centres(self, pending, lon, lat, points_at, found, near_miss, from_tree):
        """Steps 2 and 3 of the search for the positions ``pending`` (indices into ``lon``,
        ``lat``, ``found`` and ``near_miss``, updated in place) that the four pieces around the
        first guess did not hold; ``points_at(rows)``: their (m, 3) unit vectors;
        ``from_tree``: that guess was the KD-tree's nearest centre (tried already)."""
        ncells = self.ny * self.nx

        # 2) the pieces around the nearest centres by KD-tree (a table guess one cell off,
        #    skewed cells, grid edges); the nearest itself was tried already if it came from
        #    the tree
        k = min(self.neighbours, ncells)
        if pending.size and (k > 1 or not from_tree):
            _, nearest_k = self._tree.query(points_at(pending), k=k,
                                            distance_upper_bound=self._search_radius)
            nearest_k = nearest_k.reshape(len(pending), k)
            for rank in range(1 if from_tree else 0, k):
                for dj_piece, di_piece in _PIECE_OFFSETS:
                    if pending.size == 0:
                        break
                    centre = nearest_k[:, rank]
                    known = centre < ncells
                    jc, ic = np.divmod(np.where(known, centre, 0), self.nx)
                    piece_j = np.where(known, jc + dj_piece, -1)
                    hit = self._try_pieces(pending, piece_j, ic + di_piece, lon, lat, found,
                                           near_miss)
                    pending, nearest_k = pending[~hit], nearest_k[~hit]
        # 3) slivers between pieces built in different coordinates
        sliver = pending[near_miss[pending, 0] <= SLIVER_TOLERANCE]
        if sliver.size:
            _, j0, i0, s, t = near_miss[sliver].T
            j0 = j0.astype(np.int64)
            i0 = i0.astype(np.int64)
            s = np.clip(s, np.where(i0 == 0, -0.5, 0.0), np.where(i0 == self.nx - 2, 1.5, 1.0))
            t = np.clip(t, np.where(j0 == 0, -0.5, 0.0), np.where(j0 == self.ny - 2, 1.5, 1.0))
            found[0][sliver] = self._cell_from_fraction(i0, s, self.nx)
            found[1][sliver] = self._cell_from_fraction(j0, t, self.ny)

    @staticmethod
    def _cell_from_fraction(origin, fraction, size):
        cell = np.floor(origin + fraction + 0.5).astype(np.int64)
        return np.clip(cell, 0, size - 1)

    def _dataset_extras(self, ds):
        if self.source:
            ds.attrs["source_grid_file"] = self.source
        return ds
