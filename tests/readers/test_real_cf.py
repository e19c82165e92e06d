"""Real provider files read by the CF layer and the ice, in-situ and along-track readers.

Files from ../shared/realdata (provenance in its README); each test names the file and its
provider.  Expected values are computed here from the file with netCDF4, automatic masking and
scaling turned off, the packing, fill values, valid ranges and flags applied by hand as the
file's own attributes define them (CF 1.11 sections 2.5.1 and 3.5, looked up in the CF
conventions document), never through obsprep's decoding.
"""

from __future__ import annotations

import cftime
import netCDF4
import numpy as np
import pyproj
import pytest
from realdata import real_file

from obsprep.model.table import validate_table
from obsprep.readers import read

SEAICE = "seaice/seaice_conc_daily_nh_20211231_f17_v04r00.nc"
XBT = "insitu/IMOS_SOOP-XBT_T_20160106T110100Z_PX02_FV01_ID-150739.nc"
ALTIMETRY = "altimetry/JA1_GPN_2PeP001_002_20020115_060706_20020115_070316.nc"


def raw(nc, name):
    """The stored values of variable ``name``, no masking, no scaling, as float64; unsigned
    when the variable says ``_Unsigned = "true"`` (the NUG convention for unsigned bytes)."""
    v = nc[name]
    v.set_auto_maskandscale(False)
    data = np.asarray(v[:])
    if str(getattr(v, "_Unsigned", "")).lower() == "true" and data.dtype.kind == "i":
        data = data.view(data.dtype.str.replace("i", "u"))
    return data.astype(np.float64)


def counts(table):
    """{reason: rows} of the rejected rows, and the number kept."""
    rejected = table["rejected"].astype(object)
    found = {r: int((rejected == r).sum()) for r in set(rejected.dropna())}
    return int(table["rejected"].isna().sum()), found


# --- NOAA/NSIDC sea-ice concentration climate data record v4 ----------------------------------

def test_nsidc_sea_ice_concentration_record(tmp_path):
    """NOAA/NSIDC CDR v4, daily, Northern Hemisphere, 25 km polar stereographic.

    The record's concentration ``cdr_seaice_conc`` is an unsigned byte, scale 0.01, units "1",
    valid_range 0..100 (stored units), with its own flag_values 251..255 (pole hole, lakes,
    coastal, land mask, missing) beyond valid_max; 255 is also _FillValue.  Two more
    variables carry the same standard_name (the input algorithms).  Its QA variable has
    flag_masks but meanings under a non-CF attribute name (``flag_mask_meanings``): it cannot
    be read as CF flags and must not refuse the file.
    """
    path = real_file(SEAICE)
    table = read(path)
    validate_table(table)
    assert table.attrs["kind"] == "ice_concentration"
    with netCDF4.Dataset(path) as nc:
        v = nc["cdr_seaice_conc"]
        stored = raw(nc, "cdr_seaice_conc").ravel()
        fill = float(np.uint8(v._FillValue))
        low, high = (float(b) for b in v.valid_range)
        flag_values = [float(f) for f in v.flag_values]
        scale = np.float32(v.scale_factor)
        x, y = raw(nc, "xgrid"), raw(nc, "ygrid")
        proj4 = nc["projection"].proj4text
        day = cftime.num2date(float(raw(nc, "time")[0]), nc["time"].units,
                              calendar=nc["time"].calendar, only_use_cftime_datetimes=False,
                              only_use_python_datetimes=True)
    missing = (stored == fill) | (((stored < low) | (stored > high))
                                   & ~np.isin(stored, flag_values))
    flagged = np.isin(stored, flag_values) & ~missing
    kept = ~missing & ~flagged
    n_kept, found = counts(table)
    assert len(table) == stored.size == 448 * 304
    assert n_kept == int(kept.sum()) == 67259
    assert found.get("provider_flag", 0) == int(flagged.sum())
    assert found.get("missing_value", 0) == int(missing.sum())
    assert set(found) <= {"provider_flag", "missing_value"}
    # values: stored x scale_factor (float32, as the file packs them), a fraction 0..1 (units 1)
    order = table["row"].to_numpy()
    values = table["value"].to_numpy()
    expected = (stored.astype(np.float32) * scale).astype(np.float64)
    in_table = table["rejected"].isna().to_numpy()
    np.testing.assert_allclose(values[in_table], expected[order[in_table]], rtol=1e-6)
    assert values[in_table].min() == 0.0 and values[in_table].max() == pytest.approx(1.0)
    # open water (stored 0) is a valid zero, kept: the ice edge keeps its open-water side
    assert int((expected[order[in_table]] == 0).sum()) == int((stored[kept] == 0).sum()) > 0
    # positions: the provider's own PROJ string (proj4text), inverted by PROJ via pyproj
    xx, yy = np.meshgrid(x, y)
    crs = pyproj.CRS(proj4)
    lon, lat = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(
        xx.ravel(), yy.ravel())
    np.testing.assert_allclose(table["lat"].to_numpy(), lat[order], atol=1e-6)
    dlon = (table["lon"].to_numpy() - lon[order] + 180.0) % 360.0 - 180.0
    assert np.abs(dlon[np.abs(lat[order]) < 89.9]).max() < 1e-6
    assert table["time"].nunique() == 1 and table["time"].iloc[0] == np.datetime64(day, "ns")
    # its ancillary stdev_of_cdr_seaice_conc has no units and carries flag attributes: by the
    # rule it is not an uncertainty of the concentration, so no error comes from the file
    assert table["error"].isna().all()
    warnings = table.attrs["warnings"]
    assert any("qa_of_cdr_seaice_conc" in w and "not used" in w for w in warnings), warnings
    assert any("3 variables have standard_name 'sea_ice_area_fraction'" in w
               and "read 'cdr_seaice_conc'" in w for w in warnings), warnings


def test_nsidc_record_in_the_build_is_read_not_unreadable(tmp_path):
    """The same NOAA/NSIDC file through the nightly build: status ok, every row accounted."""
    from obsprep.run.build import build

    path = real_file(SEAICE)
    cfg = {
        "window": {"analysis_time": "2022-01-01T00:00:00", "start_hours": -48.0,
                   "end_hours": 24.0},
        "grid": {"type": "regular", "lon_min": -180.0, "lat_min": 30.0, "dlon": 5.0,
                 "dlat": 5.0, "nlon": 72, "nlat": 12},
        "sources": [{"sensor": "sic", "paths": [str(path)],
                     "error": {"rule": "constant", "value": 0.1}}],
        "output": {"directory": str(tmp_path / "out")},
    }
    entry = build(cfg).ledger.entries[0]
    assert entry.status == "ok", entry.message
    assert entry.read == 448 * 304 and entry.kept + sum(entry.rejected.values()) == entry.read
    with netCDF4.Dataset(path) as nc:
        stored = raw(nc, "cdr_seaice_conc")
        flags = [float(f) for f in nc["cdr_seaice_conc"].flag_values]
        fill = float(np.uint8(nc["cdr_seaice_conc"]._FillValue))
    # the provider's own flag values other than the fill: land, coast, lakes, pole hole
    assert entry.rejected.get("provider_flag", 0) == int(
        (np.isin(stored, flags) & (stored != fill)).sum()) > 0
    assert any("qa_of_cdr_seaice_conc" in w for w in entry.warnings)


# --- IMOS expendable bathythermograph ---------------------------------------------------------

def test_imos_xbt_flags_spelt_in_mixed_case(tmp_path):
    """Integrated Marine Observing System (Australia), SOOP-XBT profile: the IMOS flag scheme
    ``No_QC_performed Good_data Probably_good_data Bad_data_that_are_potentially_correctable
    Bad_data Value_changed ...`` on ``TEMP_quality_control``; good and probably good data are
    kept (the default good meanings, compared without case or separators)."""
    path = real_file(XBT)
    table = read(path)
    validate_table(table)
    with netCDF4.Dataset(path) as nc:
        temp = raw(nc, "TEMP")
        qc = raw(nc, "TEMP_quality_control")
        v = nc["TEMP"]
        meanings = nc["TEMP_quality_control"].flag_meanings.split()
        values = [float(f) for f in nc["TEMP_quality_control"].flag_values]
        missing = (temp == float(v._FillValue)) | (temp < float(v.valid_min)) \
            | (temp > float(v.valid_max))
        depth = raw(nc, "DEPTH")
        when = cftime.num2date(float(raw(nc, "TIME")), nc["TIME"].units.replace(" UTC", ""),
                               calendar=nc["TIME"].calendar, only_use_cftime_datetimes=False,
                               only_use_python_datetimes=True)
        lat, lon = float(raw(nc, "LATITUDE")), float(raw(nc, "LONGITUDE"))
    good_states = [values[meanings.index(m)] for m in ("Good_data", "Probably_good_data")]
    kept = ~missing & np.isin(qc, good_states)
    n_kept, found = counts(table)
    assert len(table) == temp.size
    assert n_kept == int(kept.sum()) > 0
    assert found.get("missing_value", 0) == int(missing.sum())
    assert found.get("provider_flag", 0) == int((~missing & ~kept).sum())
    kept_rows = table[table["rejected"].isna()]
    # degrees Celsius as stored (units "Celsius": the udunits spelling of degC)
    np.testing.assert_allclose(np.sort(kept_rows["value"]), np.sort(temp[kept]), rtol=1e-6)
    np.testing.assert_allclose(np.sort(kept_rows["depth"]), np.sort(depth[kept]), rtol=1e-6)
    # days since 1950 in float64: the two decodings agree to well under a millisecond
    offset = (kept_rows["time"].to_numpy() - np.datetime64(when, "ns")) / np.timedelta64(1, "ms")
    assert np.abs(offset).max() < 1
    np.testing.assert_allclose(kept_rows["lat"], lat)
    np.testing.assert_allclose(kept_rows["lon"], lon)


# --- CNES/NASA Jason-1 geophysical data record ------------------------------------------------

def test_jason1_gdr_pass(tmp_path):
    """CNES/NASA Jason-1 GDR via PO.DAAC, one pass: ``ssha`` (short, scale 0.001 m, fill
    32767) at 1 Hz, longitudes 0..360 (scale 1e-6), time in seconds since 2000-01-01.  The
    anomaly already has the provider's corrections in it: read as it is by default."""
    path = real_file(ALTIMETRY)
    table = read(path)
    validate_table(table)
    assert table.attrs["kind"] == "alongtrack"
    with netCDF4.Dataset(path) as nc:
        ssha = raw(nc, "ssha")
        scale = float(nc["ssha"].scale_factor)
        fill = float(nc["ssha"]._FillValue)
        lat = raw(nc, "lat") * float(nc["lat"].scale_factor)
        lon = raw(nc, "lon") * float(nc["lon"].scale_factor)
        seconds = raw(nc, "time")
        pole = raw(nc, "pole_tide")
        pole_scale, pole_fill = float(nc["pole_tide"].scale_factor), float(nc["pole_tide"]._FillValue)
    valid = ssha != fill
    n_kept, found = counts(table)
    assert len(table) == ssha.size == 2240
    assert n_kept == int(valid.sum()) == 1844
    assert found == {"missing_value": int((~valid).sum())}
    rows = table["row"].to_numpy()
    np.testing.assert_allclose(table["value"].to_numpy()[valid[rows]], (ssha * scale)[valid],
                               atol=1e-12)
    np.testing.assert_allclose(table["lat"], lat[rows], atol=1e-9)
    np.testing.assert_allclose(table["lon"], (lon[rows] + 180.0) % 360.0 - 180.0, atol=1e-9)
    epoch = np.datetime64("2000-01-01T00:00:00", "ns")
    expected_time = epoch + np.round(seconds * 1e9).astype("timedelta64[ns]")
    assert np.abs((table["time"].to_numpy() - expected_time[rows])
                  / np.timedelta64(1, "us")).max() < 1
    assert abs(table["value"].dropna()).max() < 2.0  # an anomaly, metres (common practice)
    # a configured correction, named by its standard_name: the pole tide subtracted by hand
    corrected = read(path, subtract_corrections="sea_surface_height_amplitude_due_to_pole_tide")
    both = valid & (pole != pole_fill)
    n_kept, found = counts(corrected)
    assert n_kept == int(both.sum())
    assert found.get("missing_correction", 0) == int((valid & ~both).sum())
    np.testing.assert_allclose(
        corrected["value"].to_numpy()[both[rows]], (ssha * scale - pole * pole_scale)[both],
        atol=1e-12)
