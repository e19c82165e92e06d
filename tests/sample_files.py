"""Small files in the community formats, written by the tests with netCDF4.

Layouts are recalled from the standards, not copied from real products ("from memory"):
GHRSST Data Specification 2.0 (GDS 2.0) for L2P and L3 SST, the Argo user's manual for core
profile files (format version 3.1).  Values are invented.
"""

from __future__ import annotations

import json

import netCDF4
import numpy as np
import pyproj

from obsprep.model.table import validate_table
from obsprep.readers import read

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
                     calendar=None, with_sla=True, fmt="NETCDF4", record=False, error=None):
    """A CF along-track file (CF 1.10 sec. 9 trajectory-like 1-D series, from memory).

    ``time_values`` in ``time_units`` (``calendar`` when given); ``sla`` in ``units``;
    ``packed`` stores it as int16 with scale_factor 0.01 (steps of 0.01 ``units``; netCDF4
    packs on write); ``platform`` None writes no platform attribute, ``with_sla=False`` no
    sea-level variable.  ``fmt`` is the netCDF4 format (``NETCDF3_CLASSIC``,
    ``NETCDF3_64BIT_OFFSET``, ``NETCDF3_64BIT_DATA`` for the netCDF-3 ones); ``record`` makes
    ``time`` the unlimited (record) dimension; ``error`` (``units``) is written as the sea
    level's ``standard_error`` ancillary variable (CF 3.4 and the standard-name modifiers).
    """
    with netCDF4.Dataset(path, "w", format=fmt) as nc:
        nc.Conventions = "CF-1.10"
        nc.featureType = "trajectory"
        if platform is not None:
            nc.platform = platform
        nc.createDimension("time", None if record else len(lon))
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
        if error is not None:
            v.ancillary_variables = "sla_error"
            e = nc.createVariable("sla_error", "f8", ("time",))
            e.standard_name, e.units = "sea_surface_height_above_sea_level standard_error", units
            e[:] = error


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


# --------------------------------------------------------------------------------------------
# CF files of each reader kind, a tiny netCDF writer and a checked read
# --------------------------------------------------------------------------------------------


def var(dims, data, dtype="f8", fill=None, **attrs):
    """Specification of one variable for :func:`write_nc`."""
    return dims, data, dtype, fill, attrs


def masked_nan(values):
    """NaN -> masked, with a harmless number underneath so packing never casts a NaN."""
    return np.ma.masked_array(np.nan_to_num(values), mask=np.isnan(values))


def write_nc(path, dims, variables, fmt="NETCDF4", **global_attrs):
    """Write ``variables`` (name -> :func:`var`) to ``path``; NaN/masked become fill."""
    with netCDF4.Dataset(path, "w", format=fmt) as nc:
        for name, size in dims.items():
            nc.createDimension(name, size)
        for name, (vdims, data, dtype, fill, attrs) in variables.items():
            v = nc.createVariable(name, dtype, vdims, fill_value=fill)
            packed = "scale_factor" in attrs or "add_offset" in attrs
            v.set_auto_maskandscale(packed)
            v.setncatts(attrs)
            if data is None:
                continue
            if packed:
                v[...] = masked_nan(np.asarray(data, dtype=np.float64))
            elif fill is not None and np.asarray(data).dtype.kind == "f":
                v[...] = np.where(np.isnan(data), fill, data)
            else:
                v[...] = data
        nc.setncatts(global_attrs)
    return str(path)


def read_checked(path, kind=None, **options):
    """read() + the table contract check every table must pass."""
    table = read(path, kind=kind, **options)
    validate_table(table)
    return table


def reasons(table):
    """The rejected column as a list, None for kept rows."""
    return [None if isinstance(r, float) else r for r in table["rejected"].astype(object)]


TIME_1950 = dict(standard_name="time", units="days since 1950-01-01 00:00:00", calendar="standard")


def alongtrack_file(path, n=6, sla=None, units="m", time=None, lon=None, **extra):
    sla = np.linspace(-0.1, 0.2, n) if sla is None else sla
    time = 27000.0 + np.arange(n) / 86400.0 if time is None else time
    lon = np.linspace(10.0, 11.0, n) if lon is None else lon
    variables = {
        "time": var(("n",), time, **TIME_1950),
        "lat": var(("n",), np.linspace(60.0, 61.0, n), standard_name="latitude",
                   units="degrees_north"),
        "lon": var(("n",), lon, standard_name="longitude", units="degrees_east"),
        "sla": var(("n",), sla, fill=-9999.0, standard_name="sea_surface_height_above_sea_level",
                   units=units, coordinates="time lat lon"),
    }
    variables.update(extra)
    return write_nc(path, {"n": n}, variables, platform="sat_x")


def sst_grid_file(path, sst_kelvin, lat=(50.0, 51.0), lon=(0.0, 1.0, 2.0), **sst_attrs):
    sst = np.asarray(sst_kelvin, dtype=np.float64).reshape(1, len(lat), len(lon))
    attrs = dict(standard_name="sea_surface_temperature", units="K")
    attrs.update(sst_attrs)
    return write_nc(path, {"time": 1, "lat": len(lat), "lon": len(lon)}, {
        "time": var(("time",), [1.3e9], standard_name="time",
                    units="seconds since 1981-01-01 00:00:00"),
        "lat": var(("lat",), lat, standard_name="latitude", units="degrees_north"),
        "lon": var(("lon",), lon, standard_name="longitude", units="degrees_east"),
        "sst": var(("time", "lat", "lon"), sst, fill=-999.0, **attrs),
    })


def sst_swath_file(path, ny=3, nx=4, pixel_time="absolute"):
    lat, lon = np.meshgrid(np.linspace(40, 41, ny), np.linspace(-5, -4, nx), indexing="ij")
    variables = {
        "time": var(("time",), [1.3e9], standard_name="time",
                    units="seconds since 1981-01-01 00:00:00"),
        "lat": var(("ni", "nj"), lat, standard_name="latitude", units="degrees_north"),
        "lon": var(("ni", "nj"), lon, standard_name="longitude", units="degrees_east"),
        "sst": var(("time", "ni", "nj"), np.full((1, ny, nx), 290.0), fill=-999.0,
                   standard_name="sea_surface_temperature", units="K",
                   coordinates="lat lon"),
    }
    seconds = np.arange(ny * nx, dtype=np.float64).reshape(1, ny, nx) * 10.0
    if pixel_time == "absolute":
        variables["pixel_time"] = var(("time", "ni", "nj"), 1.3e9 + seconds, standard_name="time",
                                      units="seconds since 1981-01-01 00:00:00")
    elif pixel_time == "offset":
        variables["dtime"] = var(("time", "ni", "nj"), seconds, standard_name="time",
                                 units="seconds")
    return write_nc(path, {"time": 1, "ni": ny, "nj": nx}, variables, id="granule_007")


def polar_grid_mapping(crs):
    """grid_mapping attributes of ``crs`` as written by pyproj (CRS.to_cf)."""
    return {k: v for k, v in crs.to_cf().items() if k != "crs_wkt"}


def ice_concentration_file(path, crs="EPSG:3413", conc=None, units="%", xy_units="m",
                           x=(-1.0e6, 0.0, 5.0e5), y=(-2.0e6, -1.0e6)):
    crs = pyproj.CRS(crs)
    conc = np.array([[[10.0, 55.0, 100.0], [0.0, np.nan, 87.5]]]) if conc is None else conc
    scale = 1000.0 if xy_units == "km" else 1.0
    return write_nc(path, {"time": 1, "y": len(y), "x": len(x)}, {
        "time": var(("time",), [27000.5], **TIME_1950),
        "x": var(("x",), np.asarray(x) / scale, standard_name="projection_x_coordinate",
                 units=xy_units),
        "y": var(("y",), np.asarray(y) / scale, standard_name="projection_y_coordinate",
                 units=xy_units),
        "crs": var((), None, dtype="i4", **polar_grid_mapping(crs)),
        "ice_conc": var(("time", "y", "x"), conc, fill=-1.0, standard_name="sea_ice_area_fraction",
                        units=units, grid_mapping="crs"),
    })


def projected_drift_file(path, x, y, dx_km, dy_km, crs="EPSG:3413", sigma_km=None):
    crs = pyproj.CRS(crs)
    n = len(x)
    variables = {
        "time": var((), 27000.0, bounds="time_bnds", **TIME_1950),
        "time_bnds": var(("nv",), [27000.0, 27002.0]),
        "xc": var(("n",), x, standard_name="projection_x_coordinate", units="m"),
        "yc": var(("n",), y, standard_name="projection_y_coordinate", units="m"),
        "crs": var((), None, dtype="i4", **polar_grid_mapping(crs)),
        "dx": var(("n",), dx_km, fill=-1e20, standard_name="sea_ice_x_displacement", units="km",
                  grid_mapping="crs", coordinates="time xc yc"),
        "dy": var(("n",), dy_km, fill=-1e20, standard_name="sea_ice_y_displacement", units="km",
                  grid_mapping="crs", coordinates="time xc yc"),
    }
    if sigma_km is not None:
        for comp in ("x", "y"):
            variables[f"d{comp}"][4]["ancillary_variables"] = f"d{comp}_err"
            variables[f"d{comp}_err"] = var(("n",), sigma_km, units="km",
                                            standard_name=f"sea_ice_{comp}_displacement "
                                                          "standard_error")
    return write_nc(path, {"n": n, "nv": 2}, variables)


def geographic_drift_file(path):
    # (from memory) a CF 1-D list of vectors with per-vector time bounds
    return write_nc(path, {"n": 3, "nv": 2}, {
        "time": var(("n",), [27000.0, 27000.5, 27001.0], bounds="time_bnds", **TIME_1950),
        "time_bnds": var(("n", "nv"), [[27000.0, 27002.0], [27000.5, 27002.5], [27001.0, 27003.0]]),
        "lat": var(("n",), [80.0, 81.0, 82.0], standard_name="latitude", units="degrees_north"),
        "lon": var(("n",), [0.0, 10.0, 20.0], standard_name="longitude", units="degrees_east"),
        "de": var(("n",), [1.5, np.nan, -3.0], fill=-1e20,
                  standard_name="eastward_sea_ice_displacement", units="km"),
        "dn": var(("n",), [0.5, 2.0, 4.0], fill=-1e20,
                  standard_name="northward_sea_ice_displacement", units="km"),
    })


def multidimensional_profiles_file(path, pressure, temperature, salinity, lat=(30.0, -40.0),
                                   salinity_units="PSU", **extra):
    n_prof, n_level = np.shape(pressure)
    variables = {
        "profile_id": var(("profile",), np.array([101, 202])[:n_prof], dtype="i4",
                          cf_role="profile_id"),
        "time": var(("profile",), [27000.25, 27001.75][:n_prof], **TIME_1950),
        "lat": var(("profile",), list(lat)[:n_prof], standard_name="latitude",
                   units="degrees_north"),
        "lon": var(("profile",), [-20.0, 200.0][:n_prof], standard_name="longitude",
                   units="degrees_east"),
        "pres": var(("profile", "level"), pressure, fill=99999.0,
                    standard_name="sea_water_pressure", units="dbar"),
        "temp": var(("profile", "level"), temperature, fill=99999.0,
                    standard_name="sea_water_temperature", units="degree_Celsius",
                    coordinates="time lat lon pres"),
        "psal": var(("profile", "level"), salinity, fill=99999.0,
                    standard_name="sea_water_practical_salinity", units=salinity_units,
                    coordinates="time lat lon pres"),
    }
    variables.update(extra)
    return write_nc(path, {"profile": n_prof, "level": n_level}, variables,
                    featureType="profile", platform="float_9")


def ragged_profiles_file(path):
    # (from memory) CF H.3.4 contiguous ragged array: a count variable with sample_dimension
    return write_nc(path, {"profile": 2, "obs": 5}, {
        "row_size": var(("profile",), [3, 2], dtype="i4", sample_dimension="obs"),
        "time": var(("profile",), [27000.0, 27001.0], **TIME_1950),
        "lat": var(("profile",), [45.0, 46.0], standard_name="latitude", units="degrees_north"),
        "lon": var(("profile",), [5.0, 6.0], standard_name="longitude", units="degrees_east"),
        "z": var(("obs",), [5.0, 10.0, 20.0, 1.0, 3.0], standard_name="depth", units="m",
                 positive="down"),
        "temp": var(("obs",), [12.0, 11.0, np.nan, 14.0, 13.5], fill=-999.0,
                    standard_name="sea_water_temperature", units="K",
                    coordinates="time lat lon z"),
        "ship": var(("profile",), np.array(["ship_a", "ship_b"], dtype=object), dtype=str,
                    long_name="platform name"),
    }, featureType="profile")


# --------------------------------------------------------------------------------------------
# opening files
# --------------------------------------------------------------------------------------------


def to_toml(cfg):
    """Tiny TOML writer for the test configs (tables, arrays of tables, scalars, lists)."""
    def val(v):
        if isinstance(v, str):
            return json.dumps(v)
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(val(x) for x in v) + "]"
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {val(x)}" for k, x in v.items()) + " }"
        return repr(v)
    lines = []
    for k, v in cfg.items():
        if not isinstance(v, (dict, list)):
            lines.append(f"{k} = {val(v)}")
    for k, v in cfg.items():
        if isinstance(v, dict):
            lines.append(f"[{k}]")
            lines += [f"{kk} = {val(vv)}" for kk, vv in v.items()]
        elif isinstance(v, list) and v and isinstance(v[0], dict):
            for item in v:
                lines.append(f"[[{k}]]")
                lines += [f"{kk} = {val(vv)}" for kk, vv in item.items()]
    return "\n".join(lines) + "\n"


def write_netcdf4_dimension_bomb(path, n=400_000_000):
    """A small netCDF-4 along-track file declaring ``n`` times (a "dimension bomb"): HDF5
    leaves unwritten chunks unallocated, so the file stays small; only 10 values are written."""
    with netCDF4.Dataset(path, "w") as nc:
        nc.featureType = "trajectory"
        nc.createDimension("time", n)
        for name, attrs in (("time", dict(standard_name="time", units="days since 1950-01-01")),
                            ("longitude", dict(standard_name="longitude", units="degrees_east")),
                            ("latitude", dict(standard_name="latitude", units="degrees_north")),
                            ("sla", dict(standard_name="sea_surface_height_above_sea_level",
                                         units="m"))):
            v = nc.createVariable(name, "f8", ("time",), zlib=True, chunksizes=(1 << 16,))
            v.setncatts(attrs)
            v[:10] = np.arange(10.0)
    return path
