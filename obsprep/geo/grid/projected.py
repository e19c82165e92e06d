"""Regular grid in a map projection (e.g. polar stereographic for sea ice)."""

from __future__ import annotations

from functools import cached_property

import numpy as np
import xarray as xr
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from obsprep.exceptions import GridError
from obsprep.geo.grid.base import ModelGrid
from obsprep.geo.grid.regular import _finite_number
from obsprep.geo.rotation import crs_ellipsoid, projection_axis_angle
from obsprep.geo.sphere import wrap_longitude

#: step of the centred differences of the inverse projection, as a fraction of dx
_STEP_FRACTION = 1e-4


class ProjectedGrid(ModelGrid):
    """A regular grid in projected coordinates: cell (j, i) spans
    ``[x_min + i dx, x_min + (i+1) dx) x [y_min + j dy, y_min + (j+1) dy)``.

    ``crs``: anything ``pyproj.CRS.from_user_input`` accepts (EPSG code, PROJ string, WKT, CF
    grid-mapping dict); ``x_min``, ``y_min``: corner of cell (0, 0) in the CRS units (m);
    ``dx``, ``dy`` > 0 so that +i is +x and +j is +y.

    Positions are taken as longitude/latitude on the CRS's own geodetic datum (no datum shift;
    observation positions carry no datum and the difference is far below a model cell).
    ``mask_file``: optional netCDF file giving sea mask and bathymetry on the (ny, nx) cells.
    ``mask_variable``, ``bathymetry_variable``: their variable names in that file, where the
    file lacks the CF standard names.
    """

    grid_type = "projected"

    def __init__(self, crs, x_min, y_min, dx, dy, nx, ny, *, sea_mask=None, bathymetry=None,
                 layer_interfaces=None, mask_file=None, mask_variable=None,
                 bathymetry_variable=None):
        try:
            self.crs = CRS.from_user_input(crs)
        except CRSError as exc:
            raise GridError(f"cannot build a coordinate reference system from {crs!r}: {exc}") \
                from exc
        if self.crs.is_geographic or self.crs.geodetic_crs is None:
            raise GridError(f"crs {self.crs.name!r} is not a map projection; use a regular grid "
                            "for longitude/latitude cells")
        self.x_min = _finite_number(x_min, "x_min")
        self.y_min = _finite_number(y_min, "y_min")
        self.dx = _finite_number(dx, "dx")
        self.dy = _finite_number(dy, "dy")
        if self.dx <= 0 or self.dy <= 0:
            raise GridError(f"dx and dy must be positive, got {dx!r} and {dy!r}")
        super().__init__(ny, nx, sea_mask=sea_mask, bathymetry=bathymetry,
                         layer_interfaces=layer_interfaces)
        self._forward = Transformer.from_crs(self.crs.geodetic_crs, self.crs, always_xy=True)
        self.mask_file = None
        if mask_file is not None:
            self.apply_mask_file(mask_file, mask_variable=mask_variable,
                                 bathymetry_variable=bathymetry_variable)

    # --- coordinates ---------------------------------------------------------------------------

    def lonlat_to_xy(self, lon, lat):
        """Projected coordinates (m) of positions in degrees; inf where the projection fails."""
        x, y = self._forward.transform(np.asarray(lon, float), np.asarray(lat, float),
                                       errcheck=False)
        return np.asarray(x, float), np.asarray(y, float)

    def xy_to_lonlat(self, x, y):
        """Longitude, latitude (degrees) of projected coordinates in m."""
        lon, lat = self._forward.transform(np.asarray(x, float), np.asarray(y, float),
                                           direction="INVERSE", errcheck=False)
        return wrap_longitude(lon), np.asarray(lat, float)

    @property
    def x_center(self) -> np.ndarray:
        """Projected x of the cell centres, m, shape (nx,)."""
        return self.x_min + (np.arange(self.nx) + 0.5) * self.dx

    @property
    def y_center(self) -> np.ndarray:
        """Projected y of the cell centres, m, shape (ny,)."""
        return self.y_min + (np.arange(self.ny) + 0.5) * self.dy

    @cached_property
    def _centres_lonlat(self):
        x, y = np.meshgrid(self.x_center, self.y_center)
        return self.xy_to_lonlat(x, y)

    @property
    def lon_center(self) -> np.ndarray:
        return self._centres_lonlat[0]

    @property
    def lat_center(self) -> np.ndarray:
        return self._centres_lonlat[1]

    # --- grid behaviour ------------------------------------------------------------------------

    def _locate_valid(self, lon, lat):
        """Forward projection (PROJ through pyproj, always_xy), then floor of the offsets."""
        x, y = self.lonlat_to_xy(lon, lat)
        with np.errstate(invalid="ignore"):
            fi = np.floor((x - self.x_min) / self.dx)
            fj = np.floor((y - self.y_min) / self.dy)
            inside = (fi >= 0) & (fi < self.nx) & (fj >= 0) & (fj < self.ny)  # False for inf/NaN
        return (np.where(inside, fi, -1).astype(np.int64),
                np.where(inside, fj, -1).astype(np.int64))

    def _axis_angle_valid(self, i, j):
        """Axis angle: direction on the Earth of the projection's +x axis, from local east.

        The points ``(x -+ delta, y)`` about each cell centre (``delta = 1e-4 dx``) are
        projected back to (lon, lat) and placed on the CRS's ellipsoid in Earth-centred
        coordinates; their difference, resolved on local east and north
        (:func:`obsprep.geo.sphere.direction_from_east`), gives the angle ``a`` of +x (= +i)
        counterclockwise from east: the CF ``angle_of_rotation_from_east_to_x``, and the same
        quantity :func:`obsprep.geo.rotation.axis_angle_from_centres` estimates from centres.

        On a conformal projection (stereographic, Mercator, Lambert conformal) this is minus the
        meridian convergence ``gamma`` PROJ reports (``Proj.get_factors(...)
        .meridian_convergence``, from true north to grid north, clockwise positive):
        ``a = -gamma``.  On other projections the map's x and y axes are not perpendicular on
        the Earth, and ``a`` is the direction of x.  Computed once per distinct cell.
        """
        cells, inverse = np.unique(j * self.nx + i, return_inverse=True)
        jc, ic = np.divmod(cells, self.nx)
        angle = projection_axis_angle(self.xy_to_lonlat, self.x_center[ic], self.y_center[jc],
                                      _STEP_FRACTION * self.dx, "x", self._ellipsoid)
        return angle[inverse.ravel()]

    @cached_property
    def _ellipsoid(self):
        """(semi-major axis m, flattening) of the CRS's ellipsoid (WGS 84 if unknown)."""
        return crs_ellipsoid(self.crs)

    def _dataset_extras(self, ds: xr.Dataset) -> xr.Dataset:
        grid_mapping = self.crs.to_cf()
        ds = ds.assign_coords(
            x=("x", self.x_center, {"standard_name": "projection_x_coordinate", "units": "m"}),
            y=("y", self.y_center, {"standard_name": "projection_y_coordinate", "units": "m"}))
        ds["crs"] = xr.DataArray(np.int32(0), attrs=grid_mapping)
        for name in ("sea_mask", "bathymetry", "angle"):
            ds[name].attrs["grid_mapping"] = "crs"
        ds.attrs.update(x_min=self.x_min, y_min=self.y_min, dx=self.dx, dy=self.dy)
        return ds
