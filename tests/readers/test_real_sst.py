"""The two real GHRSST GDS 2.0 L2P swaths of ../shared/realdata, read by a nightly build.

Files (provenance in ../shared/realdata/README.md):
- ``sst/SS_VIIRS_NPP-NAVO-L2P-v3.0__l2ss-cut.nc``: VIIRS (Suomi NPP) L2P by the US Naval
  Oceanographic Office (NAVO), distributed by NASA PO.DAAC; its SST is GDS 2.0 SSTdepth
  (``standard_name = "sea_water_temperature"``, ``depth = "1 meter"``);
- ``sst/SS_MODIS_A-JPL-L2P-v2014.0__l2ss-cut.nc``: MODIS-Aqua L2P by NASA JPL (PO.DAAC), cut
  to the SST and ``sst_dtime`` only: no quality_level, l2p_flags or SSES.

Expected values are computed here with netCDF4 (its automatic masking and scaling: _FillValue,
valid_min/valid_max and scale_factor/add_offset as CF defines them), the providers' flags
applied as their attributes say (``flag_masks``/``flag_meanings`` of l2p_flags; quality_level
4-5 kept, the default minimum, GDS 2.0 levels [GDS2]), the GDS 2.0 bias correction
SST - sses_bias and time = reference time + sst_dtime; the README's built-in physical range of
SST (-2.5 .. 40 degC) for the rows the build's range check rejects.
"""

from __future__ import annotations

import netCDF4
import numpy as np
from realdata import real_file

import obsprep
from obsprep.run.build import build

VIIRS = "sst/SS_VIIRS_NPP-NAVO-L2P-v3.0__l2ss-cut.nc"
MODIS = "sst/SS_MODIS_A-JPL-L2P-v2014.0__l2ss-cut.nc"
#: the built-in physical range of every SST type (README), degC
SST_RANGE = (-2.5, 40.0)
GDS2_EPOCH = np.datetime64("1981-01-01T00:00:00", "ns")


def _masked(nc, name):
    """A variable as netCDF4 decodes it: float64 with NaN where masked."""
    var = nc[name]
    var.set_auto_maskandscale(True)
    return np.ma.filled(var[...].astype(np.float64), np.nan)


def _bit_set(nc, name, meaning):
    """True where the bit of ``meaning`` (flag_masks/flag_meanings) is set; False at fill."""
    var = nc[name]
    var.set_auto_maskandscale(True)
    raw = var[...]
    masks = dict(zip(var.flag_meanings.split(), np.atleast_1d(var.flag_masks)))
    return np.ma.filled((raw & masks[meaning]) != 0, False) if meaning in masks else \
        np.zeros(raw.shape, dtype=bool)


def _build(tmp_path, path, grid, error, **options):
    config = {
        "window": {"analysis_time": "2019-08-06T00:00:00", "date": "2019-08-06",
                   "start_hours": -24.0, "end_hours": 0.0, "slot_hours": 24.0},
        "grid": grid,
        "sources": [{"sensor": "sst", "paths": [str(path)], "error": error,
                     **({"options": options} if options else {})}],
        "output": {"directory": str(tmp_path / "out")},
    }
    result = build(config)
    (entry,) = result.ledger.entries
    assert entry.status == "ok", entry.message
    return entry, result


def _rejected(entry):
    return {reason: n for reason, n in entry.rejected.items() if n}


def test_navo_viirs_l2p_sst_at_1_m_depth(tmp_path):
    """NAVO VIIRS L2P (US Naval Oceanographic Office via NASA PO.DAAC)."""
    path = real_file(VIIRS)
    with netCDF4.Dataset(path) as nc:
        sst = _masked(nc, "sea_surface_temperature")
        bias = _masked(nc, "sses_bias")
        sd = _masked(nc, "sses_standard_deviation")
        level = _masked(nc, "quality_level")
        dtime = _masked(nc, "sst_dtime")
        reference = GDS2_EPOCH + np.timedelta64(int(nc["time"][0]), "s")
        lat, lon = _masked(nc, "lat"), _masked(nc, "lon")
        flags = {m: _bit_set(nc, "l2p_flags", m) for m in ("land", "ice", "lake", "river")}
    missing = ~np.isfinite(sst)
    taken = missing.copy()
    expected = {"missing_value": int(missing.sum())}
    for meaning, is_set in flags.items():
        expected[f"l2p_flag_{meaning}"] = int((is_set & ~taken).sum())
        taken |= is_set
    low = ~(np.nan_to_num(level, nan=0.0) >= 4)  # a fill level counts as 0 [GDS2]
    expected["quality_level"] = int((low & ~taken).sum())
    taken |= low
    no_bias = ~np.isfinite(bias)
    expected["missing_bias"] = int((no_bias & ~taken).sum())
    taken |= no_bias
    value = sst - bias - 273.15
    outside = ~((value >= SST_RANGE[0]) & (value <= SST_RANGE[1]))
    expected["out_of_range"] = int((outside & ~taken).sum())
    taken |= outside
    kept = ~taken
    expected = {k: v for k, v in expected.items() if v}
    # the file as measured: a cloudy cut, 8 294 valid pixels all of quality level 5, all
    # flagged only "daytime"
    assert kept.sum() == 8294 and expected == {"missing_value": sst.size - 8294}

    grid = {"type": "regular", "lon_min": -180.0, "lat_min": 60.0, "dlon": 1.0, "dlat": 1.0,
            "nlon": 45, "nlat": 20}
    entry, result = _build(tmp_path, path, grid, {"rule": "file"})
    assert entry.read == sst.size and entry.kept == int(kept.sum())
    assert _rejected(entry) == expected
    # what was found and assumed: the SST type, from GDS 2.0 SSTdepth
    assert any("standard_name 'sea_water_temperature'" in w and "sea_surface_temperature" in w
               and "1 meter" in w for w in entry.warnings)
    assert set(result.superobs["quantity"]) == {"sea_surface_temperature"}

    table = obsprep.read(path)
    rows = table["row"].to_numpy()[table["rejected"].isna().to_numpy()]
    good = table[table["rejected"].isna()]
    assert np.array_equal(np.sort(rows), np.flatnonzero(kept.ravel()))
    np.testing.assert_allclose(good["value"], value.ravel()[rows], atol=1e-5)
    np.testing.assert_allclose(good["error"], sd.ravel()[rows], atol=1e-6)
    np.testing.assert_allclose(good["lat"], lat.ravel()[rows], atol=1e-5)
    np.testing.assert_allclose(good["lon"], lon.ravel()[rows], atol=1e-5)
    seconds = np.round(dtime.ravel()[rows] * 1e9).astype("timedelta64[ns]")
    np.testing.assert_array_equal(good["time"].to_numpy(), reference + seconds)
    # physically sensible: Chukchi and Beaufort Sea in August, 3-13 degC; the 84 s of the cut
    assert 2.5 < good["value"].min() and good["value"].max() < 13.0
    assert good["time"].min() >= np.datetime64("2019-08-05T20:37:02")
    assert good["time"].max() <= np.datetime64("2019-08-05T20:38:26")
    # the diurnal guard is for skin and subskin SST: SST at 1 m is left alone
    guarded = obsprep.read(path, diurnal_guard="night")
    assert (guarded["rejected"].astype(object) == "diurnal_warming").sum() == 0


def test_jpl_modis_l2p_subset_without_quality_level_flags_or_sses(tmp_path):
    """MODIS-Aqua L2P (NASA JPL via PO.DAAC), a subset with the SST and sst_dtime only."""
    path = real_file(MODIS)
    with netCDF4.Dataset(path) as nc:
        sst = _masked(nc, "sea_surface_temperature")
        dtime = _masked(nc, "sst_dtime")
        reference = GDS2_EPOCH + np.timedelta64(int(nc["time"][0]), "s")
        lat, lon = _masked(nc, "lat"), _masked(nc, "lon")
        raw = nc["sea_surface_temperature"]
        raw.set_auto_maskandscale(False)
        stored = raw[...]
        not_fill = stored != raw._FillValue
    value = sst - 273.15
    valid = np.isfinite(value)  # fill and values beyond valid_min/valid_max are missing (CF)
    inside = valid & (value >= SST_RANGE[0]) & (value <= SST_RANGE[1])
    grid = {"type": "regular", "lon_min": 70.0, "lat_min": 38.0, "dlon": 1.0, "dlat": 1.0,
            "nlon": 20, "nlat": 15}
    entry, result = _build(tmp_path, path, grid, {"rule": "constant", "value": 0.5})
    assert entry.read == sst.size and entry.kept == int(inside.sum())
    rejected = _rejected(entry)
    # fill and stored values beyond valid_min/valid_max are missing (CF 2.5.1; netCDF4's
    # masking applies both), valid values beyond the physical range out_of_range
    assert rejected == {"missing_value": int((~valid).sum()), "out_of_range": int((valid & ~inside).sum())}
    assert rejected["missing_value"] > int((~not_fill).sum())  # the file has values beyond its valid range
    assert set(result.superobs["quantity"]) == {"sea_surface_skin_temperature"}
    for variable in ("sses_bias", "quality_level", "l2p_flags", "sses_standard_deviation"):
        assert any(w.startswith(f"no {variable} variable") for w in entry.warnings), variable

    table = obsprep.read(path)
    table = table[table["rejected"].isna()]
    table = table[(table["value"] >= SST_RANGE[0]) & (table["value"] <= SST_RANGE[1])]
    rows = table["row"].to_numpy()
    assert np.array_equal(np.sort(rows), np.flatnonzero(inside.ravel()))
    np.testing.assert_allclose(table["value"], value.ravel()[rows], atol=1e-5)
    np.testing.assert_allclose(table["lat"], lat.ravel()[rows], atol=1e-5)
    np.testing.assert_allclose(table["lon"], lon.ravel()[rows], atol=1e-5)
    seconds = (dtime.ravel()[rows] * 1e9).astype("timedelta64[ns]")
    np.testing.assert_array_equal(table["time"].to_numpy(), reference + seconds)
    assert table["time"].min() >= np.datetime64("2019-08-05T06:55:01")
    assert table["time"].max() <= np.datetime64("2019-08-05T06:59:58")

    # diurnal guard, night only: the granule is near local noon (UTC 06:55-06:59 at 72-86 E is
    # 11:45-12:45 mean solar time) in August at 40-50 N, so every valid skin SST is by day
    local_hours = 6.95 + lon.ravel()[valid.ravel()] / 15.0
    assert (local_hours > 11.5).all() and (local_hours < 13.0).all()
    guarded = obsprep.read(path, diurnal_guard="night")
    reasons = guarded["rejected"].astype(object)
    assert guarded["rejected"].notna().all()
    assert (reasons == "diurnal_warming").sum() >= int(valid.sum())
    assert set(reasons) <= {"missing_value", "diurnal_warming"}
