"""Regular longitude/latitude grid."""

from __future__ import annotations

from functools import cached_property

import numpy as np
import xarray as xr

from obsprep.exceptions import GridError
from obsprep.geo.grid.base import ModelGrid
from obsprep.geo.sphere import wrap_longitude

#: relative tolerance when deciding whether nlon * dlon closes the circle
_FULL_CIRCLE_RTOL = 1e-9


def _finite_number(value, name) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise GridError(f"{name} must be a number, got {value!r}")
    value = float(value)
    if not np.isfinite(value):
        raise GridError(f"{name} must be finite, got {value!r}")
    return value


class RegularGrid(ModelGrid):
    """A regular lon/lat grid: cell (j, i) spans longitudes
    ``[lon_min + i dlon, lon_min + (i+1) dlon)`` and latitudes
    ``[lat_min + j dlat, lat_min + (j+1) dlat)``, in degrees.

    ``lon_min``, ``lat_min``: the south-west corner of cell (0, 0); ``dlon``, ``dlat`` > 0;
    ``nlon`` = nx, ``nlat`` = ny.  Longitudes are taken modulo 360, so a grid may cross the
    dateline (e.g. lon_min = 170, nlon * dlon = 20) and ``nlon * dlon = 360`` is periodic.  A
    northern edge at 90 N includes the pole itself.  The +i axis points east: axis angle 0.
    ``mask_file``: optional netCDF file giving sea mask and bathymetry on the (nlat, nlon) cells.
    ``mask_variable``, ``bathymetry_variable``: their variable names in that file, where the
    file lacks the CF standard names.
    """

    grid_type = "regular"

    def __init__(self, lon_min, lat_min, dlon, dlat, nlon, nlat, *, sea_mask=None,
                 bathymetry=None, layer_interfaces=None, mask_file=None, mask_variable=None,
                 bathymetry_variable=None):
        self.lon_min = _finite_number(lon_min, "lon_min")
        self.lat_min = _finite_number(lat_min, "lat_min")
        self.dlon = _finite_number(dlon, "dlon")
        self.dlat = _finite_number(dlat, "dlat")
        if self.dlon <= 0 or self.dlat <= 0:
            raise GridError(f"dlon and dlat must be positive degrees, got {dlon!r} and {dlat!r}")
        super().__init__(nlat, nlon, sea_mask=sea_mask, bathymetry=bathymetry,
                         layer_interfaces=layer_interfaces)
        self.nlon, self.nlat = self.nx, self.ny
        span = self.nlon * self.dlon
        if span > 360.0 * (1 + _FULL_CIRCLE_RTOL):
            raise GridError(f"nlon * dlon = {span} degrees exceeds 360: cells would overlap")
        self.periodic = abs(span - 360.0) <= 360.0 * _FULL_CIRCLE_RTOL
        self.lat_max = self.lat_min + self.nlat * self.dlat
        if self.lat_min < -90.0 or self.lat_max > 90.0 + 1e-9:
            raise GridError(f"latitudes {self.lat_min} .. {self.lat_max} exceed -90 .. 90 degrees")
        self.mask_file = None
        if mask_file is not None:
            self.apply_mask_file(mask_file, mask_variable=mask_variable,
                                 bathymetry_variable=bathymetry_variable)

    @cached_property
    def lon_center(self) -> np.ndarray:
        lon = wrap_longitude(self.lon_min + (np.arange(self.nx) + 0.5) * self.dlon)
        return np.broadcast_to(lon, self.shape)

    @cached_property
    def lat_center(self) -> np.ndarray:
        lat = self.lat_min + (np.arange(self.ny) + 0.5) * self.dlat
        return np.broadcast_to(lat[:, None], self.shape)

    def _locate_valid(self, lon, lat):
        """Floor of the offsets from the south-west corner in cell widths (longitude mod 360)."""
        i = np.floor(((lon - self.lon_min) % 360.0) / self.dlon).astype(np.int64)
        if self.periodic:
            i %= self.nx  # an offset rounded up to exactly 360 belongs to cell 0
        j = np.floor((lat - self.lat_min) / self.dlat).astype(np.int64)
        if self.lat_max >= 90.0 - 1e-9:
            j = np.where(lat == 90.0, self.ny - 1, j)  # the pole is in the last row
        inside = (i >= 0) & (i < self.nx) & (j >= 0) & (j < self.ny)
        return np.where(inside, i, -1), np.where(inside, j, -1)

    def _axis_angle_valid(self, i, j):
        return np.zeros(i.shape)

    def _dataset_extras(self, ds: xr.Dataset) -> xr.Dataset:
        ds.attrs.update(lon_min=self.lon_min, lat_min=self.lat_min, dlon=self.dlon,
                        dlat=self.dlat)
        return ds
