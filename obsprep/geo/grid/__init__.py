"""The model grid: which cell and layer an observation falls in, the local grid axes, and the
land/sea mask and bathymetry used by the grid checks.

Three kinds of horizontal grid share one interface (:class:`ModelGrid`):

- :class:`RegularGrid`: regular longitude/latitude cells (dateline and global grids allowed);
- :class:`ProjectedGrid`: regular cells in a map projection (PROJ through pyproj);
- :class:`CurvilinearGrid`: any logically rectangular grid given by its 2-D cell centres.

:func:`grid_from_config` builds one from the ``[grid]`` configuration table;
:func:`write_grid_file` writes the netCDF grid file :meth:`CurvilinearGrid.from_file` reads.
"""

from obsprep.geo.grid.base import BELOW_BATHYMETRY, BELOW_DEEPEST_LAYER, LAND, OUTSIDE_GRID, ModelGrid
from obsprep.geo.grid.curvilinear import CurvilinearGrid
from obsprep.geo.grid.gridfile import grid_dataset, read_grid_file, write_grid_file
from obsprep.geo.grid.limits import MAX_GRID_CELLS, MAX_LAYERS
from obsprep.geo.grid.projected import ProjectedGrid
from obsprep.geo.grid.regular import RegularGrid
from obsprep.geo.grid.vertical import layer_index_from_depth, layer_interfaces_from_depths
from obsprep.geo.rotation import axis_angle_from_centres, east_north_to_grid, grid_to_east_north
from obsprep.geo.sphere import EARTH_MEAN_RADIUS_M, great_circle_distance


def grid_from_config(cfg: dict, base_dir=None) -> ModelGrid:
    """The model grid of a ``[grid]`` configuration table (:func:`obsprep.settings.grid.grid_from_config`;
    imported when called, since the settings module builds on the grid classes of this package)."""
    from obsprep.settings.grid import grid_from_config as from_settings

    return from_settings(cfg, base_dir)


__all__ = [
    "ModelGrid", "RegularGrid", "ProjectedGrid", "CurvilinearGrid", "grid_from_config",
    "write_grid_file", "read_grid_file", "grid_dataset", "east_north_to_grid",
    "grid_to_east_north", "axis_angle_from_centres", "great_circle_distance",
    "EARTH_MEAN_RADIUS_M", "layer_interfaces_from_depths", "layer_index_from_depth",
    "OUTSIDE_GRID", "LAND", "BELOW_BATHYMETRY", "BELOW_DEEPEST_LAYER", "MAX_GRID_CELLS",
    "MAX_LAYERS",
]
