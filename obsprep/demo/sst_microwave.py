"""Writer of the demo's microwave SST product: a coarse daily L3-like grid that sees through
clouds but not near land or ice.

Microwave radiometers measure the subskin temperature through clouds, on footprints of a few
tens of km, with errors of 0.5-0.8 K; their side lobes contaminate the cells near land, and sea
ice hides the sea (FIELD notes; values from memory).  The demo product: a regular 0.25 degree
grid over the sea of the model domain, one file per window day, time the centre of the day,
subskin SST in packed int16 K, a constant stored error, and a bit mask for land, sea ice and
cells near the coast.  Noise is Gaussian with the stored sigma, correlated within the file
(:mod:`obsprep.demo.noise`), plus the sub-cell variability, from its own random stream.
"""

from __future__ import annotations

import numpy as np

from obsprep.demo import truth
from obsprep.demo.noise import sensor_noise, subcell_variability
from obsprep.demo.scenario import PLATFORMS, SST_GRID_EXTENT, SWATH_ICE_THRESHOLD, write_daily_latlon_sst

SENSOR = "sst_microwave"
SIGMA_K = 0.6
RESOLUTION_DEG = 0.25
#: cells closer to the coast than this are flagged near_coast (side-lobe contamination)
COAST_DISTANCE_KM = 50.0
RANDOM_STREAM = 7


def write_sst_microwave(scn):
    """Write one file per window day into ``obs/sst_microwave/``; returns (paths, counts)."""
    lon0, lon1, lat0, lat1 = SST_GRID_EXTENT
    n_lon = int(round((lon1 - lon0) / RESOLUTION_DEG))
    n_lat = int(round((lat1 - lat0) / RESOLUTION_DEG))
    step_lon, step_lat = (lon1 - lon0) / n_lon, (lat1 - lat0) / n_lat
    lon = lon0 + (np.arange(n_lon) + 0.5) * step_lon
    lat = lat0 + (np.arange(n_lat) + 0.5) * step_lat
    lon2, lat2 = np.meshgrid(lon, lat)
    coast = truth.coast_distance_km(lon2, lat2)
    sea = coast > 0.0
    near_coast = sea & (coast < COAST_DISTANCE_KM)
    paths, counts = [], {}
    for day_index, day in enumerate(scn.days):
        time = day.astype("datetime64[s]") + np.timedelta64(12 * 3600, "s")
        rng = scn.rng(RANDOM_STREAM, day_index)
        kelvin = (273.15 + truth.sea_surface_temperature(lon2, lat2, time)
                  + subcell_variability(rng, "sea_surface_temperature", lon2.shape)
                  + sensor_noise(rng, SENSOR, np.full(lon2.shape, SIGMA_K)))  # group: the file
        ice = sea & (truth.sea_ice_concentration(lon2, lat2, time) >= SWATH_ICE_THRESHOLD)
        mask = np.where(sea, 0, 1) + np.where(ice, 2, 0) + np.where(near_coast, 4, 0)
        path = scn.path(f"obs/sst_microwave/sst_mw_{day.astype(object):%Y%m%d}.nc")
        write_daily_latlon_sst(
            path, "demo microwave SST (L3-like daily grid, 0.25 degree)", PLATFORMS[SENSOR], time,
            lon, lat, step_lon, step_lat, kelvin, sea, SIGMA_K,
            time_comment="daily composite, centre of the day",
            sst=("subskin_sst", "sea_surface_subskin_temperature",
                 "microwave subskin sea surface temperature"),
            error=("sst_error", "SST error standard deviation"),
            flags=("surface_flags", "surface bit mask (no bit set: open water far from land)",
                   mask, [1, 2, 4], "land sea_ice near_coast"))
        paths.append(path)
        counts[path.name] = {"sea": int(sea.sum()), "sea_ice": int(ice.sum()),
                             "near_coast": int(near_coast.sum())}
    return paths, counts
