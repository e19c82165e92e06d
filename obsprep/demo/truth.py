"""The known truth of the "weddell-spring" demo scenario: invented geography and smooth fields.

Everything here is an analytic function of longitude, latitude (degrees), depth (m, positive
down) and time (numpy ``datetime64``, UTC), vectorised over numpy arrays, so a test can evaluate
the truth exactly where and when any observation or super-observation sits.

The world is invented (shapes only loosely resemble the Weddell Sea): a continent with ice
shelves to the south, a peninsula to the west, one small island to the north, a continental
shelf of 400-600 m, a slope and an abyssal plain near 4500 m; a cyclonic (clockwise in the south
polar map) gyre with low sea level at its centre and an ice pack with an edge near 62 deg S.
Horizontal scales are a few hundred km and the time variation is slow and bounded (periods of
9-40 days), so the truth is smooth on a 10 km model grid and any date gives a plausible state.

Geometry is computed in the model's map projection, south polar stereographic EPSG:3031
(WGS 84, true scale at 71 deg S), through pyproj; map coordinates are in km inside this module.
"""

from __future__ import annotations

from functools import cache

import numpy as np

from obsprep.geo.seawater import potential_temperature, pressure_from_depth
from obsprep.model.quantities import QUANTITIES, SST_QUANTITY_NAMES, get_quantity

#: the model grid's map projection
MODEL_CRS = "EPSG:3031"
#: reference time of the slow time variations (fixed, independent of the run date)
TRUTH_EPOCH = np.datetime64("2026-11-01T00:00:00", "ns")
#: km per degree of latitude (mean meridian degree; an invented world needs no better)
KM_PER_DEGREE_LATITUDE = 111.2
SECONDS_PER_DAY = 86400.0

# --- invented geography (lon, lat in degrees) ------------------------------------------------
#: peninsula centre line from its base to its tip, and its half-width at base and tip (km)
PENINSULA_LINE = ((-66.0, -74.5), (-64.0, -68.5), (-57.0, -63.3))
PENINSULA_HALF_WIDTH_KM = (150.0, 30.0)
#: a small island in the north: centre (lon, lat) and radius (km)
ISLAND_CENTRE = (-45.5, -60.7)
ISLAND_RADIUS_KM = 35.0

# --- gyre (shared by sea level and ice drift) -------------------------------------------------
GYRE_CENTRE = (-35.0, -66.0)            # lon, lat
GYRE_AXES_KM = (750.0, 450.0)           # e-folding half-axes along and across its long axis
GYRE_ROTATION_DEG = 35.0                # long axis angle, counterclockwise from the map x axis
GYRE_SEA_LEVEL_M = -0.20                # sea level anomaly at the gyre centre
GYRE_STREAMFUNCTION_M2_S = 8.0e4        # drift streamfunction amplitude (clockwise flow)
GYRE_MODULATION = 0.3                   # relative amplitude of the synoptic modulation
GYRE_PERIOD_DAYS = 9.0
#: background ice drift (east, north), m/s: export to the north-east
BACKGROUND_DRIFT_M_S = (0.02, 0.03)

#: mesoscale eddies: (lon, lat, amplitude m, radius km, oscillation phase rad)
EDDIES = (
    (-30.0, -62.0, +0.12, 130.0, 0.0),
    (-48.0, -64.5, -0.07, 110.0, 1.7),
    (-20.0, -67.0, +0.06, 150.0, 3.1),
    (-40.0, -70.5, -0.05, 120.0, 4.4),
    (-55.0, -58.5, +0.10, 140.0, 5.5),
)
EDDY_EXCURSION_KM = 60.0
EDDY_PERIOD_DAYS = 40.0


@cache
def _lonlat_to_map():
    import pyproj

    return pyproj.Transformer.from_crs("EPSG:4326", MODEL_CRS, always_xy=True)


def map_xy_km(lon, lat):
    """EPSG:3031 map coordinates (km) of longitude/latitude (degrees), through PROJ (pyproj)."""
    x, y = _lonlat_to_map().transform(np.asarray(lon, dtype=np.float64),
                                      np.asarray(lat, dtype=np.float64))
    return np.asarray(x) / 1000.0, np.asarray(y) / 1000.0


def days_since_epoch(time) -> np.ndarray:
    """Time (numpy datetime64, or ISO strings) as float days since :data:`TRUTH_EPOCH`."""
    time = np.asarray(time)
    if time.dtype.kind not in "MUSO":
        raise TypeError(f"time must be numpy datetime64 (UTC), got an array of dtype {time.dtype}")
    if time.dtype.kind != "M":
        time = time.astype("datetime64[ns]")
    return ((time - TRUTH_EPOCH) / np.timedelta64(1, "ns")) / (SECONDS_PER_DAY * 1e9)


def _coast_latitude(lon):
    """Latitude (degrees) of the continent's coast / ice-shelf front at longitude ``lon``."""
    return -70.3 - 7.0 * np.exp(-(((np.asarray(lon) + 50.0) / 25.0) ** 2))


@cache
def _peninsula_km():
    lon, lat = np.array(PENINSULA_LINE).T
    return np.stack(map_xy_km(lon, lat), axis=1)


@cache
def _point_km(lon, lat):
    x, y = map_xy_km(lon, lat)
    return float(x), float(y)


def _peninsula_distance_km(x, y):
    """Signed distance (km) from the peninsula's edge, negative inside; the half-width tapers
    linearly along the centre line from base to tip."""
    nodes = _peninsula_km()
    lengths = np.hypot(*np.diff(nodes, axis=0).T)
    total = lengths.sum()
    start_fraction = np.concatenate([[0.0], np.cumsum(lengths)[:-1]]) / total
    base, tip = PENINSULA_HALF_WIDTH_KM
    best = np.full(np.shape(x), np.inf)
    for k in range(len(lengths)):          # loop over the 2 segments, vectorised over points
        ax, ay = nodes[k]
        bx, by = nodes[k + 1]
        t = ((x - ax) * (bx - ax) + (y - ay) * (by - ay)) / lengths[k] ** 2
        t = np.clip(t, 0.0, 1.0)
        distance = np.hypot(x - (ax + t * (bx - ax)), y - (ay + t * (by - ay)))
        fraction = start_fraction[k] + t * lengths[k] / total
        best = np.minimum(best, distance - (base + (tip - base) * fraction))
    return best


def _continent_and_island_distance_km(lon, lat, x, y):
    """(distance to the continent-or-peninsula coast, distance to the island shore), km."""
    continent = (lat - _coast_latitude(lon)) * KM_PER_DEGREE_LATITUDE
    island_x, island_y = _point_km(*ISLAND_CENTRE)
    island = np.hypot(x - island_x, y - island_y) - ISLAND_RADIUS_KM
    return np.minimum(continent, _peninsula_distance_km(x, y)), island


def coast_distance_km(lon, lat, *, map_xy=None):
    """Signed distance-like measure to the invented coast (km): positive at sea, negative on land.

    The minimum of (continent) the meridional distance north of the coast latitude, (peninsula)
    the distance from its tapered outline and (island) the distance from its circular shore.
    ``map_xy``: the EPSG:3031 coordinates in km when already known.
    """
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    x, y = map_xy if map_xy is not None else map_xy_km(lon, lat)
    return np.minimum(*_continent_and_island_distance_km(lon, lat, x, y))


def is_land(lon, lat):
    """True on the invented land (continent and its ice shelves, peninsula, island)."""
    return coast_distance_km(lon, lat) <= 0.0


def _depth_from_coast(distance_km, shelf_m, shelf_width_km, abyss_m, slope_width_km):
    """Inner shelf rising to 40 m at the coast, a shelf, a tanh slope and the abyssal plain."""
    inner = shelf_m - (shelf_m - 40.0) * np.exp(-np.maximum(distance_km, 0.0) / 25.0)
    slope = 0.5 * (1.0 + np.tanh((distance_km - shelf_width_km) / slope_width_km))
    return inner + (abyss_m - inner) * slope


def sea_floor_depth(lon, lat):
    """Sea-floor depth (m, positive down) of the invented bathymetry; NaN on land.

    Around the continent and peninsula: inner shelf rising to 40 m at the coast, shelf of
    410-550 m, a slope (45 km tanh width) at the shelf break 90-350 km from the coast (widest
    in the south-west), abyssal plain of 4350-4750 m.  The island sits on a bank of 300 m
    with a break 40 km from its shore.  The shallower of the two applies.
    """
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    x, y = map_xy_km(lon, lat)
    continent, island = _continent_and_island_distance_km(lon, lat, x, y)
    shelf = 480.0 + 70.0 * np.sin(x / 170.0) * np.cos(y / 230.0)
    shelf_width = 90.0 + 260.0 * np.exp(-(((lon + 48.0) / 14.0) ** 2))
    abyss = 4550.0 + 200.0 * np.sin(x / 310.0 + 0.7) * np.cos(y / 270.0)
    depth = np.minimum(_depth_from_coast(continent, shelf, shelf_width, abyss, 45.0),
                       _depth_from_coast(island, 300.0, 40.0, abyss, 30.0))
    return np.where(np.minimum(continent, island) > 0.0, depth, np.nan)


# --- surface fields ---------------------------------------------------------------------------

def _ice_edge_latitude(lon, days):
    """Latitude (degrees) of the ice edge (the 50 % line, roughly) at longitude and time."""
    return (-62.3 - 1.3 * np.sin(np.radians(2.0 * (np.asarray(lon) + 30.0)))
            - 0.6 * np.sin(2.0 * np.pi * days / 18.0))


def _open_water_weight(lon, lat, days):
    """0 under the pack, 1 far north of the ice edge (smooth)."""
    north_of_edge_km = (lat - _ice_edge_latitude(lon, days)) * KM_PER_DEGREE_LATITUDE
    return 0.5 * (1.0 + np.tanh((north_of_edge_km - 200.0) / 250.0))


def _gyre_shape(x, y):
    """Gaussian gyre shape G (0..1) and its map gradients dG/dx, dG/dy (per km)."""
    centre_x, centre_y = _point_km(*GYRE_CENTRE)
    theta = np.radians(GYRE_ROTATION_DEG)
    a, b = GYRE_AXES_KM
    dx, dy = x - centre_x, y - centre_y
    along = dx * np.cos(theta) + dy * np.sin(theta)
    across = -dx * np.sin(theta) + dy * np.cos(theta)
    shape = np.exp(-(along / a) ** 2 - (across / b) ** 2)
    d_along, d_across = -2.0 * along / a**2 * shape, -2.0 * across / b**2 * shape
    return (shape, d_along * np.cos(theta) - d_across * np.sin(theta),
            d_along * np.sin(theta) + d_across * np.cos(theta))


def sea_level_anomaly(lon, lat, time):
    """Sea level anomaly (m): a low over the gyre, five drifting eddies and a northward rise.

    Range about -0.3..+0.2 m.
    """
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    days = days_since_epoch(time)
    x, y = map_xy_km(lon, lat)
    gyre, _, _ = _gyre_shape(x, y)
    sla = GYRE_SEA_LEVEL_M * gyre + 0.08 * np.tanh((lat + 60.0) / 4.0)
    for eddy_lon, eddy_lat, amplitude, radius, phase in EDDIES:
        cx, cy = _point_km(eddy_lon, eddy_lat)
        swing = EDDY_EXCURSION_KM * np.sin(2.0 * np.pi * days / EDDY_PERIOD_DAYS + phase)
        cx, cy = cx - swing, cy - 0.6 * swing     # a slow back-and-forth drift of the eddy
        sla = sla + amplitude * np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / radius**2)
    return sla


def sea_surface_temperature(lon, lat, time):
    """Sea surface temperature (degC): -1.78 under the pack, rising across the ice edge to about
    +2 in the north, with a slowly moving wave of +-0.35 degC in open water."""
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    days = days_since_epoch(time)
    x, y = map_xy_km(lon, lat)
    weight = _open_water_weight(lon, lat, days)
    wave = 0.35 * np.sin(x / 180.0 + 0.6 * np.cos(y / 260.0) - 2.0 * np.pi * days / 25.0)
    return -1.78 + weight * (3.6 + wave)


def sea_ice_concentration(lon, lat, time):
    """Sea-ice concentration (fraction): a pack of up to 0.988 with a tanh edge (~70 km wide)
    near 62 deg S, thinned by coastal polynyas (0.68 at the coast), clipped to [0, 1]:
    exactly 0 from about 120 km north of the edge."""
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    days = days_since_epoch(time)
    into_pack_km = (_ice_edge_latitude(lon, days) - lat) * KM_PER_DEGREE_LATITUDE
    coast = np.maximum(coast_distance_km(lon, lat), 0.0)
    pack = 0.96 - 0.28 * np.exp(-((coast / 50.0) ** 2))
    concentration = 1.06 * pack * 0.5 * (1.0 + np.tanh(into_pack_km / 70.0)) - 0.03
    return np.clip(concentration, 0.0, 1.0)


def sea_ice_concentration_error(concentration):
    """Invented retrieval error (fraction) of ice concentration c: 0.03 + 0.28 c (1 - c).

    Small over open water and compact pack, 0.10 in the marginal zone (larger errors near the
    ice edge are what practitioners expect; the formula itself is ours).
    """
    c = np.asarray(concentration, dtype=np.float64)
    return 0.03 + 0.28 * c * (1.0 - c)


def _drift_time_integrals(days_start, days_end):
    """(integral of the gyre modulation, duration) over [start, end], both in seconds."""
    period = GYRE_PERIOD_DAYS
    modulation_days = ((days_end - days_start) - GYRE_MODULATION * period / (2.0 * np.pi)
                       * (np.cos(2.0 * np.pi * days_end / period)
                          - np.cos(2.0 * np.pi * days_start / period)))
    return modulation_days * SECONDS_PER_DAY, (days_end - days_start) * SECONDS_PER_DAY


def sea_ice_displacement_map(lon, lat, time, time_end):
    """Ice displacement (m) over [time, time_end] along the EPSG:3031 map x and y axes.

    Velocity (m/s) = gyre velocity (u, v) = (-dpsi/dy, dpsi/dx) of the streamfunction
    psi = A(t) G(x, y), with A(t) = A0 (1 + 0.3 sin(2 pi t / 9 d)) (clockwise flow for A > 0),
    plus a uniform background drift given in east/north; the displacement is the exact time
    integral of that velocity at the start position (an Eulerian definition: the field varies
    over hundreds of km, the ice moves 5-30 km).
    """
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    if time_end is None:
        raise ValueError("ice drift is a displacement over an interval: give time_end")
    days_start, days_end = days_since_epoch(time), days_since_epoch(time_end)
    x, y = map_xy_km(lon, lat)
    _, d_dx, d_dy = _gyre_shape(x, y)
    modulated, duration = _drift_time_integrals(days_start, days_end)
    # gradients are per km: divide by 1000 for m/s from a streamfunction in m^2/s
    gyre_x = -GYRE_STREAMFUNCTION_M2_S * d_dy / 1000.0 * modulated
    gyre_y = GYRE_STREAMFUNCTION_M2_S * d_dx / 1000.0 * modulated
    east, north = (component * duration for component in BACKGROUND_DRIFT_M_S)
    background_x, background_y = east_north_to_map_axes(east, north, lon)
    return gyre_x + background_x, gyre_y + background_y


def east_north_to_map_axes(east, north, lon, central_longitude=0.0):
    """Rotate east/north components onto the x/y axes of a south polar stereographic map.

    For the south polar aspect x = rho sin(lon - lon0), y = rho cos(lon - lon0) ([Snyder1987],
    USGS Professional Paper 1395, polar stereographic, south aspect; from memory), so the
    local east unit vector is (cos a, -sin a) and north (sin a, cos a) with a = lon - lon0:
    x = e cos a + n sin a, y = -e sin a + n cos a.  Rotation only: no map scale factor.
    """
    a = np.radians(np.asarray(lon, dtype=np.float64) - central_longitude)
    east, north = np.asarray(east, dtype=np.float64), np.asarray(north, dtype=np.float64)
    return east * np.cos(a) + north * np.sin(a), -east * np.sin(a) + north * np.cos(a)


def map_axes_to_east_north(x_component, y_component, lon, central_longitude=0.0):
    """Inverse of :func:`east_north_to_map_axes`: e = x cos a - y sin a, n = x sin a + y cos a."""
    a = np.radians(np.asarray(lon, dtype=np.float64) - central_longitude)
    xc, yc = np.asarray(x_component, np.float64), np.asarray(y_component, np.float64)
    return xc * np.cos(a) - yc * np.sin(a), xc * np.sin(a) + yc * np.cos(a)


# --- water column -----------------------------------------------------------------------------

#: Model layer interfaces of the demo (m).  The vertical shapes of the truth are smooth (tanh
#: clines, a softplus deep cooling), not linear between them: the mean of the truth over the
#: depths inside a layer differs from the truth at their mean depth, as in the real ocean, so a
#: per-layer super-observation needs a vertical fit (``layer_value = "fit"``) to be unbiased.
LAYER_INTERFACES_M = (0.0, 10.0, 20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0)


def _cline(depth, centre, width):
    """0 at the surface rising to 1 at depth: (tanh((z - c)/w) + tanh(c/w)) / (1 + tanh(c/w))."""
    depth = np.asarray(depth, dtype=np.float64)
    return (np.tanh((depth - centre) / width) + np.tanh(centre / width)) / (
        1.0 + np.tanh(centre / width))


def _softplus(u):
    return np.logaddexp(0.0, u)


def sea_water_temperature(lon, lat, depth, time):
    """In-situ temperature (degC): the SST in a ~50 m mixed layer, a thermocline centred at
    150 m up to a warm deep layer of 0.3-0.6 degC at 300-600 m, cooling slowly (~0.35 degC per
    km) below 600 m to about -0.7 degC at 4000 m.  Equals :func:`sea_surface_temperature` at 0 m.
    The vertical shapes are smooth (tanh cline, softplus cooling), curved inside model layers."""
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    depth = np.asarray(depth, dtype=np.float64)
    surface = sea_surface_temperature(lon, lat, time)
    x, y = map_xy_km(lon, lat)
    warm_deep = 0.45 + 0.15 * np.sin(x / 400.0) * np.cos(y / 350.0)
    cooling = 0.35e-3 * 300.0 * (_softplus((depth - 600.0) / 300.0) - _softplus(-2.0))
    cline = _cline(depth, 150.0, 60.0)
    return surface + (warm_deep - surface) * cline - cooling


def sea_water_salinity(lon, lat, depth, time):
    """Practical salinity (PSU): 33.95-34.25 at the surface (freshest under the ice), a
    halocline (a tanh shape, curved inside model layers) centred at 110 m, 34.66-34.70 below
    300 m."""
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    depth = np.asarray(depth, dtype=np.float64)
    days = days_since_epoch(time)
    x, y = map_xy_km(lon, lat)
    surface = 33.95 + 0.3 * _open_water_weight(lon, lat, days)
    deep = 34.68 + 0.02 * np.cos(x / 300.0) * np.sin(y / 380.0)
    return surface + (deep - surface) * _cline(depth, 110.0, 45.0)


# --- one entry point --------------------------------------------------------------------------

def truth_value(quantity, lon, lat, depth=None, time=None, time_end=None) -> np.ndarray:
    """The true value of ``quantity`` (a name of :data:`obsprep.model.quantities.QUANTITIES`).

    Parameters
    ----------
    quantity : str
        Quantity name; values are in its canonical units (m, degC, 1, PSU).
    lon, lat : array_like
        Degrees east / north.
    depth : array_like or None
        m, positive down; used by the water-column quantities (None = 0 m).
    time : array_like of numpy datetime64 (UTC)
        Observation time; the interval start for ice drift.
    time_end : array_like of numpy datetime64, optional
        Interval end, required for the ice-drift displacements (m over [time, time_end]).
        ``sea_ice_drift_x``/``_y`` are along the demo model grid's EPSG:3031 x/y axes.

    Inputs broadcast against each other; returns a float64 array of the broadcast shape.
    """
    get_quantity(quantity)                # KeyError listing the known names
    if time is None:
        raise ValueError(f"truth_value('{quantity}'): give the observation time")
    depth = 0.0 if depth is None else depth
    shape = np.broadcast_shapes(np.shape(lon), np.shape(lat), np.shape(depth), np.shape(time),
                                np.shape(time_end) if time_end is not None else ())
    lon = np.broadcast_to(np.asarray(lon, dtype=np.float64), shape)
    lat = np.broadcast_to(np.asarray(lat, dtype=np.float64), shape)
    depth = np.broadcast_to(np.asarray(depth, dtype=np.float64), shape)
    time = np.broadcast_to(np.asarray(time), shape)
    if quantity == "sea_level_anomaly":
        return sea_level_anomaly(lon, lat, time)
    if quantity in SST_QUANTITY_NAMES:  # the invented sea has no diurnal cycle or skin effect
        return sea_surface_temperature(lon, lat, time)
    if quantity == "sea_ice_concentration":
        return sea_ice_concentration(lon, lat, time)
    if quantity == "sea_water_temperature":
        return sea_water_temperature(lon, lat, depth, time)
    if quantity == "sea_water_salinity":
        return sea_water_salinity(lon, lat, depth, time)
    if quantity == "sea_water_potential_temperature":  # the same water, by TEOS-10
        return potential_temperature(sea_water_salinity(lon, lat, depth, time),
                                     sea_water_temperature(lon, lat, depth, time),
                                     pressure_from_depth(depth, lat), lon, lat)
    if time_end is None:
        raise ValueError(f"truth_value('{quantity}'): ice drift is a displacement over an "
                         f"interval; give time_end")
    time_end = np.broadcast_to(np.asarray(time_end), shape)
    along_x, along_y = sea_ice_displacement_map(lon, lat, time, time_end)
    if quantity == "sea_ice_drift_x":
        return along_x
    if quantity == "sea_ice_drift_y":
        return along_y
    east, north = map_axes_to_east_north(along_x, along_y, lon)
    if quantity == "sea_ice_drift_east":
        return east
    if quantity == "sea_ice_drift_north":
        return north
    raise KeyError(f"no truth defined for quantity '{quantity}'")  # pragma: no cover


#: every quantity has a truth (checked by the tests against obsprep.model.quantities)
TRUTH_QUANTITIES = tuple(QUANTITIES)
