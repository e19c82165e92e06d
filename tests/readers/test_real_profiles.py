"""Real profile files as their providers distribute them (../shared/realdata, provenance in its
README): Argo single, real-time and multi-profile files from the Argo GDAC, ship CTD casts of the
NOAA Alaska Fisheries Science Center (CF orthogonal multidimensional array) and a Spray glider of
the Scripps Institution of Oceanography via the US IOOS glider data assembly (CF
trajectoryProfile, contiguous ragged array with an index of profiles to trajectories).

Every expected value is computed here with netCDF4 from the file itself: fill values masked by
netCDF4 from ``_FillValue``/``missing_value``, the Argo rules of the Argo user's manual (from
memory: the ``_ADJUSTED`` value and its ``_ADJUSTED_QC`` flag where ``DATA_MODE`` is A or D,
the raw value and flag otherwise; flags 1 2 5 8 kept for levels, ``POSITION_QC`` and
``JULD_QC``; JULD in days since 1950-01-01 UTC), the CF rules of chapter 9 and appendix H for
the layouts (CF 1.8: the count variable's ``sample_dimension``, the index variable's
``instance_dimension``), CF 3.5 for flags (``flag_values`` with ``flag_meanings``), and TEOS-10
(``gsw.z_from_p``, the reference implementation) for depth from pressure.
"""

from __future__ import annotations

import gsw
import netCDF4
import numpy as np
import pandas as pd
import pytest
from realdata import real_file

from obsprep.model.table import validate_table
from obsprep.readers import guess_kind, read

# netCDF4 says so when a file's valid_min/valid_max/missing_value do not fit the variable's type
# (it then masks by _FillValue alone, as CF 2.5.1 asks for those attributes' type)
pytestmark = pytest.mark.filterwarnings("ignore:WARNING.*not used since it:UserWarning")

#: Argo flags kept for levels, position and time (Argo user's manual, from memory)
ARGO_GOOD = list("1258")


def reason_counts(table) -> dict:
    counts = table["rejected"].astype(object).fillna("kept").value_counts()
    return {str(k): int(v) for k, v in counts.items()}


def numbers(nc, name) -> np.ndarray:
    """A numeric variable with netCDF4's own masking of fill values, as float64 with NaN."""
    return np.ma.filled(np.ma.asarray(nc[name][:], dtype=np.float64), np.nan)


def chars(nc, name) -> np.ndarray:
    """A char variable as one-character strings, fill and blanks as " "."""
    var = nc[name]
    var.set_auto_mask(False)
    var.set_auto_chartostring(False)
    values = np.asarray(var[:]).astype("S1")
    return np.where(values == b"", b" ", values).astype("U1")


def argo_expected(path, parameters=("TEMP", "PSAL")):
    """Per parameter: a DataFrame of the file's stored levels with value, depth, profile,
    reason (None kept) decided by the Argo rules, computed from the file alone."""
    with netCDF4.Dataset(path) as nc:
        mode = chars(nc, "DATA_MODE")
        adjusted = np.isin(mode, ["A", "D"])[:, None]
        lat = numbers(nc, "LATITUDE")
        lon = numbers(nc, "LONGITUDE")
        juld = numbers(nc, "JULD")
        position_bad = ~np.isin(chars(nc, "POSITION_QC"), ARGO_GOOD)[:, None]
        time_bad = ~np.isin(chars(nc, "JULD_QC"), ARGO_GOOD)[:, None]

        def level(name):
            raw, raw_qc = numbers(nc, name), chars(nc, f"{name}_QC")
            if f"{name}_ADJUSTED" not in nc.variables:
                return raw, raw_qc
            return (np.where(adjusted, numbers(nc, f"{name}_ADJUSTED"), raw),
                    np.where(adjusted, chars(nc, f"{name}_ADJUSTED_QC"), raw_qc))

        pressure, pressure_qc = level("PRES")
        present = [p for p in parameters if p in nc.variables]
        values = {p: level(p) for p in present}
        cycle = np.asarray(nc["CYCLE_NUMBER"][:])
        direction = chars(nc, "DIRECTION")
    stored = ~(np.isnan(pressure) & np.all([np.isnan(values[p][0]) for p in present], axis=0))
    profile = np.broadcast_to(np.arange(pressure.shape[0])[:, None], pressure.shape)
    out = {}
    for p in present:
        value, qc = values[p]
        reason = np.full(value.shape, None, dtype=object)
        for mask, name in ((np.isnan(value) | np.isnan(pressure), "missing_value"),
                           (np.broadcast_to(position_bad, value.shape), "position_qc"),
                           (np.broadcast_to(time_bad, value.shape), "time_qc"),
                           (~np.isin(qc, ARGO_GOOD) | ~np.isin(pressure_qc, ARGO_GOOD),
                            "argo_qc_flag")):
            reason[mask & (reason == None)] = name  # noqa: E711 (elementwise on objects)
        lat2 = np.broadcast_to(lat[:, None], value.shape)
        out[p] = pd.DataFrame({
            "value": value[stored], "pressure": pressure[stored], "profile": profile[stored],
            "lat": lat2[stored], "lon": np.broadcast_to(lon[:, None], value.shape)[stored],
            "depth": -gsw.z_from_p(pressure[stored], lat2[stored]),
            "time": (pd.Timestamp("1950-01-01")
                     + pd.to_timedelta(np.broadcast_to(juld[:, None], value.shape)[stored],
                                       unit="D")).to_numpy(),
            "reason": reason[stored]})
    return out, {"cycle": cycle, "direction": direction}


def assert_matches(table, quantity, expected):
    """Row count, reasons, and value/depth/time/position ranges of the kept rows."""
    rows = table[table["quantity"] == quantity]
    assert len(rows) == len(expected)
    want = expected["reason"].fillna("kept").value_counts().to_dict()
    assert reason_counts(rows) == {str(k): int(v) for k, v in want.items()}
    kept = rows[rows["rejected"].isna()]
    good = expected[expected["reason"].isna()]
    if len(good):
        for column in ("value", "depth", "lat", "lon"):
            np.testing.assert_allclose([kept[column].min(), kept[column].max()],
                                       [good[column].min(), good[column].max()],
                                       rtol=0, atol=1e-4)
        assert abs(kept["time"].min() - good["time"].min()) < pd.Timedelta(seconds=1)
        assert abs(kept["time"].max() - good["time"].max()) < pd.Timedelta(seconds=1)


@pytest.mark.parametrize("relative, provider", [
    ("argo/D4900882_029.nc", "Argo GDAC, MEDS float, delayed mode"),
    ("argo/R13857_001.nc", "Argo GDAC, AOML float, real time, temperature only"),
    ("argo/6901744_prof.nc", "Argo GDAC, Coriolis float, 35 profiles"),
])
def test_real_argo_files_against_the_argo_rules(relative, provider):
    path = real_file(relative)
    assert guess_kind(path) == "argo", provider
    table = read(path)
    validate_table(table)
    expected, _ = argo_expected(path)
    names = {"TEMP": "sea_water_temperature", "PSAL": "sea_water_salinity"}
    assert set(table["quantity"].astype(str)) == {names[p] for p in expected}
    for parameter, frame in expected.items():
        assert_matches(table, names[parameter], frame)
    # physically sensible: the kept values are ocean temperatures and salinities
    kept = table[table["rejected"].isna()]
    temperature = kept[kept["quantity"] == "sea_water_temperature"]["value"]
    assert temperature.between(-2.5, 40.0).all()


def test_real_argo_descent_and_ascent_of_one_cycle_are_two_profiles():
    """Argo GDAC, Coriolis float 6901744: cycle 1 has a descending ('D') and an ascending
    ('A') profile (DIRECTION, Argo user's manual, from memory); both are kept, each its own
    group with its own levels and time."""
    path = real_file("argo/6901744_prof.nc")
    table = read(path)
    expected, meta = argo_expected(path)
    cycle, direction = meta["cycle"], meta["direction"]
    twice = [c for c in np.unique(cycle) if (cycle == c).sum() > 1]
    assert twice, "the file has a cycle with two profiles"
    with netCDF4.Dataset(path) as nc:
        platform = "".join(chars(nc, "PLATFORM_NUMBER")[0]).strip()
    temperature = table[table["quantity"] == "sea_water_temperature"]
    frame = expected["TEMP"]
    for c in twice:
        profiles = np.flatnonzero(cycle == c)
        assert sorted(direction[profiles]) == ["A", "D"]
        groups = set()
        for k in profiles:
            label = f"{platform}_{int(c):03d}" + ("D" if direction[k] == "D" else "")
            rows = temperature[temperature["group"] == label]
            levels = frame[frame["profile"] == k]
            assert len(rows) == len(levels) > 0
            assert rows["time"].nunique() == 1
            assert abs(rows["time"].iloc[0] - levels["time"].iloc[0]) < pd.Timedelta(seconds=1)
            groups.add(label)
        assert len(groups) == 2


def test_real_ship_ctd_orthogonal_multidimensional():
    """NOAA Alaska Fisheries Science Center, R/V Oscar Dyson SeaCAT casts: CF featureType
    profile, orthogonal multidimensional array (CF 9.3.1): temperature(profile, z) on the depth
    coordinate z(z) shared by every cast, position and time per profile.  Every element is
    storage of a level (z is never missing), so every element is a row, a fill value
    ``missing_value`` (CF 9.6)."""
    path = real_file("insitu/1dy11_seacat_ctd_profiles.nc")
    assert guess_kind(path) == "profiles"
    table = read(path)
    validate_table(table)
    with netCDF4.Dataset(path) as nc:
        z = numbers(nc, "z")
        lat, lon = numbers(nc, "latitude"), numbers(nc, "longitude")
        seconds = numbers(nc, "time")
        ids = np.asarray(nc["profile"][:]).astype(str)
        platform = nc.getncattr("platform")
        fields = {"sea_water_temperature": numbers(nc, "temperature"),
                  "sea_water_salinity": numbers(nc, "salinity")}
    assert np.isfinite(z).all()
    n_profiles, n_levels = fields["sea_water_temperature"].shape
    for quantity, values in fields.items():
        frame = pd.DataFrame({
            "value": values.ravel(), "depth": np.tile(z, n_profiles),
            "lat": np.repeat(lat, n_levels), "lon": np.repeat(lon, n_levels),
            "time": (pd.Timestamp("1970-01-01")
                     + pd.to_timedelta(np.repeat(seconds, n_levels), unit="s")).to_numpy(),
            "reason": np.where(np.isnan(values.ravel()), "missing_value", None)})
        assert_matches(table, quantity, frame)
    assert set(table["group"].astype(str)) == set(ids)  # cf_role profile_id
    assert set(table["platform"].astype(str)) == {platform}


def test_real_glider_trajectory_profile_ragged():
    """Scripps Institution of Oceanography Spray glider sp025 via the US IOOS glider DAC: CF
    featureType trajectoryProfile (CF H.6), contiguous ragged array: rowSize(profile) with
    ``sample_dimension = "obs"`` gives each profile's samples (CF 9.3.3), trajectoryIndex(profile)
    with ``instance_dimension = "trajectory"`` each profile's trajectory (CF 9.3.4).  Time and
    position per profile; depth per sample.  Flags per CF 3.5 from ``temperature_qc`` /
    ``salinity_qc`` (``ancillary_variables``): kept where the meaning is good_data or
    probably_good_data; this real-time file flags every value 0 no_qc_performed or 9
    missing_value, so none is kept and every row counts under its reason."""
    path = real_file("insitu/sp025-20141125T1730_glider_trajectoryProfile.nc")
    assert guess_kind(path) == "profiles"
    table = read(path)
    validate_table(table)
    with netCDF4.Dataset(path) as nc:
        counts = np.asarray(nc["rowSize"][:], dtype=np.int64)
        trajectory_of_profile = np.asarray(nc["trajectoryIndex"][:], dtype=np.int64)
        trajectory_ids = [b"".join(row).decode().strip() for row in
                          np.asarray(nc["trajectory"][:].filled(b" ") if np.ma.isMaskedArray(
                              nc["trajectory"][:]) else nc["trajectory"][:])]
        profile_ids = numbers(nc, "profile_id")
        seconds, lat, lon = (numbers(nc, n) for n in ("time", "latitude", "longitude"))
        depth = numbers(nc, "depth")
        quantities = {"sea_water_temperature": "temperature",
                      "sea_water_salinity": "salinity"}
        values = {q: numbers(nc, n) for q, n in quantities.items()}
        flags, unassessed = {}, {}
        for q, n in quantities.items():
            flag_var = nc[nc[n].getncattr("ancillary_variables")]
            meanings = flag_var.getncattr("flag_meanings").split()
            good_codes = [int(v) for v, m in zip(flag_var.getncattr("flag_values"), meanings)
                          if m in ("good_data", "probably_good_data")]
            flags[q] = np.isin(np.ma.filled(flag_var[:], -1), good_codes)
            unassessed_code = [int(v) for v, m in zip(flag_var.getncattr("flag_values"),
                                                      meanings) if m == "no_qc_performed"]
            unassessed[n] = np.isin(np.ma.filled(flag_var[:], -1), unassessed_code)
    assert counts.sum() == depth.size
    profile = np.repeat(np.arange(counts.size), counts)
    all_missing = np.all([np.isnan(v) for v in values.values()], axis=0)
    stored = ~(all_missing & (np.isnan(depth) | (np.isnan(lat[profile]) & np.isnan(lon[profile]))))
    for q, v in values.items():
        reason = np.where(np.isnan(v) | np.isnan(depth), "missing_value",
                          np.where(flags[q], None, "provider_flag"))
        frame = pd.DataFrame({"value": v, "depth": depth, "lat": lat[profile],
                              "lon": lon[profile], "reason": reason})[stored]
        # the values the provider did not assess are named in a per-file warning
        n_unassessed = int((unassessed[quantities[q]][stored] & (frame["reason"]
                                                                 == "provider_flag")).sum())
        assert any(w.startswith(f"{n_unassessed} values of '{quantities[q]}'")
                   and "no_qc_performed" in w for w in table.attrs["warnings"])
        rows = table[table["quantity"] == q]
        assert_matches(table, q, frame)
        # nothing kept, so the ranges are those of every row with a value
        with_value = rows[np.isfinite(rows["value"].to_numpy())]
        finite = frame[np.isfinite(frame["value"])]
        np.testing.assert_allclose([with_value["value"].min(), with_value["value"].max()],
                                   [finite["value"].min(), finite["value"].max()], atol=1e-4)
        placed = rows[np.isfinite(rows["depth"].to_numpy())]
        np.testing.assert_allclose([placed["depth"].min(), placed["depth"].max()],
                                   [np.nanmin(depth), np.nanmax(depth)], atol=1e-4)
        np.testing.assert_allclose([rows["lat"].min(), rows["lat"].max(), rows["lon"].min(),
                                    rows["lon"].max()],
                                   [lat.min(), lat.max(), lon.min(), lon.max()], atol=1e-9)
        times = pd.Timestamp("1970-01-01") + pd.to_timedelta(seconds, unit="s")
        assert abs(rows["time"].min() - times.min()) < pd.Timedelta(seconds=1)
        assert abs(rows["time"].max() - times.max()) < pd.Timedelta(seconds=1)
    # group: trajectory id then profile id (the two cf_role variables, CF 9.5)
    want = {f"{trajectory_ids[trajectory_of_profile[k]]}_{int(profile_ids[k])}"
            for k in range(counts.size) if counts[k]}
    assert set(table["group"].astype(str)) == want
    assert set(table["platform"].astype(str)) == {trajectory_ids[0]}
