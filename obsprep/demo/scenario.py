"""Writers of the "weddell-spring" demo scenario: model grid, observation files, truth, config.

Every observation is the known truth (:mod:`obsprep.demo.truth`) at the observation's position
and time, plus a sub-cell variability the model grid cannot resolve, plus Gaussian noise of a
known standard deviation per sensor, correlated within an error group (an altimeter pass, an
infrared SST granule; :mod:`obsprep.demo.noise`), drawn from a seeded generator
(``numpy.random.default_rng([seed, stream])``, one stream per file), so two runs with the same
seed write the same values.  Files are CF-1.10 netCDF-4 following
``docs/file-conventions.md``; they are written with netCDF4 from whole numpy arrays.

Where a file is packed (``scale_factor``/``add_offset``), the noise is drawn with the standard
deviation *as stored* (already rounded to the packing step), so the uncertainty variable a
reader decodes is the exact sigma of the noise.  Positions are rounded to the stored precision
before the truth is evaluated, so the truth at the decoded positions is the truth that was used.

Layout of a scenario directory::

    weddell_spring.toml              build configuration (schemas/config.schema.json)
    manifest.json                    scenario, files, sensor sigmas, analysis time
    grid/model_grid.nc               model grid: mask, bathymetry, cell-centre lat/lon
    truth/truth_on_grid.nc           truth of the surface quantities on the model grid
    obs/altimetry/alt_a_YYYYMMDD.nc  along-track sea level anomaly, one file per sensor and day
    obs/sst_swath/sst_l2_YYYYMMDDTHHMMSS.nc   infrared SST granules (packed int16 K)
    obs/sst_grid/sst_l4_YYYYMMDD.nc           gridded SST (0.1 deg)
    obs/sst_microwave/sst_mw_YYYYMMDD.nc      microwave SST (0.25 deg, obsprep.demo.sst_microwave)
    obs/ice_conc/sic_YYYYMMDD.nc              ice concentration (%, 25 km polar stereographic)
    obs/ice_drift/drift_YYYYMMDD-YYYYMMDD.nc  48 h ice drift along projection axes (km)
    obs/profiles/ts_profiles_*.nc             T/S profiles (CF DSG featureType profile)
    ensemble/ensemble_YYYYMMDD.nc             20-member model ensemble (obsprep.demo.ensemble)
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import netCDF4
import numpy as np
import pyproj
from scipy import ndimage

from obsprep.demo import truth
from obsprep.demo.noise import (
    ERROR_CORRELATION,
    FOOTPRINT_KM2,
    SUBCELL_SIGMA,
    sensor_noise,
    subcell_variability,
)
from obsprep.geo.seawater import depth_from_pressure, pressure_from_depth
from obsprep.model.quantities import get_quantity

SCENARIO_NAME = "weddell-spring"
CONFIG_NAME = "weddell_spring.toml"
MANIFEST_NAME = "manifest.json"

#: model grid of the scenario (cell centres at x_min + (i + 0.5) dx, y_min + (j + 0.5) dy)
MODEL_GRID = {"crs": truth.MODEL_CRS, "x_min": -2600000.0, "y_min": 600000.0,
              "dx": 10000.0, "dy": 10000.0, "nx": 300, "ny": 260}
LAYER_INTERFACES_M = truth.LAYER_INTERFACES_M
WINDOW_START_HOURS, WINDOW_END_HOURS, SLOT_HOURS = -72.0, 0.0, 24.0

# --- sensors ----------------------------------------------------------------------------------
ALTIMETER_SIGMA_M = {"altimeter_a": 0.03, "altimeter_b": 0.04, "altimeter_c": 0.035}
SST_SWATH_SIGMA_K = (0.30, 0.45)          # at nadir, at the swath edge (grows with view angle^2)
SST_SWATH_GROSS_COLD_BIAS_K = (0.5, 3.0)  # uniform range of the error of cloud_suspected pixels
SST_GRID_SIGMA_K = 0.5
ICE_DRIFT_SIGMA_KM = 2.0
PROFILE_SIGMA = {"sea_water_temperature": 0.01, "sea_water_salinity": 0.01}
#: noise of ice concentration is a Gaussian truncated at this many sigma (see _truncated_normal)
ICE_CONCENTRATION_TRUNCATION = 5.0

#: invented platforms
PLATFORMS = {"altimeter_a": "Skua-1", "altimeter_b": "Petrel-2", "altimeter_c": "Prion-5",
             "sst_swath_ir": "Fulmar-3",
             "sst_grid": "demo-sst-analysis", "sst_microwave": "Gannet-4",
             "ice_concentration": "demo-ice-radiometry",
             "ice_drift": "demo-ice-motion", "ts_profiles": "various"}

#: projection of the ice-concentration product: polar stereographic on a sphere
ICE_CONCENTRATION_CRS = ("+proj=stere +lat_0=-90 +lat_ts=-70 +lon_0=0 +x_0=0 +y_0=0 "
                         "+R=6371000 +units=m +no_defs")
ICE_CONCENTRATION_CELL_M = 25000.0
ICE_CONCENTRATION_EXTENT_M = (-2800000.0, 600000.0, 400000.0, 3400000.0)  # x0, x1, y0, y1
#: projection of the ice-drift product: polar stereographic centred on 45 deg W (WGS 84)
ICE_DRIFT_CRS = ("+proj=stere +lat_0=-90 +lat_ts=-70 +lon_0=-45 +x_0=0 +y_0=0 "
                 "+datum=WGS84 +units=m +no_defs")
ICE_DRIFT_CENTRAL_LONGITUDE = -45.0
ICE_DRIFT_CELL_M = 62500.0
ICE_DRIFT_HOURS = 48.0
ICE_DRIFT_MIN_CONCENTRATION = 0.3

GLOBAL_ATTRIBUTES = {
    "Conventions": "CF-1.10",
    "institution": "obsprep demo scenario (synthetic data)",
    "source": "synthetic: the analytic truth of obsprep.demo.truth plus Gaussian noise",
    "comment": "Invented data for testing and demonstrating obsprep; not a real product.",
    "scenario": SCENARIO_NAME,
}

EARTH_ROTATION_RAD_S = 7.2921159e-5       # sidereal rotation rate (IERS value, from memory)


@dataclass(frozen=True)
class Orbit:
    """Circular orbit for a simple ground-track model (spherical Earth, no perturbations
    except a constant nodal drift): inclination (deg), period (s), longitude of the ascending
    node at the truth epoch (deg), argument of latitude at the epoch (deg), nodal drift (deg/day).
    """

    inclination_deg: float
    period_s: float
    node_longitude_deg: float
    phase_deg: float
    nodal_drift_deg_per_day: float = 0.9856   # sun-synchronous drift


ORBITS = {
    "altimeter_a": Orbit(98.5, 6060.0, 20.0, 0.0),
    "altimeter_b": Orbit(92.0, 5950.0, 140.0, 75.0, 0.2),
    "altimeter_c": Orbit(81.5, 6020.0, 250.0, 140.0, 0.6),
    "sst_swath_ir": Orbit(98.7, 6090.0, 60.0, 30.0),
}
SWATH_ROWS, SWATH_COLUMNS = 1000, 800       # full-size pass of one day
#: granule files per day's pass (real L2P granules are a few minutes of a pass each)
SWATH_GRANULES_PER_DAY = 8
SWATH_NADIR_PIXEL_KM = 1.2
SWATH_MAX_VIEW_DEG = 45.0
SWATH_GROUND_SPEED_KM_S = 6.6
#: granule centre targets (lon, lat), one per window day: the open water and the ice edge
SWATH_TARGETS = ((-45.0, -60.5), (-34.0, -61.0), (-52.0, -61.5))
SWATH_ICE_THRESHOLD = 0.15            # truth concentration above which a pixel sees ice


@dataclass(frozen=True)
class _Scenario:
    root: Path
    analysis_time: np.datetime64           # datetime64[s]
    seed: int
    scale: float
    misassign: str | None = None           # sensor given half its true error in the config

    @property
    def window(self):
        hour = np.timedelta64(3600, "s")
        return (self.analysis_time + int(WINDOW_START_HOURS) * hour,
                self.analysis_time + int(WINDOW_END_HOURS) * hour)

    @property
    def days(self):
        """UTC days (datetime64[D]) overlapping the window [start, end)."""
        start, end = self.window
        first = start.astype("datetime64[D]")
        last = (end - np.timedelta64(1, "s")).astype("datetime64[D]")
        return [first + k for k in range(int((last - first).astype(int)) + 1)]

    def rng(self, *stream):
        return np.random.default_rng([self.seed, *stream])

    def path(self, relative):
        path = self.root / relative
        path.parent.mkdir(parents=True, exist_ok=True)
        return path


# --- netCDF helpers ---------------------------------------------------------------------------

def _create(path, title, **attributes):
    ds = netCDF4.Dataset(path, "w", format="NETCDF4")
    ds.setncatts({"title": title, **GLOBAL_ATTRIBUTES, **attributes})
    return ds


def _variable(ds, name, dims, dtype, data, attrs, fill=None, compress=True):
    """Create and fill a variable, writing ``data`` as raw stored values (no auto-packing)."""
    kwargs = {}
    if dtype is not str and compress:
        kwargs = {"zlib": True, "complevel": 4, "shuffle": True}
    variable = ds.createVariable(name, dtype, dims, fill_value=fill if fill is not None else False,
                                 **kwargs)
    variable.set_auto_maskandscale(False)
    if attrs:
        variable.setncatts(attrs)
    if dtype is str:
        for index, value in np.ndenumerate(np.asarray(data, dtype=object)):
            variable[index] = value
    else:
        variable[...] = np.asarray(data)
    return variable


def _pack(values, scale_factor, add_offset, fill, dtype, valid):
    """Packed integers round((values - add_offset) / scale_factor), ``fill`` where not valid
    (CF conventions, section 8.1: unpacked = packed * scale_factor + add_offset)."""
    packed = np.round((np.asarray(values, dtype=np.float64) - add_offset) / scale_factor)
    packed = np.where(valid, packed, fill)
    limits = np.iinfo(dtype)
    if packed.min(initial=fill) < limits.min or packed.max(initial=fill) > limits.max:
        raise ValueError(f"values do not fit the {np.dtype(dtype).name} packing")  # a bug here
    return packed.astype(dtype)


def _time_number(times, units_epoch, unit_seconds):
    """CF time numbers: (times - epoch) in units of ``unit_seconds`` seconds (float64)."""
    delta = (np.asarray(times, dtype="datetime64[ns]") - np.datetime64(units_epoch, "ns"))
    return delta / np.timedelta64(1, "ns") / (unit_seconds * 1e9)


def _grid_mapping_variable(ds, name, crs):
    attrs = crs.to_cf()
    return _variable(ds, name, (), np.int32, 0, attrs, compress=False)


def _bounds(centres, step):
    return np.stack([centres - step / 2.0, centres + step / 2.0], axis=-1)


def _projected_axes(ds, x, y, step_x, step_y, description):
    ds.createDimension("x", x.size)
    ds.createDimension("y", y.size)
    ds.createDimension("nv", 2)
    for axis, values, step in (("x", x, step_x), ("y", y, step_y)):
        _variable(ds, axis, (axis,), np.float64, values, {
            "standard_name": f"projection_{axis}_coordinate", "units": "m",
            "axis": axis.upper(), "long_name": f"{axis} of {description} cell centres",
            "bounds": f"{axis}_bnds"})
        _variable(ds, f"{axis}_bnds", (axis, "nv"), np.float64, _bounds(values, step), {})


def _lonlat_variables(ds, dims, lon, lat, dtype=np.float64, what="cell centre"):
    _variable(ds, "lon", dims, dtype, lon, {"standard_name": "longitude", "units": "degrees_east",
                                            "long_name": f"{what} longitude"})
    _variable(ds, "lat", dims, dtype, lat, {"standard_name": "latitude", "units": "degrees_north",
                                            "long_name": f"{what} latitude"})


# --- model grid -------------------------------------------------------------------------------

def model_grid_axes():
    """Cell-centre coordinates (m) of the model grid along x and y (EPSG:3031)."""
    g = MODEL_GRID
    return (g["x_min"] + (np.arange(g["nx"]) + 0.5) * g["dx"],
            g["y_min"] + (np.arange(g["ny"]) + 0.5) * g["dy"])


def model_grid_lonlat():
    """Cell-centre longitude and latitude (degrees), shape (ny, nx), from PROJ (pyproj)."""
    x, y = model_grid_axes()
    xx, yy = np.meshgrid(x, y)
    to_lonlat = pyproj.Transformer.from_crs(MODEL_GRID["crs"], "EPSG:4326", always_xy=True)
    lon, lat = to_lonlat.transform(xx, yy)
    return np.asarray(lon), np.asarray(lat)


def _model_grid_coordinates(ds, x, y, lon, lat):
    """The model grid's projected axes, grid mapping ``crs`` and 2-D lon/lat of the centres."""
    _projected_axes(ds, x, y, MODEL_GRID["dx"], MODEL_GRID["dy"], "model grid")
    _grid_mapping_variable(ds, "crs", pyproj.CRS(MODEL_GRID["crs"]))
    _lonlat_variables(ds, ("y", "x"), lon, lat)


def _write_model_grid(scn):
    path = scn.path("grid/model_grid.nc")
    x, y = model_grid_axes()
    lon, lat = model_grid_lonlat()
    sea = ~truth.is_land(lon, lat)
    depth = truth.sea_floor_depth(lon, lat)
    with _create(path, "weddell-spring demo model grid (10 km, south polar stereographic)",
                 comment="Invented geography. Cell centres at x_min + (i + 0.5) dx, "
                         "y_min + (j + 0.5) dy; land includes the ice shelves.") as ds:
        _model_grid_coordinates(ds, x, y, lon, lat)
        common = {"grid_mapping": "crs", "coordinates": "lat lon"}
        _variable(ds, "sea_mask", ("y", "x"), np.int8, sea.astype(np.int8), {
            "standard_name": "sea_binary_mask", "units": "1", "long_name": "model sea mask",
            "flag_values": np.array([0, 1], dtype=np.int8), "flag_meanings": "land sea",
            **common})
        _variable(ds, "bathymetry", ("y", "x"), np.float32,
                  np.where(sea, depth, -9999.0).astype(np.float32), {
                      "standard_name": "sea_floor_depth_below_geoid", "units": "m",
                      "positive": "down", "long_name": "model sea-floor depth", **common},
                  fill=np.float32(-9999.0))
        # the +x axis of a south polar stereographic map points east rotated by (lon - lon0)
        # counterclockwise; lon0 = 0 for EPSG:3031
        _variable(ds, "angle", ("y", "x"), np.float64, lon, {
            "standard_name": "angle_of_rotation_from_east_to_x", "units": "degree",
            "long_name": "angle of the grid +x axis, counterclockwise from east", **common})
    return path, {"cells": int(sea.size), "sea_cells": int(sea.sum())}


#: a regular lon/lat grid over the same sea (examples/regular_grid.toml)
REGULAR_GRID = {"lon_min": -70.0, "lat_min": -78.0, "dlon": 0.25, "dlat": 0.1, "nlon": 320,
                "nlat": 230}
#: a curvilinear grid (examples/curvilinear_grid.toml): 20 km cells of a polar stereographic
#: plane turned by 30 degrees about the domain centre, so its axes follow neither east nor the
#: EPSG:3031 axes; stored as 2-D lon/lat of cell centres without an angle variable
CURVILINEAR_GRID = {"nx": 140, "ny": 120, "cell_m": 20000.0, "turn_deg": 30.0,
                    "centre_m": (-1100000.0, 1900000.0)}


def _write_example_grids(scn):
    """Mask and bathymetry on the regular example grid, and the curvilinear example grid file."""
    from obsprep.geo.grid import write_grid_file

    g = REGULAR_GRID
    lon = g["lon_min"] + (np.arange(g["nlon"]) + 0.5) * g["dlon"]
    lat = g["lat_min"] + (np.arange(g["nlat"]) + 0.5) * g["dlat"]
    lon2, lat2 = np.meshgrid(lon, lat)
    sea = ~truth.is_land(lon2, lat2)
    depth = np.where(sea, truth.sea_floor_depth(lon2, lat2), np.nan)
    regular = scn.path("grid/regular_grid_mask.nc")
    write_grid_file(regular, lon2, lat2, sea, depth)

    c = CURVILINEAR_GRID
    a = np.deg2rad(c["turn_deg"])
    u = (np.arange(c["nx"]) - (c["nx"] - 1) / 2.0) * c["cell_m"]
    v = (np.arange(c["ny"]) - (c["ny"] - 1) / 2.0) * c["cell_m"]
    uu, vv = np.meshgrid(u, v)
    x = c["centre_m"][0] + uu * np.cos(a) - vv * np.sin(a)
    y = c["centre_m"][1] + uu * np.sin(a) + vv * np.cos(a)
    to_lonlat = pyproj.Transformer.from_crs(MODEL_GRID["crs"], "EPSG:4326", always_xy=True)
    clon, clat = (np.asarray(t) for t in to_lonlat.transform(x, y))
    csea = ~truth.is_land(clon, clat)
    cdepth = np.where(csea, truth.sea_floor_depth(clon, clat), np.nan)
    curvilinear = scn.path("grid/curvilinear_grid.nc")
    write_grid_file(curvilinear, clon, clat, csea, cdepth)
    return {"regular_mask": regular, "curvilinear": curvilinear}


# --- altimetry --------------------------------------------------------------------------------

def ground_track(orbit: Orbit, times):
    """Sub-satellite longitude, latitude (degrees) and argument of latitude u (rad) at ``times``.

    Circular orbit over a rotating spherical Earth: lat = asin(sin i sin u),
    lon = node + atan2(cos i sin u, cos u) - omega_E t, u = u0 + 2 pi t / T (standard two-body
    ground-track geometry, e.g. Vallado, Fundamentals of Astrodynamics; from memory).
    """
    elapsed = np.asarray(times, dtype="datetime64[ns]") - truth.TRUTH_EPOCH
    seconds = elapsed / np.timedelta64(1, "s")
    inclination = np.radians(orbit.inclination_deg)
    u = np.radians(orbit.phase_deg) + 2.0 * np.pi * seconds / orbit.period_s
    lat = np.degrees(np.arcsin(np.sin(inclination) * np.sin(u)))
    node = np.radians(orbit.node_longitude_deg
                      + orbit.nodal_drift_deg_per_day * seconds / truth.SECONDS_PER_DAY)
    lon = np.degrees(node + np.arctan2(np.cos(inclination) * np.sin(u), np.cos(u))
                     - EARTH_ROTATION_RAD_S * seconds)
    return (lon + 180.0) % 360.0 - 180.0, lat, u


def _inside_model_domain(lon, lat, margin_m=0.0):
    x, y = truth.map_xy_km(lon, lat)
    g = MODEL_GRID
    x_max, y_max = g["x_min"] + g["nx"] * g["dx"], g["y_min"] + g["ny"] * g["dy"]
    return ((x * 1000 >= g["x_min"] - margin_m) & (x * 1000 <= x_max + margin_m)
            & (y * 1000 >= g["y_min"] - margin_m) & (y * 1000 <= y_max + margin_m))


def _write_altimetry(scn, sensor, sensor_index):
    sigma = ALTIMETER_SIGMA_M[sensor]
    orbit = ORBITS[sensor]
    paths, counts = [], {}
    letter = sensor.rsplit("_", 1)[-1]
    for day_index, day in enumerate(scn.days):
        # 1 Hz sampling with a sub-second offset of our own, kept where the track is over the
        # domain (plus a 50 km margin: a few points fall outside and are rejected later)
        times = (day.astype("datetime64[ms]") + np.timedelta64(370, "ms")
                 + np.arange(86400) * np.timedelta64(1000, "ms"))
        lon, lat, u = ground_track(orbit, times)
        keep = _inside_model_domain(lon, lat, margin_m=50000.0)
        times, lon, lat, u = times[keep], lon[keep], lat[keep], u[keep]
        # passes split at the turning latitudes (u = pi/2, 3pi/2): half revolutions
        pass_number = np.floor((u + np.pi / 2.0) / np.pi).astype(np.int32)
        rng = scn.rng(1, sensor_index, day_index)
        # the reader's error group of a value is its pass_number (cf_role trajectory_id)
        value = (truth.sea_level_anomaly(lon, lat, times)
                 + subcell_variability(rng, "sea_level_anomaly", lon.size)
                 + sensor_noise(rng, sensor, np.full(lon.size, sigma), pass_number))
        present = rng.random(lon.size) >= 0.01           # 1 % dropouts
        path = scn.path(f"obs/altimetry/alt_{letter}_{day.astype(object):%Y%m%d}.nc")
        with _create(path, f"demo along-track sea level anomaly, {sensor}",
                     platform=PLATFORMS[sensor]) as ds:
            ds.createDimension("time", lon.size)
            _variable(ds, "time", ("time",), np.float64,
                      _time_number(times, "2000-01-01", 1.0), {
                          "standard_name": "time", "units": "seconds since 2000-01-01 00:00:00",
                          "calendar": "standard", "axis": "T"})
            _lonlat_variables(ds, ("time",), lon, lat, what="measurement")
            _variable(ds, "pass_number", ("time",), np.int32, pass_number, {
                "cf_role": "trajectory_id",
                "long_name": "pass number (half revolutions since an arbitrary epoch)"})
            _variable(ds, "sla", ("time",), np.int16,
                      _pack(value, 0.001, 0.0, 32767, np.int16, present), {
                          "standard_name": "sea_surface_height_above_sea_level", "units": "m",
                          "long_name": "sea level anomaly", "scale_factor": 0.001,
                          "add_offset": 0.0, "coordinates": "time lat lon"}, fill=np.int16(32767))
        paths.append(path)
        counts[path.name] = int(lon.size)
    return paths, counts


# --- SST swath --------------------------------------------------------------------------------

def _geodesic_forward(lon, lat, azimuth, distance_m):
    geod = pyproj.Geod(ellps="WGS84")
    lon2, lat2, _ = geod.fwd(lon, lat, azimuth, distance_m)
    return np.asarray(lon2), np.asarray(lat2)


def _swath_granule(scn, day_index, rows, columns):
    """Pixel lon, lat (float32-rounded), time and view angle of one granule on window day
    ``day_index``: the pass of the day nearest to that day's target."""
    orbit = ORBITS["sst_swath_ir"]
    day = scn.days[day_index]
    centre_lon, centre_lat = SWATH_TARGETS[day_index % len(SWATH_TARGETS)]
    # the pass over the target: closest approach of the ground track in the day
    search = (day.astype("datetime64[ms]") + np.timedelta64(3600, "s")
              + np.arange(0, 22 * 3600, 10) * np.timedelta64(10 ** 3, "ms"))
    lon, lat, _ = ground_track(orbit, search)
    x, y = truth.map_xy_km(lon, lat)
    cx, cy = truth.map_xy_km(centre_lon, centre_lat)
    closest = search[np.argmin(np.hypot(x - cx, y - cy))]
    # the track crosses the target latitude near there; the granule is turned about the polar
    # axis (an isometry) so that crossing falls on the target, as if the node were there
    near = closest + np.arange(-1200, 1201) * np.timedelta64(1000, "ms")
    near_lon, near_lat, _ = ground_track(orbit, near)
    crossing = np.argmin(np.abs(near_lat - centre_lat))
    centre_time, node_shift = near[crossing], centre_lon - near_lon[crossing]
    row_seconds = SWATH_NADIR_PIXEL_KM / SWATH_GROUND_SPEED_KM_S
    offsets_ms = np.round((np.arange(rows) - (rows - 1) / 2.0) * row_seconds * 1000.0)
    row_times = centre_time + offsets_ms.astype("int64") * np.timedelta64(1, "ms")
    row_lon, row_lat, _ = ground_track(orbit, row_times)
    ahead_lon, ahead_lat, _ = ground_track(orbit, row_times + np.timedelta64(1, "s"))
    row_lon, ahead_lon = row_lon + node_shift, ahead_lon + node_shift
    heading, _, _ = pyproj.Geod(ellps="WGS84").inv(row_lon, row_lat, ahead_lon, ahead_lat)
    # across-track ground distance of a scanner at height H: s = H tan(view angle)
    step = np.radians(SWATH_MAX_VIEW_DEG) / (SWATH_COLUMNS / 2.0)
    view = (np.arange(columns) - (columns - 1) / 2.0) * step
    height_m = SWATH_NADIR_PIXEL_KM * 1000.0 / step
    across = height_m * np.tan(view)
    azimuth = np.asarray(heading)[:, None] + np.where(across >= 0.0, 90.0, -90.0)[None, :]
    lon2, lat2 = _geodesic_forward(np.repeat(row_lon[:, None], columns, axis=1),
                                   np.repeat(row_lat[:, None], columns, axis=1),
                                   azimuth, np.broadcast_to(np.abs(across), (rows, columns)))
    lon2 = ((lon2 + 180.0) % 360.0 - 180.0).astype(np.float32)
    lat2 = lat2.astype(np.float32)
    pixel_times = np.broadcast_to(row_times[:, None], (rows, columns))
    return lon2, lat2, pixel_times, np.broadcast_to(view, (rows, columns))


def _cloud_fields(rng, shape):
    """(cloudy, cloud_suspected) boolean masks from a smooth random field: about 45 % cloud,
    and the clear pixels within 2 pixels of a cloud suspected (cloud edges)."""
    field = ndimage.gaussian_filter(rng.standard_normal(shape), sigma=14.0, mode="reflect")
    cloudy = field > np.quantile(field, 0.55)
    suspected = ndimage.binary_dilation(cloudy, iterations=2) & ~cloudy
    return cloudy, suspected


def _write_sst_swath(scn):
    rows = max(40, int(round(SWATH_ROWS * np.sqrt(scn.scale))))
    columns = max(40, int(round(SWATH_COLUMNS * np.sqrt(scn.scale))))
    nadir, edge = SST_SWATH_SIGMA_K
    paths, counts = [], {}
    for day_index, _day in enumerate(scn.days):
        lon, lat, times, view = _swath_granule(scn, day_index, rows, columns)
        rng = scn.rng(2, day_index)
        lon64, lat64 = lon.astype(np.float64), lat.astype(np.float64)
        cloudy, suspected = _cloud_fields(rng, lon.shape)
        land = truth.is_land(lon64, lat64)
        status = np.zeros(lon.shape, dtype=np.int8)
        status[suspected] = 1
        ice = truth.sea_ice_concentration(lon64, lat64, times) >= SWATH_ICE_THRESHOLD
        status[ice & ~land] = 4
        status[land] = 2
        status[cloudy] = 3
        sigma = nadir + (edge - nadir) * (view / np.radians(SWATH_MAX_VIEW_DEG)) ** 2
        sigma = np.round(sigma / 0.01) * 0.01               # as stored (packing step 0.01 K)
        # the day's pass is cut along track into SWATH_GRANULES_PER_DAY granule files, each
        # one error group
        granule_of_row = np.minimum(np.arange(rows) * SWATH_GRANULES_PER_DAY // rows,
                                    SWATH_GRANULES_PER_DAY - 1)
        kelvin = (273.15 + truth.sea_surface_temperature(lon64, lat64, times)
                  + subcell_variability(rng, "sea_surface_temperature", lon.shape)
                  + sensor_noise(rng, "sst_swath_ir", sigma, granule_of_row[:, None]))
        gross = rng.uniform(*SST_SWATH_GROSS_COLD_BIAS_K, size=lon.shape)
        kelvin = np.where(status == 1, kelvin - gross, kelvin)
        ice_sheet = 273.15 - 22.0 + 3.0 * rng.standard_normal(lon.shape)  # land surface
        kelvin = np.where(status == 2, ice_sheet, kelvin)
        ice_surface = 273.15 - 8.0 + 3.0 * rng.standard_normal(lon.shape)  # seen through no water
        kelvin = np.where(status == 4, ice_surface, kelvin)
        day_arrays = (lon, lat, times, status, sigma, kelvin)
        for granule_index in range(SWATH_GRANULES_PER_DAY):
            rows_of = granule_of_row == granule_index
            lon, lat, times, status, sigma, kelvin = (a[rows_of] for a in day_arrays)
            _write_swath_granule(scn, lon, lat, times, status, sigma, kelvin, paths, counts)
    return paths, counts


def _write_swath_granule(scn, lon, lat, times, status, sigma, kelvin, paths, counts):
    """One granule file of the infrared swath (rows of the day's pass)."""
    present = status != 3
    rows, columns = lon.shape
    start = times[0, 0].astype(object)
    granule = f"FULMAR3-IR-{start:%Y%m%dT%H%M%S}"
    path = scn.path(f"obs/sst_swath/sst_l2_{start:%Y%m%dT%H%M%S}.nc")
    with _create(path, "demo infrared SST swath (L2-like)", platform=PLATFORMS["sst_swath_ir"],
                 id=granule,
                 time_coverage_start=f"{times[0, 0].astype(object):%Y-%m-%dT%H:%M:%SZ}",
                 time_coverage_end=f"{times[-1, 0].astype(object):%Y-%m-%dT%H:%M:%SZ}") as ds:
        ds.createDimension("nj", rows)
        ds.createDimension("ni", columns)
        dims = ("nj", "ni")
        _lonlat_variables(ds, dims, lon, lat, dtype=np.float32, what="pixel")
        _variable(ds, "pixel_time", dims, np.float64,
                  _time_number(times, "1981-01-01", 1.0), {
                      "standard_name": "time", "long_name": "pixel observation time",
                      "units": "seconds since 1981-01-01 00:00:00", "calendar": "gregorian"})
        _variable(ds, "sea_surface_temperature", dims, np.int16,
                  _pack(kelvin, 0.01, 273.15, -32768, np.int16, present), {
                      "standard_name": "sea_surface_temperature", "units": "K",
                      "long_name": "sea surface temperature (infrared)",
                      "scale_factor": 0.01, "add_offset": 273.15,
                      "coordinates": "pixel_time lat lon",
                      "ancillary_variables": "sst_uncertainty sst_status"},
                  fill=np.int16(-32768))
        _variable(ds, "sst_uncertainty", dims, np.int16,
                  _pack(sigma, 0.01, 0.0, -32768, np.int16, present), {
                      "standard_name": "sea_surface_temperature standard_error",
                      "units": "K", "long_name": "SST error standard deviation",
                      "scale_factor": 0.01, "add_offset": 0.0,
                      "coordinates": "pixel_time lat lon"}, fill=np.int16(-32768))
        _variable(ds, "sst_status", dims, np.int8, status, {
            "standard_name": "sea_surface_temperature status_flag",
            "long_name": "pixel status", "flag_values": np.array([0, 1, 2, 3, 4], np.int8),
            "flag_meanings": "good cloud_suspected land cloudy sea_ice",
            "coordinates": "pixel_time lat lon"})
    paths.append(path)
    counts[path.name] = {"pixels": int(status.size),
                         "good": int(np.count_nonzero(status == 0)),
                         "cloud_suspected": int(np.count_nonzero(status == 1)),
                         "land": int(np.count_nonzero(status == 2)),
                         "cloudy": int(np.count_nonzero(status == 3)),
                         "sea_ice": int(np.count_nonzero(status == 4))}


# --- gridded SST ------------------------------------------------------------------------------

#: lon0, lon1, lat0, lat1 (degrees): the sea part of the model domain (land south of 80 deg S)
SST_GRID_EXTENT = (-80.0, 12.0, -80.0, -52.0)


def write_daily_latlon_sst(path, title, platform, time, lon, lat, step_lon, step_lat, kelvin, sea,
                           sigma, *, time_comment, sst, error, flags):
    """Write one daily SST file on a regular lat/lon grid (L3/L4-like).

    ``kelvin`` (lat, lon) is packed as int16 K (0.01 K steps, fill off the sea); ``sst`` is
    (variable name, standard_name, long_name); ``error`` (variable name, long_name) holds the
    constant ``sigma`` (K) as the ``standard_error`` ancillary; ``flags`` is (variable name,
    long_name, bit-mask array, flag_masks, flag_meanings) for the ``status_flag`` ancillary.
    """
    sst_name, standard_name, sst_long_name = sst
    error_name, error_long_name = error
    flag_name, flag_long_name, mask, flag_masks, flag_meanings = flags
    with _create(path, title, platform=platform) as ds:
        ds.createDimension("time", 1)
        ds.createDimension("lat", len(lat))
        ds.createDimension("lon", len(lon))
        ds.createDimension("nv", 2)
        _variable(ds, "time", ("time",), np.float64, _time_number([time], "1981-01-01", 1.0), {
            "standard_name": "time", "units": "seconds since 1981-01-01 00:00:00",
            "calendar": "gregorian", "axis": "T", "comment": time_comment})
        for name, values, step, units, axis in (("lat", lat, step_lat, "degrees_north", "Y"),
                                                ("lon", lon, step_lon, "degrees_east", "X")):
            _variable(ds, name, (name,), np.float64, values, {
                "standard_name": "latitude" if name == "lat" else "longitude",
                "units": units, "axis": axis, "bounds": f"{name}_bnds"})
            _variable(ds, f"{name}_bnds", (name, "nv"), np.float64, _bounds(values, step), {})
        _variable(ds, sst_name, ("time", "lat", "lon"), np.int16,
                  _pack(kelvin[None], 0.01, 273.15, -32768, np.int16, sea[None]), {
                      "standard_name": standard_name, "units": "K", "long_name": sst_long_name,
                      "scale_factor": 0.01, "add_offset": 273.15,
                      "ancillary_variables": f"{error_name} {flag_name}"},
                  fill=np.int16(-32768))
        _variable(ds, error_name, ("time", "lat", "lon"), np.int16,
                  _pack(np.full((1,) + kelvin.shape, sigma), 0.01, 0.0, -32768, np.int16,
                        sea[None]), {
                      "standard_name": f"{standard_name} standard_error", "units": "K",
                      "long_name": error_long_name, "scale_factor": 0.01, "add_offset": 0.0},
                  fill=np.int16(-32768))
        _variable(ds, flag_name, ("time", "lat", "lon"), np.int8, mask[None].astype(np.int8), {
            "standard_name": f"{standard_name} status_flag", "long_name": flag_long_name,
            "flag_masks": np.array(flag_masks, dtype=np.int8), "flag_meanings": flag_meanings})


def _write_sst_grid(scn):
    lon0, lon1, lat0, lat1 = SST_GRID_EXTENT
    resolution = 0.1 / np.sqrt(scn.scale)
    n_lon, n_lat = int(round((lon1 - lon0) / resolution)), int(round((lat1 - lat0) / resolution))
    step_lon, step_lat = (lon1 - lon0) / n_lon, (lat1 - lat0) / n_lat
    lon = lon0 + (np.arange(n_lon) + 0.5) * step_lon
    lat = lat0 + (np.arange(n_lat) + 0.5) * step_lat
    lon2, lat2 = np.meshgrid(lon, lat)
    sea = ~truth.is_land(lon2, lat2)
    paths, counts = [], {}
    for day_index, day in enumerate(scn.days):
        time = day.astype("datetime64[s]") + np.timedelta64(12 * 3600, "s")
        rng = scn.rng(3, day_index)
        kelvin = (273.15 + truth.sea_surface_temperature(lon2, lat2, time)
                  + subcell_variability(rng, "sea_surface_temperature", lon2.shape)
                  + sensor_noise(rng, "sst_grid", np.full(lon2.shape, SST_GRID_SIGMA_K)))
        # bit mask (CF flag_masks): 1 land, 2 sea ice; no bit set = open water (good)
        ice = sea & (truth.sea_ice_concentration(lon2, lat2, time) >= SWATH_ICE_THRESHOLD)
        mask = np.where(sea, 0, 1) + np.where(ice, 2, 0)
        path = scn.path(f"obs/sst_grid/sst_l4_{day.astype(object):%Y%m%d}.nc")
        write_daily_latlon_sst(
            path, "demo gridded SST analysis (L4-like, 0.1 degree)", PLATFORMS["sst_grid"], time,
            lon, lat, step_lon, step_lat, kelvin, sea, SST_GRID_SIGMA_K,
            time_comment="daily analysis, centre of the day",
            sst=("analysed_sst", "sea_surface_foundation_temperature",
                 "analysed sea surface temperature"),
            error=("analysis_error", "analysis error standard deviation"),
            flags=("surface_mask", "surface type bit mask (no bit set: open water)", mask,
                   [1, 2], "land sea_ice"))
        paths.append(path)
        counts[path.name] = {"sea": int(sea.sum()), "sea_ice": int(ice.sum())}
    return paths, counts


# --- ice concentration ------------------------------------------------------------------------

def _truncated_normal(rng, shape, limit):
    """Standard normal draws, redrawn while |z| > limit (a Gaussian truncated at +-limit sigma;
    at 5 sigma the variance is smaller by 2 k phi(k) / (2 Phi(k) - 1) = 1.5e-5 relative,
    textbook truncated-normal moments)."""
    z = rng.standard_normal(shape)
    while True:
        outside = np.abs(z) > limit
        if not outside.any():
            return z
        z[outside] = rng.standard_normal(int(outside.sum()))


def _projected_cell_centres(crs_text, extent, cell):
    x0, x1, y0, y1 = extent
    x = x0 + (np.arange(int(round((x1 - x0) / cell))) + 0.5) * cell
    y = y0 + (np.arange(int(round((y1 - y0) / cell))) + 0.5) * cell
    xx, yy = np.meshgrid(x, y)
    crs = pyproj.CRS(crs_text)
    lon, lat = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(xx, yy)
    return crs, x, y, np.asarray(lon), np.asarray(lat)


def _write_ice_concentration(scn):
    crs, x, y, lon, lat = _projected_cell_centres(
        ICE_CONCENTRATION_CRS, ICE_CONCENTRATION_EXTENT_M, ICE_CONCENTRATION_CELL_M)
    sea = ~truth.is_land(lon, lat)
    paths, counts = [], {}
    for day_index, day in enumerate(scn.days):
        time = day.astype("datetime64[s]") + np.timedelta64(12 * 3600, "s")
        rng = scn.rng(4, day_index)
        concentration = truth.sea_ice_concentration(lon, lat, time)
        # sigma in percent as stored (packing step 0.01 %); the noise is NOT clipped to 0..100 %
        sigma_percent = np.round(100.0 * truth.sea_ice_concentration_error(concentration)
                                 / 0.01) * 0.01
        percent = 100.0 * concentration + sigma_percent * _truncated_normal(
            rng, lon.shape, ICE_CONCENTRATION_TRUNCATION)
        path = scn.path(f"obs/ice_conc/sic_{day.astype(object):%Y%m%d}.nc")
        with _create(path, "demo daily sea-ice concentration (25 km polar stereographic)",
                     platform=PLATFORMS["ice_concentration"]) as ds:
            ds.createDimension("time", 1)
            _projected_axes(ds, x, y, ICE_CONCENTRATION_CELL_M, ICE_CONCENTRATION_CELL_M,
                            "ice concentration grid")
            _variable(ds, "time", ("time",), np.float64,
                      _time_number([time], "1970-01-01", 86400.0),
                      {"standard_name": "time", "units": "days since 1970-01-01 00:00:00",
                       "calendar": "standard", "axis": "T",
                       "comment": "daily mean, centre of the day"})
            _grid_mapping_variable(ds, "crs", crs)
            _variable(ds, "ice_conc", ("time", "y", "x"), np.int16,
                      _pack(percent[None], 0.01, 0.0, -32767, np.int16, sea[None]), {
                          "standard_name": "sea_ice_area_fraction", "units": "%",
                          "long_name": "sea-ice concentration", "scale_factor": 0.01,
                          "add_offset": 0.0, "grid_mapping": "crs",
                          "ancillary_variables": "ice_conc_uncertainty",
                          "comment": "not clipped to 0..100 %: noise around 0 and 100 % is kept"},
                      fill=np.int16(-32767))
            _variable(ds, "ice_conc_uncertainty", ("time", "y", "x"), np.int16,
                      _pack(sigma_percent[None], 0.01, 0.0, -32767, np.int16, sea[None]), {
                          "standard_name": "sea_ice_area_fraction standard_error", "units": "%",
                          "long_name": "ice concentration error standard deviation",
                          "scale_factor": 0.01, "add_offset": 0.0, "grid_mapping": "crs"},
                      fill=np.int16(-32767))
        paths.append(path)
        counts[path.name] = int(sea.sum())
    return paths, counts


# --- ice drift --------------------------------------------------------------------------------

def _ice_drift_extent():
    """Extent (m) of the drift grid in its own projection: the model domain, snapped outwards
    to whole 62.5 km cells."""
    g = MODEL_GRID
    edge_x = np.linspace(g["x_min"], g["x_min"] + g["nx"] * g["dx"], 60)
    edge_y = np.linspace(g["y_min"], g["y_min"] + g["ny"] * g["dy"], 60)
    bx = np.concatenate([edge_x, edge_x, np.full(60, edge_x[0]), np.full(60, edge_x[-1])])
    by = np.concatenate([np.full(60, edge_y[0]), np.full(60, edge_y[-1]), edge_y, edge_y])
    x, y = pyproj.Transformer.from_crs(g["crs"], ICE_DRIFT_CRS, always_xy=True).transform(bx, by)
    cell = ICE_DRIFT_CELL_M
    return (np.floor(np.min(x) / cell) * cell, np.ceil(np.max(x) / cell) * cell,
            np.floor(np.min(y) / cell) * cell, np.ceil(np.max(y) / cell) * cell)


def _map_scale_factor(crs, lon, lat):
    """Point scale factor of the drift grid's conformal projection (PROJ's get_factors)."""
    return pyproj.Proj(crs).get_factors(lon, lat).parallel_scale


def _map_differences(crs, lon, lat, east, north):
    """Differences of projected coordinates (m) of a ground displacement ``east``, ``north``
    (m) from ``lon``, ``lat``: its end laid out on the ellipsoid along the geodesic."""
    azimuth = np.degrees(np.arctan2(east, north))
    end_lon, end_lat, _ = crs.get_geod().fwd(lon, lat, azimuth, np.hypot(east, north))
    to_map = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    x0, y0 = to_map.transform(lon, lat)
    x1, y1 = to_map.transform(end_lon, end_lat)
    return x1 - x0, y1 - y0


def _write_ice_drift(scn):
    crs, x, y, lon, lat = _projected_cell_centres(ICE_DRIFT_CRS, _ice_drift_extent(),
                                                  ICE_DRIFT_CELL_M)
    window_end = scn.window[1]
    duration = np.timedelta64(int(ICE_DRIFT_HOURS * 3600), "s")
    paths, counts = [], {}
    coast = truth.coast_distance_km(lon, lat)
    for day_index, day in enumerate(scn.days):
        start = day.astype("datetime64[s]")
        end = start + duration
        if end > window_end:                # only intervals inside the window
            continue
        rng = scn.rng(5, day_index)
        concentration = truth.sea_ice_concentration(lon, lat, start)
        valid = ((concentration >= ICE_DRIFT_MIN_CONCENTRATION) & (coast > 25.0)
                 & (rng.random(lon.shape) >= 0.05))         # 5 % of vectors not retrieved
        east = truth.truth_value("sea_ice_drift_east", lon, lat, 0.0, start, end)
        north = truth.truth_value("sea_ice_drift_north", lon, lat, 0.0, start, end)
        # as products give it: differences of projected coordinates of the start and end
        # positions (map metres, the ground distance times the scale factor k)
        along_x, along_y = _map_differences(crs, lon, lat, east, north)
        map_sigma_m = ICE_DRIFT_SIGMA_KM * 1000.0 * _map_scale_factor(crs, lon, lat)
        along_x = along_x + map_sigma_m * rng.standard_normal(lon.shape)
        along_y = along_y + map_sigma_m * rng.standard_normal(lon.shape)
        fill = np.float32(-999.0)
        path = scn.path(f"obs/ice_drift/drift_{day.astype(object):%Y%m%d}-"
                        f"{end.astype('datetime64[D]').astype(object):%Y%m%d}.nc")
        with _create(path, "demo 48 h sea-ice drift (62.5 km polar stereographic)",
                     platform=PLATFORMS["ice_drift"]) as ds:
            ds.createDimension("time", 1)
            _projected_axes(ds, x, y, ICE_DRIFT_CELL_M, ICE_DRIFT_CELL_M, "drift grid")
            units = "hours since 1970-01-01 00:00:00"
            _variable(ds, "time", ("time",), np.float64,
                      _time_number([start], "1970-01-01", 3600.0), {
                "standard_name": "time", "units": units, "calendar": "proleptic_gregorian",
                "axis": "T", "bounds": "time_bnds",
                "comment": "start of the displacement interval; bounds give start and end"})
            _variable(ds, "time_bnds", ("time", "nv"), np.float64,
                      _time_number([[start, end]], "1970-01-01", 3600.0), {})
            _grid_mapping_variable(ds, "crs", crs)
            _lonlat_variables(ds, ("y", "x"), lon, lat, what="start position")
            for axis, values in (("x", along_x), ("y", along_y)):
                common = {"grid_mapping": "crs", "coordinates": "time lat lon"}
                _variable(ds, f"d{axis}", ("time", "y", "x"), np.float32,
                          np.where(valid, values / 1000.0, fill)[None].astype(np.float32), {
                              "standard_name": f"sea_ice_{axis}_displacement", "units": "km",
                              "long_name": f"ice displacement along the projection {axis} axis",
                              "comment": f"difference of projected {axis} coordinates "
                                         "of the end and start positions (map distance)",
                              "ancillary_variables": f"d{axis}_uncertainty", **common}, fill=fill)
                _variable(ds, f"d{axis}_uncertainty", ("time", "y", "x"), np.float32,
                          np.where(valid, map_sigma_m / 1000.0, fill)[None].astype(np.float32),
                          {
                              "standard_name": f"sea_ice_{axis}_displacement standard_error",
                              "units": "km", **common}, fill=fill)
        paths.append(path)
        counts[path.name] = int(valid.sum())
    return paths, counts


# --- profiles ---------------------------------------------------------------------------------

#: CTD section stations (lon, lat) across the shelf break, occupied 6 h apart
CTD_STATIONS = ((-42.0, -76.0), (-42.0, -74.5), (-42.0, -73.8), (-42.0, -73.2))
#: many more floats than the real Weddell Sea has in three days (about 10; from memory), so that the demo's
#: per-layer super-observations are numerous enough to check their errors statistically
FLOAT_COUNT = 80
FLOAT_LEVELS_M = np.concatenate([np.arange(5.0, 101.0, 5.0), np.arange(110.0, 501.0, 10.0),
                                 np.arange(550.0, 2001.0, 50.0)])
FLAG_VALUES = np.array([1, 2, 3, 4], dtype=np.int8)
FLAG_MEANINGS = "good probably_good probably_bad bad"


def _float_positions(rng, count):
    """Float positions over the deep interior (sea floor deeper than 2200 m, inside the domain),
    from uniform candidates in 50-15 deg W, 69-62 deg S."""
    lon = rng.uniform(-50.0, -15.0, 40 * count)
    lat = rng.uniform(-69.0, -62.0, 40 * count)
    depth = truth.sea_floor_depth(lon, lat)
    good = np.flatnonzero((np.nan_to_num(depth) > 2200.0)
                          & _inside_model_domain(lon, lat, margin_m=-50000.0))
    return lon[good[:count]], lat[good[:count]]


def _write_profiles(scn):
    rng = scn.rng(6)
    start, end = scn.window
    float_lon, float_lat = _float_positions(rng, FLOAT_COUNT)
    ctd_lon, ctd_lat = np.array(CTD_STATIONS).T
    lon = np.concatenate([ctd_lon, float_lon])
    lat = np.concatenate([ctd_lat, float_lat])
    n_ctd = ctd_lon.size
    n_profiles = lon.size
    hour = np.timedelta64(3600, "s")
    ctd_times = start + 20 * hour + np.arange(n_ctd) * 6 * hour
    window_seconds = int((end - start) / np.timedelta64(1, "s")) - 1800
    float_times = start + rng.integers(0, window_seconds, FLOAT_COUNT) * np.timedelta64(1, "s")
    times = np.concatenate([ctd_times, float_times])
    bottom = truth.sea_floor_depth(lon, lat)
    nominal = []
    for k in range(n_profiles):          # level lists differ in length
        if k < n_ctd:                     # ship CTD: 2 m bins to 15 m above the bottom or 2000 m
            deepest = min(bottom[k] - 15.0, 2000.0)
            nominal.append(np.arange(2.0, deepest + 1e-9, 2.0))
        else:
            nominal.append(FLOAT_LEVELS_M[FLOAT_LEVELS_M < bottom[k] - 50.0])
    n_levels = max(len(levels) for levels in nominal)
    depth_nominal = np.full((n_profiles, n_levels), np.nan)
    for k, levels in enumerate(nominal):
        depth_nominal[k, :len(levels)] = levels
    present = np.isfinite(depth_nominal)
    # pressure from the nominal depth with TEOS-10, stored in float32; the truth is evaluated at
    # the depth that the stored pressure gives back, i.e. what a reader computes
    lat2 = np.broadcast_to(lat[:, None], depth_nominal.shape)
    pressure = np.where(present, pressure_from_depth(np.nan_to_num(depth_nominal), lat2), np.nan)
    pressure = pressure.astype(np.float32)
    depth = np.where(present, depth_from_pressure(np.nan_to_num(pressure).astype(np.float64), lat2),
                     np.nan)
    lon2 = np.broadcast_to(lon[:, None], depth.shape)
    time2 = np.broadcast_to(times[:, None], depth.shape)
    temperature = truth.sea_water_temperature(lon2, lat2, np.nan_to_num(depth), time2)
    salinity = truth.sea_water_salinity(lon2, lat2, np.nan_to_num(depth), time2)
    # sub-cell variability: one value per profile and model layer (water of one profile's layer
    # differs from the cell's large-scale state as a whole); instrument noise per level
    layer = np.searchsorted(np.asarray(LAYER_INTERFACES_M), np.nan_to_num(depth), side="right")
    for name, values in (("sea_water_temperature", temperature), ("sea_water_salinity", salinity)):
        per_layer = subcell_variability(rng, name, (n_profiles, len(LAYER_INTERFACES_M) + 1))
        values += np.take_along_axis(per_layer, layer, axis=1)
        values += PROFILE_SIGMA[name] * rng.standard_normal(depth.shape)
    # quality flags: a few gross errors flagged bad, a few normal values flagged probably good
    valid_index = np.flatnonzero(present)
    flags = {}
    for name, values, spike in (("temperature", temperature, (1.0, 2.5)),
                                ("salinity", salinity, (-0.8, -0.4))):
        flag = np.where(present, 1, -1).astype(np.int8)
        chosen = rng.choice(valid_index, size=9, replace=False)
        bad, probably_good = chosen[:6], chosen[6:]
        values.flat[bad] += rng.uniform(*spike, size=bad.size) * (
            rng.choice([-1.0, 1.0], size=bad.size) if name == "temperature" else 1.0)
        flag.flat[bad] = 4
        flag.flat[probably_good] = 2
        flags[name] = flag
    fill = np.float32(99999.0)
    profile_ids = [f"CTD-NUNATAK-{k + 1:03d}" for k in range(n_ctd)] + [
        f"FLOAT-{k + 1:02d}-{(times[n_ctd + k].astype(object)):%j}" for k in range(FLOAT_COUNT)]
    platforms = (["ship Nunatak (CTD)"] * n_ctd
                 + [f"demo float {k + 1:02d}" for k in range(FLOAT_COUNT)])
    first, last = scn.days[0].astype(object), scn.days[-1].astype(object)
    path = scn.path(f"obs/profiles/ts_profiles_{first:%Y%m%d}_{last:%Y%m%d}.nc")
    with _create(path, "demo temperature/salinity profiles (ship CTD and floats)",
                 featureType="profile") as ds:
        ds.createDimension("profile", n_profiles)
        ds.createDimension("level", n_levels)
        _variable(ds, "profile_id", ("profile",), str, np.array(profile_ids, dtype=object), {
            "cf_role": "profile_id", "long_name": "profile identifier"})
        _variable(ds, "platform_id", ("profile",), str, np.array(platforms, dtype=object), {
            "long_name": "platform identifier"})
        _variable(ds, "time", ("profile",), np.float64,
                  _time_number(times, "1950-01-01", 86400.0), {
            "standard_name": "time", "units": "days since 1950-01-01 00:00:00",
            "calendar": "standard", "axis": "T"})
        _lonlat_variables(ds, ("profile",), lon, lat, what="profile")
        dims = ("profile", "level")
        _variable(ds, "pressure", dims, np.float32, np.where(present, pressure, fill), {
            "standard_name": "sea_water_pressure", "units": "dbar", "positive": "down",
            "axis": "Z", "long_name": "sea pressure"}, fill=fill)
        for name, values, quantity, units in (
                ("temperature", temperature, "sea_water_temperature", "degree_Celsius"),
                ("salinity", salinity, "sea_water_practical_salinity", "1")):
            _variable(ds, name, dims, np.float32, np.where(present, values, fill), {
                "standard_name": quantity, "units": units,
                "coordinates": "time lat lon pressure",
                "ancillary_variables": f"{name}_qc"}, fill=fill)
            _variable(ds, f"{name}_qc", dims, np.int8, flags[name], {
                "standard_name": f"{quantity} status_flag", "long_name": f"{name} quality flag",
                "flag_values": FLAG_VALUES, "flag_meanings": FLAG_MEANINGS,
                "coordinates": "time lat lon pressure"}, fill=np.int8(-1))
    counts = {path.name: {"profiles": int(n_profiles), "levels": int(present.sum()),
                          "flagged_bad": {k: int(np.count_nonzero(v == 4))
                                          for k, v in flags.items()}}}
    return [path], counts


# --- truth on the model grid ------------------------------------------------------------------

def _write_truth_on_grid(scn):
    path = scn.path("truth/truth_on_grid.nc")
    x, y = model_grid_axes()
    lon, lat = model_grid_lonlat()
    sea = ~truth.is_land(lon, lat)
    analysis = scn.analysis_time
    drift_start = analysis - np.timedelta64(int(ICE_DRIFT_HOURS * 3600), "s")
    with _create(path, "weddell-spring demo truth on the model grid",
                 comment="Surface quantities at the analysis time; ice drift is the displacement "
                         "over the 48 h before it. NaN on land.") as ds:
        _model_grid_coordinates(ds, x, y, lon, lat)
        _variable(ds, "time", (), np.float64, _time_number(analysis, "1970-01-01", 1.0), {
            "standard_name": "time", "units": "seconds since 1970-01-01 00:00:00",
            "calendar": "standard", "long_name": "analysis time"}, compress=False)
        for name in ("sea_level_anomaly", "sea_surface_temperature", "sea_ice_concentration",
                     "sea_ice_drift_x", "sea_ice_drift_y", "sea_ice_drift_east",
                     "sea_ice_drift_north"):
            quantity = get_quantity(name)
            if quantity.vector:
                values = truth.truth_value(name, lon, lat, 0.0, drift_start, analysis)
                extra = {"comment": f"displacement from {drift_start} to {analysis} UTC"}
            else:
                values = truth.truth_value(name, lon, lat, 0.0, analysis)
                extra = {}
            _variable(ds, name, ("y", "x"), np.float64, np.where(sea, values, np.nan), {
                "standard_name": quantity.standard_name, "units": quantity.units,
                "long_name": f"true {quantity.long_name}", "grid_mapping": "crs",
                "coordinates": "time lat lon", **extra}, fill=np.nan)
    return path


# --- configuration and manifest ---------------------------------------------------------------

def _sensor_table():
    """Sensor name -> (kind, path pattern, quantities, error rule as TOML lines, sigma record)."""
    altimeters = {
        sensor: ("alongtrack", f"obs/altimetry/alt_{sensor.rsplit('_', 1)[-1]}_{{date:%Y%m%d}}.nc",
                 ["sea_level_anomaly"], ['rule = "constant"', f"value = {sigma}"],
                 {"rule": "constant", "sigma": sigma, "units": "m"})
        for sensor, sigma in ALTIMETER_SIGMA_M.items()}
    return {
        **altimeters,
        "sst_swath_ir": ("sst_swath", "obs/sst_swath/sst_l2_{date:%Y%m%d}T*.nc",
                         ["sea_surface_temperature"], ['rule = "file"'],
                         {"rule": "file", "variable": "sst_uncertainty",
                          "sigma_range": list(SST_SWATH_SIGMA_K), "units": "degC",
                          "note": "sigma grows with the square of the view angle; pixels "
                                  "flagged cloud_suspected carry a cold error of "
                                  f"{SST_SWATH_GROSS_COLD_BIAS_K[0]}-"
                                  f"{SST_SWATH_GROSS_COLD_BIAS_K[1]} K; "
                                  "land and sea_ice pixels carry surface temperatures of "
                                  "land and ice, not of the sea"}),
        "sst_grid": ("sst_grid", "obs/sst_grid/sst_l4_{date:%Y%m%d}.nc",
                     ["sea_surface_foundation_temperature"],
                     ['rule = "constant"', f"value = {SST_GRID_SIGMA_K}"],
                     {"rule": "constant", "sigma": SST_GRID_SIGMA_K, "units": "degC",
                      "note": "cells under sea ice (truth concentration >= 0.15) are flagged "
                              "sea_ice in the surface_mask bit mask"}),
        "sst_microwave": ("sst_grid", "obs/sst_microwave/sst_mw_{date:%Y%m%d}.nc",
                          ["sea_surface_subskin_temperature"], ['rule = "constant"', "value = 0.6"],
                          {"rule": "constant", "sigma": 0.6, "units": "degC",
                           "note": "all-weather microwave subskin SST; cells near land and "
                                   "under sea ice are flagged"}),
        "ice_concentration": ("ice_concentration", "obs/ice_conc/sic_{date:%Y%m%d}.nc",
                              ["sea_ice_concentration"], ['rule = "file"'],
                              {"rule": "file", "variable": "ice_conc_uncertainty",
                               "formula": "0.03 + 0.28 c (1 - c)", "sigma_range": [0.03, 0.10],
                               "units": "1",
                               "note": "Gaussian noise truncated at "
                                       f"{ICE_CONCENTRATION_TRUNCATION:g} "
                                       "sigma; observations are not clipped to 0..1"}),
        "ice_drift": ("ice_drift", "obs/ice_drift/drift_{date:%Y%m%d}-*.nc",
                      ["sea_ice_drift_east", "sea_ice_drift_north"],
                      ['rule = "constant"', f"value = {ICE_DRIFT_SIGMA_KM * 1000.0}"],
                      {"rule": "constant", "sigma": ICE_DRIFT_SIGMA_KM * 1000.0, "units": "m",
                       "note": "per component along the product's projection axes (isotropic, "
                               "so also per east/north component)"}),
        "ts_profiles": ("profiles", "obs/profiles/ts_profiles_*.nc",
                        ["sea_water_temperature", "sea_water_salinity"],
                        ['rule = "constant"',
                         "value = { sea_water_temperature = "
                         f"{PROFILE_SIGMA['sea_water_temperature']}, sea_water_salinity = "
                         f"{PROFILE_SIGMA['sea_water_salinity']} }}"],
                        {"rule": "constant", "sigma": dict(PROFILE_SIGMA),
                         "units": {"sea_water_temperature": "degC", "sea_water_salinity": "1"},
                         "note": "values flagged bad carry gross errors (T spikes 1-2.5 degC, "
                                 "S -0.4..-0.8)"}),
    }


#: super-observation error floors, well below sigma / sqrt(n) of every sensor
ERROR_FLOORS = {"sea_level_anomaly": 0.001, "sea_surface_temperature": 0.005,
                "sea_ice_concentration": 0.002, "sea_ice_drift_east": 50.0,
                "sea_ice_drift_north": 50.0, "sea_ice_drift_x": 50.0, "sea_ice_drift_y": 50.0,
                "sea_water_temperature": 0.0001, "sea_water_salinity": 0.0001}


def _write_config(scn):
    date = f"{scn.analysis_time.astype('datetime64[D]')}"
    g = MODEL_GRID
    lines = [
        f'title = "Weddell Sea spring demo ({SCENARIO_NAME}, synthetic data)"',
        "",
        "[window]",
        f'date = "{date}"',
        'analysis_time = "{date}T00:00:00"',
        f"start_hours = {WINDOW_START_HOURS}",
        f"end_hours = {WINDOW_END_HOURS}",
        f"slot_hours = {SLOT_HOURS}",
        "",
        "[grid]",
        'type = "projected"',
        f'crs = "{g["crs"]}"',
        f"x_min = {g['x_min']}",
        f"y_min = {g['y_min']}",
        f"dx = {g['dx']}",
        f"dy = {g['dy']}",
        f"nx = {g['nx']}",
        f"ny = {g['ny']}",
        'mask_file = "grid/model_grid.nc"',
        "layer_interfaces = [" + ", ".join(f"{z}" for z in LAYER_INTERFACES_M) + "]",
    ]
    good = {"sst_swath_ir": '["good"]', "ts_profiles": '["good", "probably_good"]'}
    for sensor, (kind, pattern, quantities, rule, _) in _sensor_table().items():
        lines += ["", "[[sources]]", f'sensor = "{sensor}"', f'paths = ["{pattern}"]',
                  f'kind = "{kind}"',
                  "quantities = [" + ", ".join(f'"{q}"' for q in quantities) + "]",
                  f"correlation = {ERROR_CORRELATION.get(sensor, 0.0)}", "[sources.error]", *rule,
                  f"factor = {0.5 if sensor == scn.misassign else 1.0}", "floor = 0.0"]
        if sensor == scn.misassign:
            lines.insert(-2, "# deliberately wrong: half the true noise (obsprep demo --misassign)")
        if sensor in good:
            lines += ["[sources.options]", f"good_flag_meanings = {good[sensor]}"]
    lines += [
        "",
        "[superobs]",
        'mode = "mean"',
        'profiles = "per_profile"',
        "merge_sensors = { }",
        "# Errors are correlated within a pass, granule or file (sources' correlation) and not",
        "# across them. Observations also sample a sub-cell variability (one independent value",
        "# per raw footprint) that the 10 km grid cannot resolve: the sampling model gives a",
        "# super-observation of n of the N = cell area / footprint footprints of its cell the",
        "# representation error sigma_sub sqrt((1/n - 1/N) N / (N - 1)). Ice products have",
        "# footprints larger than a model cell: no sub-cell variability.",
        'representation_model = "sampling"',
        "# The T/S truth is curved inside model layers (a thermocline): a layer's value is a",
        "# quadratic fit in depth at the super-observation's depth, not the mean of the values.",
        'layer_value = "fit"',
        "# The demo truth has no diurnal cycle and no skin effect: its foundation (sst_grid) and",
        "# subskin (sst_microwave) SST equal the SST of the infrared swath, so the three SST types",
        "# are averaged together, as sea_surface_temperature. Real products differ by type.",
        "[superobs.merge_quantities]",
        'sea_surface_temperature = ["sea_surface_foundation_temperature", '
        '"sea_surface_subskin_temperature"]',
        "[superobs.representation_error]",
        *[f"{q} = {SUBCELL_SIGMA.get(q, 0.0)}" for q in ERROR_FLOORS],
        "[superobs.footprint_km2]",
        *[f"{q} = {area}" for q, area in FOOTPRINT_KM2.items()],
        "# Floors well below sigma / sqrt(n), so they never bind in the demo.",
        "[superobs.error_floor]",
        *[f"{q} = {v}" for q, v in ERROR_FLOORS.items()],
        "",
        "[output]",
        'directory = "out"',
        'name = "superobs_{date:%Y%m%d}.nc"',
        "parquet = true",
        "",
    ]
    path = scn.path(CONFIG_NAME)
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def _relative(scn, path):
    return Path(path).relative_to(scn.root).as_posix()


# --- public API -------------------------------------------------------------------------------
