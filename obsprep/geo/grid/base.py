"""The model grid seen by the pipeline: cells (j, i), land/sea mask, bathymetry, layers.

Subclasses say how a position maps to a cell (:meth:`ModelGrid._locate_valid`) and give the cell
centres and axis angles; everything else (chunking, layers, rejection reasons, vector rotation,
distances, the CF dataset) is shared here.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from obsprep.exceptions import GridError, InputFileError
from obsprep.geo.grid.gridfile import grid_dataset, read_grid_file
from obsprep.geo.grid.limits import check_cell_count
from obsprep.geo.grid.vertical import DEFAULT_LAYER_INTERFACES_M, layer_index_from_depth, layer_interfaces_from_depths
from obsprep.geo.rotation import east_north_to_grid, grid_to_east_north
from obsprep.geo.sphere import great_circle_distance

#: rejection codes of :meth:`ModelGrid.classify` (see obsprep.model.reasons), in test order
OUTSIDE_GRID = "outside_grid"
LAND = "land"
BELOW_BATHYMETRY = "below_bathymetry"
BELOW_DEEPEST_LAYER = "below_deepest_layer"
#: the reasons of :meth:`ModelGrid.classify` in the order of their codes 1, 2, 3, 4
CLASSIFY_REASONS = (OUTSIDE_GRID, LAND, BELOW_BATHYMETRY, BELOW_DEEPEST_LAYER)


def _positive_int(value, name) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise GridError(f"{name} must be a positive integer number of cells, got {value!r}")
    return int(value)


class ModelGrid:
    """A logically rectangular model grid of ``ny`` rows (index j) by ``nx`` columns (index i).

    Attributes
    ----------
    ny, nx : int
        Number of cells along j and i.
    sea_mask : ndarray of bool, (ny, nx)
        True on sea cells.
    bathymetry : ndarray of float, (ny, nx)
        Sea-floor depth in m, positive down; +inf where unknown.
    layer_interfaces : ndarray of float, (nk + 1,)
        Depths of the layer interfaces in m, increasing, the first 0.
    lon_center, lat_center : ndarray of float, (ny, nx)
        Cell centres in degrees (longitude in -180..180).  May be read-only views.
    """

    #: positions processed per step by :meth:`locate` (bounds the temporary memory)
    chunk_size = 2_000_000
    grid_type = ""

    def __init__(self, ny, nx, *, sea_mask=None, bathymetry=None, layer_interfaces=None):
        self.ny = _positive_int(ny, "ny")
        self.nx = _positive_int(nx, "nx")
        check_cell_count(self.ny, self.nx)
        self.sea_mask = self._field(sea_mask, True, bool, "sea_mask")
        bathymetry = self._field(bathymetry, np.inf, float, "bathymetry")
        self.bathymetry = np.where(np.isnan(bathymetry), np.inf, bathymetry)
        if layer_interfaces is None:
            layer_interfaces = DEFAULT_LAYER_INTERFACES_M
        self.layer_interfaces = layer_interfaces_from_depths(layer_interfaces)

    def _field(self, values, default, dtype, name):
        if values is None:
            return np.full(self.shape, default, dtype=dtype)
        values = np.asarray(values)
        if values.shape != self.shape:
            raise GridError(f"{name} has shape {values.shape}, expected (ny, nx) = {self.shape}")
        return values.astype(dtype)

    @property
    def shape(self) -> tuple[int, int]:
        """(ny, nx)."""
        return (self.ny, self.nx)

    @property
    def nk(self) -> int:
        """Number of model layers."""
        return self.layer_interfaces.size - 1

    # --- to be provided by subclasses -------------------------------------------------------

    @property
    def lon_center(self) -> np.ndarray:  # pragma: no cover - interface
        raise NotImplementedError

    @property
    def lat_center(self) -> np.ndarray:  # pragma: no cover - interface
        raise NotImplementedError

    def _locate_valid(self, lon, lat):  # pragma: no cover - interface
        """(i, j) int64 for 1-D finite lon (any range) / lat (-90..90) in degrees; -1 outside."""
        raise NotImplementedError

    def _axis_angle_valid(self, i, j):  # pragma: no cover - interface
        """Axis angle in radians at valid 1-D cell indices."""
        raise NotImplementedError

    def _dataset_extras(self, ds: xr.Dataset) -> xr.Dataset:
        """Hook for subclasses: add grid-type specific variables and attributes."""
        return ds

    # --- shared behaviour -------------------------------------------------------------------

    def locate(self, lon, lat):
        """Cell indices ``(i, j)`` (int64, the broadcast shape of the inputs) of positions.

        ``lon``, ``lat`` in degrees (any longitude range).  -1 in both where the position is
        outside the grid, NaN, or has a latitude beyond +-90.  Processed in chunks of
        :attr:`chunk_size` positions so memory stays bounded.
        """
        lon, lat = np.broadcast_arrays(np.asarray(lon, dtype=float), np.asarray(lat, dtype=float))
        shape = lon.shape
        lon = lon.ravel()
        lat = lat.ravel()
        i = np.full(lon.size, -1, dtype=np.int64)
        j = np.full(lon.size, -1, dtype=np.int64)
        for start in range(0, lon.size, self.chunk_size):
            part = slice(start, start + self.chunk_size)
            lon_part, lat_part = lon[part], lat[part]
            usable = np.isfinite(lon_part) & np.isfinite(lat_part) & (np.abs(lat_part) <= 90.0)
            if usable.all():  # the usual case: no copies of the positions, no scatter
                i[part], j[part] = self._locate_valid(lon_part, lat_part)
            elif usable.any():
                i_found, j_found = self._locate_valid(lon_part[usable], lat_part[usable])
                i[part][usable] = i_found
                j[part][usable] = j_found
        return i.reshape(shape), j.reshape(shape)

    def _valid_cells(self, i, j):
        i, j = np.broadcast_arrays(np.asarray(i, dtype=np.int64), np.asarray(j, dtype=np.int64))
        valid = (i >= 0) & (i < self.nx) & (j >= 0) & (j < self.ny)
        return i, j, valid

    def layer_index(self, depth):
        """Layer index k (int64) of each depth in m positive down: ``z_k <= depth < z_{k+1}``
        with ``z = layer_interfaces``; -1 if NaN, negative or at/below the deepest interface."""
        return layer_index_from_depth(depth, self.layer_interfaces)

    def axis_angle(self, i, j):
        """Angle in radians of the grid's +i axis, counterclockwise from local east, at the
        centre of cell (j, i) (the CF quantity ``angle_of_rotation_from_east_to_x``).
        NaN where (i, j) is not a cell (e.g. -1 from :meth:`locate`)."""
        i, j, valid = self._valid_cells(i, j)
        angle = np.full(i.shape, np.nan)
        if valid.any():
            angle[valid] = self._axis_angle_valid(i[valid], j[valid])
        return angle

    @property
    def angle(self) -> np.ndarray:
        """Axis angle of every cell, radians, shape (ny, nx)."""
        j, i = np.indices(self.shape)
        return self.axis_angle(i, j)

    def east_north_to_grid(self, u_east, v_north, i, j):
        """Rotate east/north vector components onto the grid axes of cell (j, i).

        .. math:: u_x = u \\cos a + v \\sin a, \\qquad v_y = -u \\sin a + v \\cos a

        with ``a = axis_angle(i, j)``: ``u_x`` is the component along +i, ``v_y`` along +j
        (90 degrees counterclockwise from +i).  E.g. a = 90 degrees (+i pointing north):
        ``u_x = v``, ``v_y = -u``.  Units are those of the input; NaN outside the grid.
        """
        return east_north_to_grid(u_east, v_north, self.axis_angle(i, j))

    def grid_to_east_north(self, u_x, v_y, i, j):
        """Inverse of :meth:`east_north_to_grid`: components along +i/+j back to east/north."""
        return grid_to_east_north(u_x, v_y, self.axis_angle(i, j))

    def cell_center_distance(self, lon, lat, i, j):
        """Distance in m from each position (degrees) to the centre of cell (j, i).

        Great-circle distance on the mean Earth sphere (haversine, see
        :func:`obsprep.geo.sphere.great_circle_distance`; within -0.45 % .. +0.56 % of the
        WGS 84 geodesic).  NaN where (i, j) is not a cell.
        """
        i, j, valid = self._valid_cells(i, j)
        lon, lat, i, j = np.broadcast_arrays(np.asarray(lon, float), np.asarray(lat, float), i, j)
        valid = np.broadcast_to(valid, i.shape)
        distance = np.full(i.shape, np.nan)
        if valid.any():
            jv, iv = j[valid], i[valid]
            distance[valid] = great_circle_distance(lon[valid], lat[valid],
                                                    self.lon_center[jv, iv],
                                                    self.lat_center[jv, iv])
        return distance

    def cell_area(self, i, j):
        """Approximate area in m^2 of cells (j, i): the product of the cell's widths along i and
        along j, each half the great-circle distance between the centres of its two neighbours
        (one-sided at the grid's edges; a grid of one cell along an axis has no width: NaN).
        Exact to first order for an orthogonal grid (common practice)."""
        i = np.asarray(i, dtype=np.int64)
        j = np.asarray(j, dtype=np.int64)
        lon, lat = self.lon_center, self.lat_center

        def width(lo_j, lo_i, hi_j, hi_i, steps):
            with np.errstate(invalid="ignore", divide="ignore"):
                return great_circle_distance(lon[lo_j, lo_i], lat[lo_j, lo_i],
                                             lon[hi_j, hi_i], lat[hi_j, hi_i]) / steps

        i_lo, i_hi = np.maximum(i - 1, 0), np.minimum(i + 1, self.nx - 1)
        j_lo, j_hi = np.maximum(j - 1, 0), np.minimum(j + 1, self.ny - 1)
        along_i = width(j, i_lo, j, i_hi, np.where(i_hi > i_lo, i_hi - i_lo, np.nan))
        along_j = width(j_lo, i, j_hi, i, np.where(j_hi > j_lo, j_hi - j_lo, np.nan))
        return along_i * along_j

    def classify(self, lon, lat, depth):
        """Cell, layer and rejection reason of each observation position.

        ``lon``, ``lat`` degrees, ``depth`` m positive down (broadcast together).  Returns
        ``(i, j, k, reason)``: int64 indices (-1 where undefined) and an object array of reason
        codes, "" for a kept position, else the first failing test in this order:

        1. ``outside_grid``: not in any cell (NaN positions included);
        2. ``land``: the cell is land;
        3. ``below_bathymetry``: depth greater than the cell's bathymetry;
        4. ``below_deepest_layer``: no model layer holds the depth (at/below the deepest
           interface; NaN and negative depths are counted here too).
        """
        i, j, k, code = self.classify_codes(lon, lat, depth)
        reason = np.array(("",) + CLASSIFY_REASONS, dtype=object)[code]
        return i, j, k, reason

    def classify_codes(self, lon, lat, depth):
        """:meth:`classify` with the reason as an int8 code: 0 kept, else 1 + its position in
        :data:`CLASSIFY_REASONS` (cheaper than strings for millions of positions)."""
        lon, lat, depth = np.broadcast_arrays(np.asarray(lon, float), np.asarray(lat, float),
                                              np.asarray(depth, float))
        i, j = self.locate(lon, lat)
        k = self.layer_index(depth)
        inside = i >= 0
        i_safe = np.where(inside, i, 0)
        j_safe = np.where(inside, j, 0)
        land = inside & ~self.sea_mask[j_safe, i_safe]
        sea = inside & ~land
        too_deep = sea & (depth > self.bathymetry[j_safe, i_safe])
        no_layer = sea & ~too_deep & (k < 0)
        code = np.zeros(i.shape, dtype=np.int8)
        code[~inside] = 1
        code[land] = 2
        code[too_deep] = 3
        code[no_layer] = 4
        return i, j, k, code

    def to_dataset(self) -> xr.Dataset:
        """CF dataset of the grid: lon/lat centres, sea mask, bathymetry, axis angle (degrees)
        and layer interfaces.  Writing it with ``to_netcdf`` gives a file that
        :meth:`CurvilinearGrid.from_file` reads."""
        ds = grid_dataset(self.lon_center, self.lat_center, self.sea_mask, self.bathymetry,
                          self.angle, self.layer_interfaces,
                          attrs={"title": "obsprep model grid", "grid_type": self.grid_type})
        return self._dataset_extras(ds)

    def apply_mask_file(self, path, *, mask_variable=None, bathymetry_variable=None) -> None:
        """Take the sea mask and bathymetry from a netCDF file of shape (ny, nx).

        Variables are found by standard_name, or by the names ``mask_variable`` and
        ``bathymetry_variable`` (see :func:`obsprep.geo.grid.gridfile.read_grid_file`); the file
        must yield both.  When the file has cell-centre coordinates, each must fall in the grid
        cell of the same index, which catches files stored north-to-south or on another grid.
        Raises :class:`InputFileError` naming the file and variable.
        """
        contents = read_grid_file(path, self.shape, mask_variable=mask_variable,
                                  bathymetry_variable=bathymetry_variable,
                                  need_mask_and_bathymetry=True)
        if contents.lon is not None:
            j_own, i_own = np.indices(self.shape)
            i_found, j_found = self.locate(contents.lon, contents.lat)
            wrong = (i_found != i_own) | (j_found != j_own)
            if wrong.any():
                jw, iw = np.argwhere(wrong)[0]
                raise InputFileError(
                    path, f"{int(wrong.sum())} of {wrong.size} cell centres do not fall in the "
                    f"grid cell of the same index (first at j={jw}, i={iw}: file centre "
                    f"{contents.lon[jw, iw]:.6g} E, {contents.lat[jw, iw]:.6g} N, grid centre "
                    f"{self.lon_center[jw, iw]:.6g} E, {self.lat_center[jw, iw]:.6g} N); "
                    "expected the grid's cell order (rows j from the grid's first row)",
                    variable=contents.names.get("lon"))
        self.sea_mask = contents.sea_mask
        self.bathymetry = contents.bathymetry
        self.mask_file = str(path)

    def __repr__(self):
        return f"<{type(self).__name__} ny={self.ny} nx={self.nx} nk={self.nk}>"
