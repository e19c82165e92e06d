"""The demo's synthetic model ensemble on the model grid, for ``obsprep audit``.

One file ``ensemble/ensemble_YYYYMMDD.nc`` with dimensions (member, time, y, x): sea level
anomaly, sea surface temperature and sea-ice concentration of 20 members at the centre of each
time slot (12:00 UTC of each window day).  It is built so that the innovation statistics of a
correct observation error are known exactly:

    mean        = truth + b,            b   = sigma(x) * sqrt(1 + 1/M) * z_0
    member m    = mean + e_m - mean(e), e_m = sigma(x) * z_m    (m = 1..M)

with z_0 .. z_M independent smooth Gaussian random fields of unit variance (white noise
smoothed by a Gaussian kernel of 30 km, periodic edges, divided by the kernel's L2 norm so the
variance is exactly 1).  The ensemble mean error b is then what it is when the truth is
statistically one more member: E[b^2] = (1 + 1/M) sigma^2, with sigma^2 = E[sample variance of
the members] (ddof = 1; the centring leaves the sample variance of e_m unchanged; the mean of M
exchangeable draws misses another by sigma^2 + sigma^2 / M).  Hence, for an observation
y = truth + eps with error variance sigma_o^2, the innovation d = y - H(mean) has
E[d^2] = sigma_o^2 + (1 + 1/M) sigma_ens^2, the consistency condition of [Desroziers2005],
QJRMS 131) for d = y - H(x_b),
up to the horizontal interpolation of the truth (the truth is smooth on the 10 km grid) and the
time between an observation and the nearest output time.

Spreads (invented, chosen near the super-observation errors so that the innovations can tell a
wrong observation error): sea level 0.02 m, SST 0.15 K, ice concentration 0.25 c (1 - c)
(vanishing in open water and compact ice, so no member needs clipping to 0..1).  T/S profiles
and ice drift have no ensemble counterpart here (a 3-D ensemble would not be small).
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pyproj
from scipy import ndimage

from obsprep.demo import truth
from obsprep.demo.scenario import (
    MODEL_GRID,
    SLOT_HOURS,
    _create,
    _grid_mapping_variable,
    _lonlat_variables,
    _projected_axes,
    _time_number,
    _variable,
    model_grid_axes,
    model_grid_lonlat,
)
from obsprep.model.quantities import get_quantity

MEMBERS = 20
CORRELATION_CELLS = 3.0
RANDOM_STREAM = 8
#: constant spreads (canonical units); ice concentration uses ICE_SPREAD_FACTOR c (1 - c)
SPREAD = {"sea_level_anomaly": 0.02, "sea_surface_temperature": 0.15}
ICE_SPREAD_FACTOR = 0.25
#: packing steps (canonical units), far below the spreads
PACKING_STEP = {"sea_level_anomaly": 0.002, "sea_surface_temperature": 0.02,
                "sea_ice_concentration": 0.002}
QUANTITIES = ("sea_level_anomaly", "sea_surface_temperature", "sea_ice_concentration")


def unit_random_field(rng, shape, correlation_cells=CORRELATION_CELLS) -> np.ndarray:
    """Smooth Gaussian random field of unit variance: white noise convolved (periodically) with a
    Gaussian kernel of ``correlation_cells`` cells, divided by the kernel's L2 norm (the
    variance of a linear filter of white noise is the sum of its squared weights)."""
    smooth = ndimage.gaussian_filter(rng.standard_normal(shape), correlation_cells, mode="wrap")
    return smooth / _kernel_norm(correlation_cells)


@cache
def _kernel_norm(correlation_cells) -> float:
    """L2 norm of the Gaussian kernel scipy applies (its response to a unit impulse)."""
    size = int(8 * correlation_cells) * 2 + 1
    delta = np.zeros((size, size))
    delta[size // 2, size // 2] = 1.0
    kernel = ndimage.gaussian_filter(delta, correlation_cells, mode="constant")
    return float(np.sqrt((kernel * kernel).sum()))


def spread_field(quantity, true_values) -> np.ndarray:
    """The ensemble standard deviation sigma(x) of ``quantity`` (canonical units)."""
    if quantity == "sea_ice_concentration":
        c = np.clip(true_values, 0.0, 1.0)
        return ICE_SPREAD_FACTOR * c * (1.0 - c)
    return np.full(np.shape(true_values), SPREAD[quantity])


def output_times(scn) -> np.ndarray:
    """Centres of the time slots of the window (datetime64[s])."""
    start, end = scn.window
    slot = np.timedelta64(int(SLOT_HOURS * 3600), "s")
    n = int((end - start) / slot)
    return start + slot // 2 + np.arange(n) * slot


def write_ensemble(scn, members=MEMBERS):
    """Write the ensemble file; returns (path, description for the manifest)."""
    x, y = model_grid_axes()
    lon, lat = model_grid_lonlat()
    sea = ~truth.is_land(lon, lat)
    times = output_times(scn)
    shape = lon.shape
    path = scn.path(f"ensemble/ensemble_{scn.analysis_time.astype('datetime64[D]').astype(object):%Y%m%d}.nc")
    with _create(path, f"demo model ensemble ({members} members) on the model grid",
                 comment="Synthetic: truth + a mean error b + centred member perturbations, "
                         "b and perturbations smooth Gaussian fields of the same variance "
                         "(see obsprep.demo.ensemble). NaN (fill) on land.") as ds:
        _projected_axes(ds, x, y, MODEL_GRID["dx"], MODEL_GRID["dy"], "model grid")
        _grid_mapping_variable(ds, "crs", pyproj.CRS(MODEL_GRID["crs"]))
        _lonlat_variables(ds, ("y", "x"), lon, lat)
        ds.createDimension("member", members)
        ds.createDimension("time", times.size)
        _variable(ds, "member", ("member",), np.int32, np.arange(1, members + 1), {
            "standard_name": "realization", "units": "1", "long_name": "ensemble member number"})
        _variable(ds, "time", ("time",), np.float64, _time_number(times, "1970-01-01", 1.0), {
            "standard_name": "time", "units": "seconds since 1970-01-01 00:00:00",
            "calendar": "standard", "axis": "T", "long_name": "model output time"})
        for q_index, name in enumerate(QUANTITIES):
            quantity = get_quantity(name)
            step = PACKING_STEP[name]
            variable = ds.createVariable(name, np.int16, ("member", "time", "y", "x"),
                                         fill_value=np.int16(-32767), zlib=True, complevel=4,
                                         shuffle=True, chunksizes=(1, 1) + shape)
            variable.set_auto_maskandscale(False)
            variable.setncatts({"standard_name": quantity.standard_name, "units": quantity.units,
                                "long_name": f"model {quantity.long_name}",
                                "scale_factor": step, "add_offset": 0.0,
                                "grid_mapping": "crs", "coordinates": "time lat lon"})
            for t_index, when in enumerate(times):
                rng = scn.rng(RANDOM_STREAM, q_index, t_index)
                true_values = truth.truth_value(name, lon, lat, 0.0, when)
                sigma = spread_field(name, true_values)
                mean = true_values + sigma * np.sqrt(1.0 + 1.0 / members) * unit_random_field(rng, shape)
                perturbations = np.stack([unit_random_field(rng, shape) for _ in range(members)])
                perturbations -= perturbations.mean(axis=0)
                values = mean[None] + sigma[None] * perturbations
                packed = np.where(sea[None], np.round(values / step), -32767).astype(np.int16)
                variable[:, t_index] = packed
    description = {
        "file": path.relative_to(scn.root).as_posix(), "members": members,
        "times": [str(t) for t in times], "quantities": list(QUANTITIES),
        "spread": {**SPREAD, "sea_ice_concentration": f"{ICE_SPREAD_FACTOR} c (1 - c)"},
        "correlation_length_km": CORRELATION_CELLS * MODEL_GRID["dx"] / 1000.0,
        "note": "mean error drawn from the ensemble's own distribution: E[(mean - truth)^2] "
                "equals the expected ensemble variance",
    }
    return path, description
