"""Build the model grid from the ``[grid]`` table of the configuration."""

from __future__ import annotations

from pathlib import Path

from pyproj import CRS
from pyproj.exceptions import CRSError

from obsprep.exceptions import ConfigError, GridError, InputFileError
from obsprep.geo.grid.base import ModelGrid
from obsprep.geo.grid.curvilinear import CurvilinearGrid
from obsprep.geo.grid.limits import MAX_GRID_CELLS, MAX_LAYERS
from obsprep.geo.grid.projected import ProjectedGrid
from obsprep.geo.grid.regular import RegularGrid
from obsprep.geo.grid.vertical import DEFAULT_LAYER_INTERFACES_M, layer_interfaces_from_depths

# key -> (kind, meaning) for each grid type; kinds: "number", "positive", "count", "text", "path"
_KEYS = {
    "regular": {
        "lon_min": ("number", "longitude of the west edge of the first column, degrees"),
        "lat_min": ("number", "latitude of the south edge of the first row, degrees"),
        "dlon": ("positive", "cell width in longitude, degrees"),
        "dlat": ("positive", "cell height in latitude, degrees"),
        "nlon": ("count", "number of columns"),
        "nlat": ("count", "number of rows"),
    },
    "projected": {
        "crs": ("text", "coordinate reference system (EPSG code, PROJ string or WKT)"),
        "x_min": ("number", "projected x of the left edge of the first column, m"),
        "y_min": ("number", "projected y of the lower edge of the first row, m"),
        "dx": ("positive", "cell width, m"),
        "dy": ("positive", "cell height, m"),
        "nx": ("count", "number of columns"),
        "ny": ("count", "number of rows"),
    },
    "curvilinear": {
        "file": ("path", "netCDF grid file with 2-D cell-centre longitude and latitude"),
    },
}
_OPTIONAL = {
    "regular": {"mask_file", "mask_variable", "bathymetry_variable", "layer_interfaces"},
    "projected": {"mask_file", "mask_variable", "bathymetry_variable", "layer_interfaces"},
    "curvilinear": {"mask_variable", "bathymetry_variable", "layer_interfaces"},
}
#: the keys giving the (rows, columns) of each grid type, checked against MAX_GRID_CELLS
_SHAPE_KEYS = {"regular": ("nlat", "nlon"), "projected": ("ny", "nx")}
#: the grid-file key of each grid type that reads mask and bathymetry
_FILE_KEY = {"regular": "mask_file", "projected": "mask_file", "curvilinear": "file"}


def _check(kind, key, value):
    name = f"grid.{key}"
    is_number = isinstance(value, (int, float)) and not isinstance(value, bool)
    if kind in ("number", "positive"):
        if not is_number or value != value or value in (float("inf"), float("-inf")):
            raise ConfigError(name, f"expected a finite number, got {value!r}")
        if kind == "positive" and value <= 0:
            raise ConfigError(name, f"expected a positive number, got {value!r}")
    elif kind == "count":
        if not isinstance(value, int) or isinstance(value, bool) or value < 1:
            raise ConfigError(name, f"expected a positive integer, got {value!r}")
    elif kind in ("text", "path"):
        if not isinstance(value, (str, Path)) or not str(value).strip():
            raise ConfigError(name, f"expected a non-empty string, got {value!r}")
    return value


def _existing_file(key, value, base_dir: Path) -> Path:
    _check("path", key, value)
    path = Path(value).expanduser()
    if not path.is_absolute():
        path = Path(base_dir) / path
    if not path.is_file():
        raise ConfigError(f"grid.{key}", f"file {path} does not exist")
    return path


def _projected_crs(value) -> CRS:
    try:
        crs = CRS.from_user_input(value)
    except CRSError as exc:
        raise ConfigError("grid.crs", f"not a coordinate reference system PROJ knows: {exc}") \
            from exc
    if crs.is_geographic or crs.geodetic_crs is None:
        raise ConfigError("grid.crs", f"{crs.name!r} is not a map projection; use type = "
                          "'regular' for longitude/latitude cells")
    return crs


def check_grid_table(cfg: dict, source=None) -> None:
    """Check the ``[grid]`` table from its values alone (no file is opened): the keys of its
    type, each value's kind, at most :data:`~obsprep.geo.grid.limits.MAX_GRID_CELLS` cells and
    :data:`~obsprep.geo.grid.limits.MAX_LAYERS` layers, and the variable names only with a
    file to read them from.  Raises :class:`ConfigError` naming the key."""
    try:
        _check_table(cfg)
    except ConfigError as exc:
        if source is not None and exc.path is None:  # name the configuration file too
            exc.path = source
            exc.args = (f"{source}: {exc.args[0]}",)
        raise


def _check_table(cfg: dict) -> None:
    if not isinstance(cfg, dict):
        raise ConfigError("grid", f"expected a table, got {type(cfg).__name__}")
    grid_type = cfg.get("type")
    if grid_type not in _KEYS:
        raise ConfigError("grid.type", f"expected one of {', '.join(map(repr, _KEYS))}, "
                          f"got {grid_type!r}")
    required = _KEYS[grid_type]
    allowed = {"type", *required, *_OPTIONAL[grid_type]}
    for key in cfg:
        if key not in allowed:
            raise ConfigError(f"grid.{key}", f"unknown key for a {grid_type} grid; allowed keys: "
                              f"{', '.join(sorted(allowed))}")
    for key, (kind, meaning) in required.items():
        if key not in cfg:
            raise ConfigError(f"grid.{key}", f"missing; expected {meaning}")
        _check(kind, key, cfg[key])
    if grid_type in _SHAPE_KEYS:
        rows, columns = _SHAPE_KEYS[grid_type]
        cells = cfg[rows] * cfg[columns]
        if cells > MAX_GRID_CELLS:
            raise ConfigError(f"grid.{columns}", f"{cfg[columns]} columns x {cfg[rows]} rows "
                              f"(grid.{rows}) = {cells} cells exceeds the limit of "
                              f"{MAX_GRID_CELLS} cells")
    for key in ("mask_variable", "bathymetry_variable"):
        if key in cfg:
            _check("text", key, cfg[key])
            if _FILE_KEY[grid_type] not in cfg:
                raise ConfigError(f"grid.{key}", f"names a variable of grid.{_FILE_KEY[grid_type]}, "
                                  "which is not given")

    interfaces = cfg.get("layer_interfaces", DEFAULT_LAYER_INTERFACES_M)
    if not isinstance(interfaces, (list, tuple)) or not all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in interfaces):
        raise ConfigError("grid.layer_interfaces",
                          f"expected a list of depths in m (0 first), got {interfaces!r}")
    if len(interfaces) - 1 > MAX_LAYERS:
        raise ConfigError("grid.layer_interfaces", f"{len(interfaces) - 1} layers exceed the "
                          f"limit of {MAX_LAYERS} layers")
    try:
        layer_interfaces_from_depths(interfaces)
    except GridError as exc:
        raise ConfigError("grid.layer_interfaces", str(exc)) from exc


def grid_from_config(cfg: dict, base_dir: Path) -> ModelGrid:
    """The model grid described by the ``[grid]`` configuration table ``cfg``.

    ``type`` is "regular" (keys lon_min, lat_min, dlon, dlat, nlon, nlat), "projected" (crs,
    x_min, y_min, dx, dy, nx, ny) or "curvilinear" (file).  Optional: ``mask_file``
    (regular/projected), ``mask_variable`` and ``bathymetry_variable`` (their names in the
    mask or grid file where it lacks the CF standard names) and ``layer_interfaces`` (list of
    depths in m, 0 first; default [0, 1e4], one layer).  Relative paths are resolved against
    ``base_dir``.  The table is checked first (:func:`check_grid_table`: sizes bounded before
    any array is made).  Missing, unknown or bad keys raise :class:`ConfigError` with
    ``key = "grid.<name>"``; so does a mask or grid file that cannot be used or does not yield
    both a land/sea mask and a bathymetry (the message names the file and what is missing).
    """
    check_grid_table(cfg)
    grid_type = cfg["type"]
    interfaces = layer_interfaces_from_depths(cfg.get("layer_interfaces",
                                                      DEFAULT_LAYER_INTERFACES_M))
    variables = {"mask_variable": cfg.get("mask_variable"),
                 "bathymetry_variable": cfg.get("bathymetry_variable")}
    file_key = _FILE_KEY[grid_type]
    path = _existing_file(file_key, cfg[file_key], base_dir) if file_key in cfg else None
    try:
        if grid_type == "regular":
            return RegularGrid(cfg["lon_min"], cfg["lat_min"], cfg["dlon"], cfg["dlat"],
                               cfg["nlon"], cfg["nlat"], layer_interfaces=interfaces,
                               mask_file=path, **variables)
        if grid_type == "projected":
            crs = _projected_crs(cfg["crs"])
            return ProjectedGrid(crs, cfg["x_min"], cfg["y_min"], cfg["dx"], cfg["dy"],
                                 cfg["nx"], cfg["ny"], layer_interfaces=interfaces,
                                 mask_file=path, **variables)
        return CurvilinearGrid.from_file(path, layer_interfaces=interfaces, **variables)
    except GridError as exc:
        raise ConfigError("grid", str(exc)) from exc
    except InputFileError as exc:
        # the grid is part of the configuration: a file that cannot give it stops the run
        # as a configuration error, naming the file and what is missing
        raise ConfigError(f"grid.{file_key}", str(exc)) from exc
