"""Argo profile reader on small multi-profile files written from the Argo format.

References: Argo user's manual, core profile format 3.1 (from memory; [ArgoUser]):
DATA_MODE R/A/D with adjusted fields for A and D, QC flags 0 none, 1 good,
2 probably good, 3 probably bad, 4 bad, 5 changed, 8 estimated, 9 missing (kept by default:
1, 2, 5, 8), POSITION_QC and JULD_QC, JULD in days since 1950-01-01.  TEOS-10 via gsw for
pressure to depth; [FofonoffMillard1983] for the UNESCO depth check value; numpy datetime64
for times.  The expected table is built by a plain loop over profiles and levels that applies
the manual's rules independently of the reader.
"""

from __future__ import annotations

import gsw
import netCDF4
import numpy as np
import pytest
from sample_files import ARGO_EPOCH, write_argo

from obsprep.exceptions import InputFileError
from obsprep.model.table import validate_table
from obsprep.readers import guess_kind, read

NAN = np.nan
GOOD = set("1258")

PROFILES = dict(
    platform=["6902001", "6902001", "6902002", "6902002"],
    cycle=[12, 13, 3, 4],
    mode=["R", "D", "A", "R"],
    juld=[27700.25, 27710.5, 27701.0, 27711.75],
    lat=[-62.5, -63.0, -60.0, -61.0],
    lon=[330.0, -29.5, 10.0, 190.0],
    pres=[[5.0, 50.0, 500.0, NAN], [4.0, 60.0, 600.0, 1000.0], [3.0, 30.0, NAN, NAN],
          [6.0, 80.0, 300.0, NAN]],
    temp=[[0.5, 0.2, 0.8, NAN], [-1.0, -0.5, 0.6, 0.4], [1.5, 1.2, NAN, NAN],
          [0.1, NAN, 0.9, NAN]],
    psal=[[34.2, 34.4, 34.6, NAN], [34.1, 34.3, 34.65, 34.68], [34.0, 34.1, NAN, NAN],
          [34.3, 34.4, 34.5, NAN]],
    temp_qc=[list("141 "), list("1111"), list("11  "), list("1958")],
    psal_qc=[list("158 "), list("1111"), list("11  "), list("1110")],
    adjusted={"PRES": [[NAN] * 4, [4.1, 60.2, 600.3, 1000.4], [3.0, 30.0, NAN, NAN], [NAN] * 4],
              "TEMP": [[NAN] * 4, [-0.99, -0.49, NAN, 0.41], [1.45, 1.15, NAN, NAN], [NAN] * 4],
              "PSAL": [[NAN] * 4, [34.11, 34.31, 34.66, 34.69], [34.02, 34.12, NAN, NAN],
                       [NAN] * 4]},
    errors={"PRES": [[NAN] * 4, [2.4] * 4, [2.4] * 4, [NAN] * 4],
            "TEMP": [[NAN] * 4, [0.002] * 4, [0.002] * 4, [NAN] * 4],
            "PSAL": [[NAN] * 4, [0.01] * 4, [0.01] * 4, [NAN] * 4]},
    # delayed mode: the bad temperature of level 2 has a fill adjusted value and flag 4; the
    # pressure of level 3 is adjusted but flagged 3
    adjusted_qc={"TEMP": [list("    "), list("1141"), list("11  "), list("    ")],
                 "PRES": [list("    "), list("1113"), list("11  "), list("    ")]},
    position_qc=["1", "1", "4", "1"],
    juld_qc=["1", "1", "1", "3"],
    direction=["A", "A", "A", "D"],
)


def expected_rows(p, good=GOOD):
    """The observation rows the Argo rules give, by a plain loop (TEMP rows, then PSAL)."""
    rows = []
    for name in ("TEMP", "PSAL"):
        for k in range(len(p["mode"])):
            adjusted = p["mode"][k] in "AD"
            n_levels = len(p["pres"][k])
            for level in range(n_levels):
                def pick(param):
                    raw = {"PRES": p["pres"], "TEMP": p["temp"], "PSAL": p["psal"]}[param]
                    value = p["adjusted"][param][k][level] if adjusted else raw[k][level]
                    qc = {"PRES": None, "TEMP": p["temp_qc"], "PSAL": p["psal_qc"]}[param]
                    if adjusted and param in p["adjusted_qc"]:
                        flag = p["adjusted_qc"][param][k][level]
                    elif qc is None:
                        flag = "1" if np.isfinite(value) else " "
                    else:
                        flag = qc[k][level]
                    return value, flag

                pres, pres_flag = pick("PRES")
                temp, _ = pick("TEMP")
                psal, _ = pick("PSAL")
                if not (np.isfinite(pres) or np.isfinite(temp) or np.isfinite(psal)):
                    continue  # padding past the end of the profile
                value, flag = pick(name)
                if not (np.isfinite(value) and np.isfinite(pres)):
                    reason = "missing_value"
                elif p["position_qc"][k] not in good:
                    reason = "position_qc"
                elif p["juld_qc"][k] not in good:
                    reason = "time_qc"
                elif flag not in good or pres_flag not in good:
                    reason = "argo_qc_flag"
                else:
                    reason = None
                error = p["errors"][name][k][level] if adjusted else NAN
                group = f"{p['platform'][k]}_{p['cycle'][k]:03d}" + (
                    "D" if p["direction"][k] == "D" else "")
                rows.append(dict(value=value, pressure=pres, reason=reason, error=error,
                                 lat=p["lat"][k], lon=p["lon"][k], juld=p["juld"][k],
                                 group=group, platform=p["platform"][k],
                                 row=k * n_levels + level))
    return rows


def reasons(table):
    return [None if isinstance(r, float) else r for r in table["rejected"].astype(object)]


@pytest.fixture
def argo_file(tmp_path):
    return write_argo(tmp_path / "argo_prof.nc", **PROFILES)


def test_multi_profile_file_with_mixed_data_modes_and_bad_flags(argo_file):
    assert guess_kind(argo_file) == "argo"
    table = read(argo_file, sensor="argo")
    validate_table(table)
    rows = expected_rows(PROFILES)
    assert len(table) == len(rows)
    assert table["quantity"].astype(str).tolist() == (
        ["sea_water_temperature"] * (len(rows) // 2) + ["sea_water_salinity"] * (len(rows) // 2))
    assert reasons(table) == [r["reason"] for r in rows]
    assert table["row"].tolist() == [r["row"] for r in rows]
    # values are stored as float32 in the file
    np.testing.assert_allclose(table["value"], [r["value"] for r in rows], rtol=0, atol=2e-6)
    np.testing.assert_allclose(table["error"], [r["error"] for r in rows], rtol=1e-6)
    # TEOS-10 via gsw as the reference for depth
    np.testing.assert_allclose(table["depth"], -gsw.z_from_p(
        np.float32([r["pressure"] for r in rows]).astype(float), [r["lat"] for r in rows]),
        rtol=1e-12)
    expected_time = ARGO_EPOCH + (np.array([r["juld"] for r in rows]) * 86400e9).astype(
        "timedelta64[ns]")
    np.testing.assert_array_equal(table["time"].to_numpy(), expected_time)
    np.testing.assert_allclose(table["lat"], [r["lat"] for r in rows])
    np.testing.assert_allclose(table["lon"], [((r["lon"] + 180) % 360) - 180 for r in rows])
    assert table["group"].astype(str).tolist() == [r["group"] for r in rows]
    assert table["platform"].astype(str).tolist() == [r["platform"] for r in rows]
    assert {"6902002_004D", "6902001_013"} <= set(table["group"].astype(str))


def test_kept_flags_are_configurable(argo_file):
    table = read(argo_file, good_qc_flags="12")
    rows = expected_rows(PROFILES, good=set("12"))
    assert reasons(table) == [r["reason"] for r in rows]
    # profile 0 (real time) has PSAL flags 5 and 8 at levels 1 and 2: kept by default only
    default = reasons(read(argo_file))
    assert sum(r == "argo_qc_flag" for r in reasons(table)) == sum(
        r == "argo_qc_flag" for r in default) + 2
    with pytest.raises(ValueError, match="good_qc_flags"):
        read(argo_file, good_qc_flags=["good"])


def test_single_profile_at_10000_dbar_against_unesco_1983(tmp_path):
    path = write_argo(tmp_path / "deep.nc", platform=["5901234"], cycle=[1], mode=["D"],
                      juld=[27000.0], lat=[30.0], lon=[-40.0], pres=[[10000.0]],
                      temp=[[1.5]], psal=[[34.7]], adjusted={"PRES": [[10000.0]]},
                      errors={"TEMP": [[0.002]], "PSAL": [[0.01]], "PRES": [[2.4]]})
    table = read(path)
    # [FofonoffMillard1983], UNESCO Tech. Pap. Mar. Sci. 44 (from memory): 10 000 dbar at
    # 30 deg -> 9712.653 m; TEOS-10 is about 1.1 m deeper, within 1.5 m
    assert table["depth"].iloc[0] == pytest.approx(9712.653, abs=1.5)
    assert table["depth"].iloc[0] == pytest.approx(-gsw.z_from_p(10000.0, 30.0), rel=1e-12)
    np.testing.assert_allclose(table["error"], [0.002, 0.01], rtol=1e-6)
    assert table["group"].astype(str).tolist() == ["5901234_001"] * 2


def test_two_profiles_of_one_cycle_get_distinct_groups(tmp_path):
    # a second vertical sampling scheme of the same cycle is a second profile in the file
    path = write_argo(tmp_path / "two.nc", platform=["6903000", "6903000"], cycle=[5, 5],
                      mode=["R", "R"], juld=[27000.0, 27000.0], lat=[-50.0, -50.0],
                      lon=[0.0, 0.0], pres=[[10.0, 20.0], [1.0, 2.0]],
                      temp=[[3.0, 2.9], [3.1, 3.05]], psal=[[34.0, 34.0], [34.0, 34.0]])
    table = read(path)
    groups = table.loc[table["quantity"] == "sea_water_temperature", "group"].astype(str)
    assert groups.tolist() == ["6903000_005"] * 2 + ["6903000_005_2"] * 2


def test_adjusted_mode_without_adjusted_variable_names_it(argo_file):
    with netCDF4.Dataset(argo_file, "a") as nc:
        nc.renameVariable("PSAL_ADJUSTED", "PSAL_ADJ_OTHER")
    with pytest.raises(InputFileError, match="PSAL_ADJUSTED") as info:
        read(argo_file)
    assert argo_file in str(info.value)


def test_missing_pressure_names_the_variable(argo_file):
    with netCDF4.Dataset(argo_file, "a") as nc:
        nc.renameVariable("PRES", "PRESSURE_OTHER")
    with pytest.raises(InputFileError) as info:
        read(argo_file, kind="argo")
    assert "'PRES'" in str(info.value) and argo_file in str(info.value)


TWO_PROFILES = dict(
    platform=["5906001", "5906001"], cycle=[7, 8], mode=["D", "D"], juld=[27700.0, 27710.0],
    lat=[10.0, 11.0], lon=[-40.0, -41.0],
    pres=[[5.0, 100.0], [6.0, 200.0]], temp=[[25.0, 20.0], [26.0, 18.0]],
    psal=[[36.0, 36.2], [36.1, 36.3]],
    temp_qc=[list("11"), list("11")], psal_qc=[list("14"), list("11")],
    adjusted={"PRES": [[5.1, 100.1], [6.1, 200.1]], "TEMP": [[24.9, 19.9], [25.9, 17.9]],
              "PSAL": [[36.01, 36.21], [36.11, 36.31]]},
    errors={"PRES": [[2.4] * 2] * 2, "TEMP": [[0.002] * 2] * 2, "PSAL": [[0.01] * 2] * 2},
    adjusted_qc={"PSAL": [list("11"), list("11")]},
)


def _rename(path, **names):
    with netCDF4.Dataset(path, "a") as nc:
        for old, new in names.items():
            nc.renameVariable(old, new)


def test_bgc_synthetic_data_mode_per_parameter(tmp_path):
    # Argo user's manual (BGC synthetic profiles, from memory): PARAMETER_DATA_MODE(N_PROF,
    # N_PARAM) gives each parameter's mode in the order of STATION_PARAMETERS(N_PROF, N_PARAM);
    # the adjusted value is used where that parameter's mode is A or D, the raw value where R
    path = write_argo(tmp_path / "SD5906001_007.nc", **TWO_PROFILES)
    _rename(path, DATA_MODE="DATA_MODE_NOT_IN_SYNTHETIC_FILES")
    with netCDF4.Dataset(path, "a") as nc:
        nc.createDimension("N_PARAM", 3)
        v = nc.createVariable("STATION_PARAMETERS", "S1", ("N_PROF", "N_PARAM", "STRING16"))
        v[:] = netCDF4.stringtochar(np.array([["PRES", "TEMP", "PSAL"],
                                              ["PRES", "PSAL", "TEMP"]], dtype="S16"))
        v = nc.createVariable("PARAMETER_DATA_MODE", "S1", ("N_PROF", "N_PARAM"))
        v[:] = np.array([list("DDR"), list("DAD")], dtype="S1")
    assert guess_kind(path) == "argo"
    table = read(path)
    validate_table(table)
    temp = table[table["quantity"] == "sea_water_temperature"].sort_values("row")
    psal = table[table["quantity"] == "sea_water_salinity"].sort_values("row")
    # TEMP: mode D in both profiles (column 2 of profile 0, column 3 of profile 1)
    np.testing.assert_allclose(temp["value"], [24.9, 19.9, 25.9, 17.9], atol=1e-5)
    np.testing.assert_allclose(temp["error"], [0.002] * 4, atol=1e-7)
    # PSAL: R in profile 0 (raw value, raw flag: '4' rejects level 2), A in profile 1
    np.testing.assert_allclose(psal["value"], [36.0, 36.2, 36.11, 36.31], atol=1e-5)
    assert np.isnan(psal["error"].to_numpy()[:2]).all()
    assert reasons(psal) == [None, "argo_qc_flag", None, None]
    # pressure D everywhere: the adjusted pressure gives the depth (TEOS-10)
    np.testing.assert_allclose(temp["depth"], -gsw.z_from_p([5.1, 100.1, 6.1, 200.1],
                                                            [10, 10, 11, 11]), atol=1e-3)


def test_argo_like_file_without_data_mode_qc_or_platform_variables(tmp_path):
    # an Argo-like file (animal-borne CTD: Argo variable names, some Argo variables absent):
    # read with the checks it cannot support named in warnings, never refused
    path = write_argo(tmp_path / "ct_seal.nc", **TWO_PROFILES)
    _rename(path, DATA_MODE="X_DM", JULD_QC="X_JQ", POSITION_QC="X_PQ", PLATFORM_NUMBER="X_PN",
            DATA_TYPE="X_DT")
    with netCDF4.Dataset(path, "a") as nc:
        nc.platform = "seal_ct36"
    assert guess_kind(path) == "argo"
    table = read(path)
    validate_table(table)
    temp = table[table["quantity"] == "sea_water_temperature"].sort_values("row")
    # without any data mode, the adjusted values are used where they exist
    np.testing.assert_allclose(temp["value"], [24.9, 19.9, 25.9, 17.9], atol=1e-5)
    assert reasons(temp) == [None] * 4
    assert set(temp["platform"].astype(str)) == {"seal_ct36"}
    warnings = " | ".join(table.attrs["warnings"])
    for name in ("JULD_QC", "POSITION_QC", "DATA_MODE"):
        assert name in warnings
