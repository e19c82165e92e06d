"""Small files in the community formats, written by the tests with netCDF4.

Layouts are recalled from the standards, not copied from real products ("from memory"):
GHRSST Data Specification 2.0 (GDS 2.0) for L2P and L3 SST, the Argo user's manual for core
profile files (format version 3.1).  Values are invented.
"""

from __future__ import annotations

import netCDF4
import numpy as np

#: GDS 2.0 quality_level meanings (from memory)
QUALITY_MEANINGS = "no_data bad_data worst_quality low_quality acceptable_quality best_quality"
#: GDS 2.0 L2P flag bits 0-4 (from memory; bits above are provider-specific)
L2P_FLAG_MASKS = [1, 2, 4, 8, 16]
L2P_FLAG_MEANINGS = "microwave land ice lake river"
GDS2_EPOCH = np.datetime64("1981-01-01T00:00:00", "ns")
ARGO_EPOCH = np.datetime64("1950-01-01T00:00:00", "ns")


#: a regular 0.5-degree test grid over 40..46 N, -10..-2 E (a TOML [grid] table)
REGULAR_GRID_TOML = """[grid]
type = "regular"
lon_min = -10.0
lat_min = 40.0
dlon = 0.5
dlat = 0.5
nlon = 16
nlat = 12
"""


def _packed(nc, name, dtype, dims, values, fill, scale, offset, **attrs):
    v = nc.createVariable(name, dtype, dims, fill_value=fill)
    v.setncatts({"scale_factor": scale, "add_offset": offset, **attrs})
    v.set_auto_maskandscale(True)
    values = np.asarray(values, dtype=np.float64)
    v[...] = np.ma.masked_array(np.nan_to_num(values), mask=np.isnan(values))
    return v


def write_gds2(path, sst_kelvin, *, bias=None, sd=None, dtime=None, quality=None, flags=None,
               level="L2P", reference_seconds=1_000_000_000, lat=None, lon=None,
               sst_standard_name="sea_surface_skin_temperature", extra_attrs=None):
    """A GDS 2.0 file: L2P on (time, nj, ni) with 2-D lat/lon, or L3 on (time, lat, lon).

    ``sst_kelvin`` etc. are 2-D arrays (NaN = fill); ``reference_seconds`` is the reference
    ``time`` in seconds since 1981-01-01.
    """
    sst_kelvin = np.asarray(sst_kelvin, dtype=np.float64)
    ny, nx = sst_kelvin.shape
    shape = (1, ny, nx)
    zeros = np.zeros((ny, nx))
    with netCDF4.Dataset(path, "w") as nc:
        nc.setncatts({"Conventions": "CF-1.7, ACDD-1.3", "gds_version_id": "2.0",
                      "processing_level": level, "platform": "demo_sat", "sensor": "demo_ir",
                      "id": "DEMO-L2P-GHRSST", **(extra_attrs or {})})
        nc.createDimension("time", 1)
        if level == "L2P":
            dims = ("time", "nj", "ni")
            nc.createDimension("nj", ny)
            nc.createDimension("ni", nx)
            lat2, lon2 = np.meshgrid(np.linspace(-60.0, -59.0, ny) if lat is None else lat,
                                     np.linspace(350.0, 351.0, nx) if lon is None else lon,
                                     indexing="ij")
            for name, data, sn, units in (("lat", lat2, "latitude", "degrees_north"),
                                          ("lon", lon2, "longitude", "degrees_east")):
                v = nc.createVariable(name, "f4", ("nj", "ni"))
                v.setncatts({"standard_name": sn, "units": units})
                v[:] = data
        else:
            dims = ("time", "lat", "lon")
            nc.createDimension("lat", ny)
            nc.createDimension("lon", nx)
            for name, data, sn, units in (
                    ("lat", np.linspace(-60.0, -59.0, ny) if lat is None else lat, "latitude",
                     "degrees_north"),
                    ("lon", np.linspace(-10.0, -9.0, nx) if lon is None else lon, "longitude",
                     "degrees_east")):
                v = nc.createVariable(name, "f4", (name,))
                v.setncatts({"standard_name": sn, "units": units, "axis": "Y" if sn ==
                             "latitude" else "X"})
                v[:] = data
        t = nc.createVariable("time", "i4", ("time",))
        t.setncatts({"standard_name": "time", "units": "seconds since 1981-01-01 00:00:00",
                     "axis": "T", "long_name": "reference time of sst file"})
        t[:] = [reference_seconds]
        _packed(nc, "sea_surface_temperature", "i2", dims, sst_kelvin.reshape(shape),
                np.int16(-32768), 0.01, 273.15, units="kelvin", standard_name=sst_standard_name,
                coordinates="lon lat" if level == "L2P" else "",
                long_name="sea surface skin temperature")
        _packed(nc, "sst_dtime", "i4", dims, (zeros if dtime is None else dtime).reshape(shape),
                np.int32(-2147483648), 1.0, 0.0, units="second",
                long_name="time difference from reference time")
        _packed(nc, "sses_bias", "i1", dims, (zeros if bias is None else bias).reshape(shape),
                np.int8(-128), 0.02, 0.0, units="kelvin", long_name="SSES bias estimate")
        _packed(nc, "sses_standard_deviation", "i1", dims,
                (zeros + 0.5 if sd is None else sd).reshape(shape), np.int8(-128), 0.01, 1.0,
                units="kelvin", long_name="SSES standard deviation")
        q = nc.createVariable("quality_level", "i1", dims, fill_value=np.int8(-128))
        q.setncatts({"long_name": "quality level of SST pixel", "valid_min": np.int8(0),
                     "valid_max": np.int8(5), "flag_values": np.arange(6, dtype=np.int8),
                     "flag_meanings": QUALITY_MEANINGS})
        q[:] = (np.full((ny, nx), 5) if quality is None else quality).reshape(shape)
        f = nc.createVariable("l2p_flags", "i2", dims)
        f.setncatts({"long_name": "L2P flags", "flag_masks": np.array(L2P_FLAG_MASKS, np.int16),
                     "flag_meanings": L2P_FLAG_MEANINGS})
        f[:] = (np.zeros((ny, nx)) if flags is None else flags).reshape(shape)
    return str(path)


def _chars(values, width):
    return netCDF4.stringtochar(np.array(values, dtype=f"S{width}"))


def write_argo(path, *, platform, cycle, mode, juld, lat, lon, pres, temp, psal,
               temp_qc=None, psal_qc=None, pres_qc=None, adjusted=None, errors=None,
               adjusted_qc=None, position_qc=None, juld_qc=None, direction=None):
    """An Argo core profile file (format 3.1, from memory), N_PROF x N_LEVELS.

    Per profile: ``platform`` (str), ``cycle``, ``mode`` ('R', 'A', 'D'), ``juld`` (days since
    1950-01-01), ``lat``, ``lon``; per level ``pres``, ``temp``, ``psal`` (NaN = fill) and QC
    strings ('1'..'9').  ``adjusted`` = {"PRES"/"TEMP"/"PSAL": array}, ``errors`` and
    ``adjusted_qc`` likewise for ``<P>_ADJUSTED_ERROR`` and ``<P>_ADJUSTED_QC`` (default: the
    raw flag where the adjusted value is present, else '4'); profiles in real-time mode get fill
    there.
    """
    pres = np.asarray(pres, dtype=np.float64)
    n_prof, n_levels = pres.shape
    fill = 99999.0

    def qc_or(default_good, given, data):
        if given is not None:
            return np.asarray(given, dtype="S1")
        return np.where(np.isfinite(data), b"1", b" ").astype("S1") if default_good else given

    with netCDF4.Dataset(path, "w", format="NETCDF4_CLASSIC") as nc:
        nc.setncatts({"title": "Argo float vertical profile", "Conventions": "Argo-3.1 CF-1.6",
                      "featureType": "trajectoryProfile"})
        for name, size in (("N_PROF", n_prof), ("N_LEVELS", n_levels), ("STRING8", 8),
                           ("STRING16", 16), ("STRING4", 4), ("DATE_TIME", 14)):
            nc.createDimension(name, size)
        v = nc.createVariable("DATA_TYPE", "S1", ("STRING16",))
        v[:] = _chars("Argo profile", 16)
        v = nc.createVariable("FORMAT_VERSION", "S1", ("STRING4",))
        v[:] = _chars("3.1", 4)
        v = nc.createVariable("PLATFORM_NUMBER", "S1", ("N_PROF", "STRING8"), fill_value=b" ")
        v.long_name = "Float unique identifier"
        v[:] = _chars(platform, 8)
        v = nc.createVariable("CYCLE_NUMBER", "i4", ("N_PROF",), fill_value=np.int32(99999))
        v[:] = cycle
        for name, values in (("DIRECTION", direction or ["A"] * n_prof), ("DATA_MODE", mode),
                             ("JULD_QC", juld_qc or ["1"] * n_prof),
                             ("POSITION_QC", position_qc or ["1"] * n_prof)):
            v = nc.createVariable(name, "S1", ("N_PROF",), fill_value=b" ")
            v[:] = np.array(values, dtype="S1")
        v = nc.createVariable("JULD", "f8", ("N_PROF",), fill_value=999999.0)
        v.setncatts({"standard_name": "time", "units": "days since 1950-01-01 00:00:00 UTC",
                     "conventions": "Relative julian days with decimal part (as parts of day)",
                     "axis": "T"})
        v[:] = juld
        for name, values, units, sn in (("LATITUDE", lat, "degree_north", "latitude"),
                                        ("LONGITUDE", lon, "degree_east", "longitude")):
            v = nc.createVariable(name, "f8", ("N_PROF",), fill_value=fill)
            v.setncatts({"standard_name": sn, "units": units})
            v[:] = values
        qcs = {"PRES": pres_qc, "TEMP": temp_qc, "PSAL": psal_qc}
        data = {"PRES": pres, "TEMP": np.asarray(temp, float), "PSAL": np.asarray(psal, float)}
        meta = {"PRES": ("decibar", "sea_water_pressure"),
                "TEMP": ("degree_Celsius", "sea_water_temperature"),
                "PSAL": ("psu", "sea_water_salinity")}
        adjusted = adjusted or {}
        errors = errors or {}
        is_adjusted = np.isin(np.array(mode), ["A", "D"])
        for param in ("PRES", "TEMP", "PSAL"):
            units, sn = meta[param]
            raw = data[param]
            adj = np.asarray(adjusted.get(param, raw), dtype=float)
            adj = np.where(is_adjusted[:, None], adj, np.nan)
            err = np.asarray(errors.get(param, np.full(raw.shape, np.nan)), dtype=float)
            err = np.where(is_adjusted[:, None], err, np.nan)
            qc = qc_or(True, qcs[param], raw)
            adj_qc = np.where(np.isfinite(adj), qc, b"4")
            if param in (adjusted_qc or {}):
                adj_qc = np.asarray(adjusted_qc[param], dtype="S1")
            adj_qc = np.where(is_adjusted[:, None], adj_qc, b" ")
            for name, values in ((param, raw), (f"{param}_ADJUSTED", adj),
                                 (f"{param}_ADJUSTED_ERROR", err)):
                v = nc.createVariable(name, "f4", ("N_PROF", "N_LEVELS"), fill_value=np.float32(fill))
                v.setncatts({"units": units, **({"standard_name": sn} if "ERROR" not in name else {})})
                v[:] = np.where(np.isfinite(values), values, fill)
            for name, values in ((f"{param}_QC", qc), (f"{param}_ADJUSTED_QC", adj_qc)):
                v = nc.createVariable(name, "S1", ("N_PROF", "N_LEVELS"), fill_value=b" ")
                v[:] = np.asarray(values, dtype="S1")
    return str(path)


def write_alongtrack(path, lon, lat, time_values, sla, *, units="m", packed=False,
                     platform="sat_a", time_units="seconds since 1950-01-01 00:00:00",
                     calendar=None, with_sla=True):
    """A CF along-track file (CF 1.10 sec. 9 trajectory-like 1-D series, from memory).

    ``time_values`` in ``time_units`` (``calendar`` when given); ``sla`` in ``units``;
    ``packed`` stores it as int16 with scale_factor 0.01 (steps of 0.01 ``units``; netCDF4
    packs on write); ``platform`` None writes no platform attribute, ``with_sla=False`` no
    sea-level variable.
    """
    with netCDF4.Dataset(path, "w") as nc:
        nc.Conventions = "CF-1.10"
        nc.featureType = "trajectory"
        if platform is not None:
            nc.platform = platform
        nc.createDimension("time", len(lon))
        t = nc.createVariable("time", "f8", ("time",))
        t.standard_name, t.units = "time", time_units
        if calendar:
            t.calendar = calendar
        t[:] = time_values
        for name, sn, coord_units, data in (("longitude", "longitude", "degrees_east", lon),
                                            ("latitude", "latitude", "degrees_north", lat)):
            v = nc.createVariable(name, "f8", ("time",))
            v.standard_name, v.units = sn, coord_units
            v[:] = data
        if not with_sla:
            return
        if packed:
            v = nc.createVariable("sla", "i2", ("time",), fill_value=np.int16(-32767))
            v.scale_factor = 0.01
        else:
            v = nc.createVariable("sla", "f8", ("time",))
        v.standard_name, v.units = "sea_surface_height_above_sea_level", units
        v.coordinates = "time latitude longitude"
        v[:] = sla


def write_alongtrack_config(path, paths, *, slot_hours=24.0):
    """A build configuration for along-track files of one sensor ``alt`` on a small regular
    grid (-10..-2 E, 40..46 N, 1 degree), window the 24 h before 2026-11-20T00:00 UTC, constant
    raw error 0.03 m, outputs in ``out`` beside it.  ``paths``: the source's path patterns."""
    patterns = ", ".join(f'"{p}"' for p in paths)
    path.write_text(f"""
[window]
analysis_time = "2026-11-20T00:00:00"
start_hours = -24.0
slot_hours = {slot_hours}
[grid]
type = "regular"
lon_min = -10.0
lat_min = 40.0
dlon = 1.0
dlat = 1.0
nlon = 8
nlat = 6
[[sources]]
sensor = "alt"
paths = [{patterns}]
kind = "alongtrack"
error = {{ rule = "constant", value = 0.03 }}
[output]
directory = "out"
""")
    return path
