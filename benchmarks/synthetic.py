"""Invented data for the benchmarks: one day of GHRSST GDS 2.0 style L2P swaths over a projected
model grid, random observations for the accumulator, and a curvilinear grid for geolocation.

The files follow the GDS 2.0 layout as far as obsprep reads it (from memory of the GHRSST Data
Specification 2.0): dimensions ``(time = 1, nj, ni)``; 2-D ``lat``/``lon`` (float32);
``time`` (int32, seconds since 1981-01-01); ``sea_surface_temperature`` packed int16 kelvin
(scale 0.01, offset 273.15, fill -32768); ``sst_dtime`` (int32 seconds from ``time``);
``quality_level`` (byte, 0 no data ... 5 best); ``sses_bias`` and ``sses_standard_deviation``
(byte, kelvin, scale 0.02); ``l2p_flags`` (int16 bit flags).  Values are invented: a smooth
field plus noise, cloud-like quality patterns, nothing of any real sensor.
"""

from __future__ import annotations

import numpy as np

#: the benchmark's model grid: north polar stereographic, 5 km cells, 800 x 880
GRID = {"type": "projected", "crs": "EPSG:3413", "x_min": -2000e3, "y_min": -2200e3,
        "dx": 5000.0, "dy": 5000.0, "nx": 800, "ny": 880}
ANALYSIS_DATE = "2026-11-20"
ANALYSIS_TIME = np.datetime64("2026-11-20T00:00:00")
EPOCH_1981 = np.datetime64("1981-01-01T00:00:00")
QUALITY_MEANINGS = "no_data bad_data worst_quality low_quality acceptable_quality best_quality"
L2P_MEANINGS = ("microwave land ice lake river reserved_for_future_use "
                "reserved_for_future_use reserved_for_future_use")


def config_toml(paths_glob: str, out_dir: str, slots: int = 4, source_extra: str = "") -> str:
    """A build configuration for the synthetic day (window [-24 h, 0 h), ``slots`` slots);
    ``source_extra``: more TOML lines for the source table (e.g. an error correlation)."""
    grid = "\n".join(f"{k} = {v!r}" if not isinstance(v, str) else f'{k} = "{v}"'
                     for k, v in GRID.items())
    return f"""title = "benchmark: synthetic GDS 2.0 style SST day"
[window]
date = "{ANALYSIS_DATE}"
analysis_time = "{{date}}T00:00:00"
start_hours = -24.0
end_hours = 0.0
slot_hours = {24.0 / slots}
[grid]
{grid}
[[sources]]
sensor = "sst_l2p"
paths = ["{paths_glob}"]
kind = "auto"
{source_extra}
error = {{ rule = "constant", value = 0.45 }}
[output]
directory = "{out_dir}"
"""


def swath_pixels(granule: int, rows: int, columns: int, rng):
    """Projected x, y (m, EPSG:3413) of one invented granule: a straight strip across the
    domain, 1 km pixels, heading and offset varying with the granule number."""
    heading = np.radians(17.0 + 37.0 * granule)
    along = (np.arange(rows) - rows / 2) * 1000.0
    across = (np.arange(columns) - columns / 2) * 1000.0
    centre_x = 900e3 * np.sin(1.3 * granule + 0.4)
    centre_y = 900e3 * np.cos(0.7 * granule + 1.1)
    a, c = np.meshgrid(along, across, indexing="ij")
    x = centre_x + a * np.cos(heading) - c * np.sin(heading)
    y = centre_y + a * np.sin(heading) + c * np.cos(heading)
    return x, y


def write_granule(path, granule: int, rows: int, columns: int, *, seed: int = 0,
                  complevel: int = 4) -> int:
    """Write one GDS 2.0 style L2P granule; returns the number of pixels."""
    import netCDF4
    import pyproj

    rng = np.random.default_rng([seed, granule])
    x, y = swath_pixels(granule, rows, columns, rng)
    to_lonlat = pyproj.Transformer.from_crs("EPSG:3413", "EPSG:4326", always_xy=True)
    lon, lat = to_lonlat.transform(x, y)
    # granule start spread over the window [-24 h, 0 h); rows scanned 0.15 s apart
    start = ANALYSIS_TIME - np.timedelta64(24 * 3600, "s") + np.timedelta64(
        int((granule * 2711) % (24 * 3600 - 400)), "s")
    dtime = np.floor(np.arange(rows) * 0.15).astype(np.int32)[:, None] * np.ones(columns, np.int32)
    kelvin = (273.15 + 4.0 + 6.0 * np.sin(np.radians(lat) * 3.0) * np.cos(np.radians(lon))
              + 0.3 * rng.standard_normal((rows, columns)))
    # cloud-like quality: a smooth random field thresholded, plus pixel noise
    coarse = rng.standard_normal((rows // 50 + 2, columns // 50 + 2))
    cloud = np.kron(coarse, np.ones((50, 50)))[:rows, :columns] + 0.5 * rng.standard_normal(
        (rows, columns))
    # about 6 % no data (0), 14 % bad (1), the rest usable, best (5) the most common
    quality = np.digitize(-cloud, [-1.6, -1.0, -0.6, -0.2, 0.3]).astype(np.int8)
    sst = np.round((kelvin - 273.15) / 0.01)
    sst = np.where(quality == 0, -32768, sst).astype(np.int16)
    bias = np.round((-0.1 + 0.05 * rng.standard_normal((rows, columns))) / 0.02).astype(np.int8)
    sd = np.round((0.45 + 0.05 * rng.standard_normal((rows, columns)) - 2.54) / 0.02)
    sd = np.clip(sd, -127, 127).astype(np.int8)
    flags = np.where(rng.random((rows, columns)) < 0.02, 4, 0).astype(np.int16)  # a little ice

    chunks = (1, min(rows, 512), columns)
    opts = dict(zlib=complevel > 0, complevel=max(complevel, 1), shuffle=True)
    with netCDF4.Dataset(path, "w", format="NETCDF4") as nc:
        nc.setncatts({"Conventions": "CF-1.7, ACDD-1.3", "title": "synthetic L2P granule (invented)",
                      "gds_version_id": "2.0", "platform": "invented-sat", "sensor": "invented-ir",
                      "id": f"SYNTH-L2P-{granule:04d}", "processing_level": "L2P"})
        nc.createDimension("time", 1)
        nc.createDimension("nj", rows)
        nc.createDimension("ni", columns)
        t = nc.createVariable("time", "i4", ("time",))
        t.setncatts({"standard_name": "time", "long_name": "reference time of sst file",
                     "units": "seconds since 1981-01-01 00:00:00", "calendar": "gregorian",
                     "axis": "T"})
        t[:] = int((start - EPOCH_1981) / np.timedelta64(1, "s"))
        for name, values, sn, units in (("lat", lat, "latitude", "degrees_north"),
                                        ("lon", lon, "longitude", "degrees_east")):
            v = nc.createVariable(name, "f4", ("nj", "ni"), chunksizes=chunks[1:], **opts)
            v.setncatts({"standard_name": sn, "units": units, "long_name": sn})
            v[:] = values.astype(np.float32)

        def packed(name, dtype, data, attrs, fill):
            v = nc.createVariable(name, dtype, ("time", "nj", "ni"), fill_value=fill,
                                  chunksizes=chunks, **opts)
            v.set_auto_maskandscale(False)
            v.setncatts(attrs)
            v[0] = data
            return v

        packed("sea_surface_temperature", "i2", sst, {
            "long_name": "sea surface skin temperature", "standard_name": "sea_surface_skin_temperature",
            "units": "kelvin", "scale_factor": np.float32(0.01), "add_offset": np.float32(273.15),
            "valid_min": np.int16(-200), "valid_max": np.int16(5000), "coordinates": "lon lat"},
            np.int16(-32768))
        packed("sst_dtime", "i4", dtime, {
            "long_name": "time difference from reference time", "units": "second",
            "add_offset": np.int32(0), "scale_factor": np.int32(1), "coordinates": "lon lat"},
            np.int32(-2147483648))
        packed("quality_level", "i1", quality, {
            "long_name": "quality level of SST pixel", "coordinates": "lon lat",
            "flag_values": np.arange(6, dtype=np.int8), "flag_meanings": QUALITY_MEANINGS},
            np.int8(-128))
        packed("sses_bias", "i1", bias, {
            "long_name": "SSES bias estimate", "units": "kelvin", "scale_factor": np.float32(0.02),
            "add_offset": np.float32(0.0), "coordinates": "lon lat"}, np.int8(-128))
        packed("sses_standard_deviation", "i1", sd, {
            "long_name": "SSES standard deviation estimate", "units": "kelvin",
            "scale_factor": np.float32(0.02), "add_offset": np.float32(2.54),
            "coordinates": "lon lat"}, np.int8(-128))
        packed("l2p_flags", "i2", flags, {
            "long_name": "L2P flags", "coordinates": "lon lat",
            "flag_masks": np.array([1, 2, 4, 8, 16, 32, 64, 128], dtype=np.int16),
            "flag_meanings": L2P_MEANINGS}, None)
    return rows * columns


def write_day(directory, total_pixels: int, *, pixels_per_granule: int = 2_500_000,
              seed: int = 0, complevel: int = 4) -> list:
    """Write granules totalling about ``total_pixels`` into ``directory``; returns the paths."""
    from pathlib import Path

    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    columns = 1250 if pixels_per_granule >= 1250 * 40 else max(10, int(np.sqrt(pixels_per_granule)))
    rows = max(10, pixels_per_granule // columns)
    n_granules = max(1, int(round(total_pixels / (rows * columns))))
    paths = []
    for granule in range(n_granules):
        path = directory / f"synth_l2p_{granule:04d}.nc"
        if not path.exists():
            tmp = path.with_suffix(".partial")
            write_granule(tmp, granule, rows, columns, seed=seed, complevel=complevel)
            tmp.replace(path)
        paths.append(path)
    return paths


NEEDED_VARIABLES = ("lat", "lon", "time", "sea_surface_temperature", "sst_dtime",
                    "quality_level", "sses_bias", "sses_standard_deviation", "l2p_flags")


def read_needed_variables(paths) -> int:
    """Baseline: read every needed variable of every file with plain netCDF4 (decoded: mask and
    scale applied, as any reader must); returns the number of values read."""
    import netCDF4

    total = 0
    for path in paths:
        with netCDF4.Dataset(path) as nc:
            for name in NEEDED_VARIABLES:
                total += np.asarray(nc.variables[name][:]).size
    return total


def read_needed_variables_in_processes(paths, processes: int = 2) -> int:
    """The same baseline in ``processes`` worker processes (files dealt out in turn): the
    yardstick for a build that runs with ``--jobs`` of the same number."""
    from concurrent.futures import ProcessPoolExecutor

    shares = [list(paths)[k::processes] for k in range(processes)]
    with ProcessPoolExecutor(processes) as pool:
        return sum(pool.map(read_needed_variables, shares))


def random_observations(n: int, nx: int, ny: int, n_slots: int, seed: int = 0):
    """Invented observations for the accumulator benchmark: cells, slots, SST-like values."""
    rng = np.random.default_rng(seed)
    i = rng.integers(0, nx, n)
    j = rng.integers(0, ny, n)
    slot = rng.integers(0, n_slots, n)
    value = 271.35 + 10.0 * rng.random(n)
    error = 0.3 + 0.3 * rng.random(n)
    return i, j, slot, value, error, rng


def swath_order_observations(n: int, n_slots: int = 4, columns: int = 1250, seed: int = 0):
    """Invented observations for the accumulator in the order a swath delivers them: scan lines
    of ``columns`` 1 km pixels (:func:`swath_pixels`) across the benchmark grid, granule after
    granule, so that neighbouring pixels fall into the same or neighbouring 5 km cells.

    Returns i, j, slot (int64 cell indices and time slot), value (SST-like, kelvin), error
    (kelvin), time (s from the analysis time, rows 0.15 s apart), lon, lat (degrees): the
    first ``n`` pixels that fall inside the grid, in scan order.
    """
    import pyproj

    rng = np.random.default_rng(seed)
    to_lonlat = pyproj.Transformer.from_crs(GRID["crs"], "EPSG:4326", always_xy=True)
    rows = 2000
    parts, have, granule = [], 0, 0
    while have < n:
        x, y = swath_pixels(granule, rows, columns, rng)
        fi = np.floor((x - GRID["x_min"]) / GRID["dx"]).ravel()
        fj = np.floor((y - GRID["y_min"]) / GRID["dy"]).ravel()
        inside = (fi >= 0) & (fi < GRID["nx"]) & (fj >= 0) & (fj < GRID["ny"])
        if inside.any():
            # granule start spread over the window [-24 h, 0 h), as in write_granule
            start = -24 * 3600.0 + (granule * 2711) % (24 * 3600 - 400)
            row_time = start + np.arange(rows) * 0.15
            time_s = np.repeat(row_time, columns)[inside]
            lon, lat = to_lonlat.transform(x.ravel()[inside], y.ravel()[inside])
            parts.append((fi[inside].astype(np.int64), fj[inside].astype(np.int64), time_s,
                          np.asarray(lon), np.asarray(lat)))
            have += int(inside.sum())
        granule += 1
    i, j, time_s, lon, lat = (np.concatenate(column)[:n] for column in zip(*parts))
    slot_seconds = 24 * 3600.0 / n_slots
    slot = np.clip(np.floor((time_s + 24 * 3600.0) / slot_seconds), 0, n_slots - 1).astype(np.int64)
    value = 271.35 + 10.0 * rng.random(n)
    error = 0.3 + 0.3 * rng.random(n)
    return i, j, slot, value, error, time_s, lon, lat


def curvilinear_grid(ny: int = 880, nx: int = 800):
    """A curvilinear grid: the benchmark projected grid's centres bent by a smooth shear, so
    lines of constant i and j are curves in longitude/latitude."""
    import pyproj

    x = GRID["x_min"] + (np.arange(nx) + 0.5) * GRID["dx"]
    y = GRID["y_min"] + (np.arange(ny) + 0.5) * GRID["dy"]
    xx, yy = np.meshgrid(x, y)
    xx = xx + 0.03 * yy * np.sin(yy / 1.5e6)
    yy = yy + 0.02 * xx * np.cos(xx / 2.0e6)
    to_lonlat = pyproj.Transformer.from_crs("EPSG:3413", "EPSG:4326", always_xy=True)
    lon, lat = to_lonlat.transform(xx, yy)
    return np.asarray(lon), np.asarray(lat)
