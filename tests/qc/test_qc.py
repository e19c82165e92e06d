"""Quality-control stage: Argo real-time tests, TEOS-10 freezing point, grid checks, order.

References: Argo Quality Control Manual for CTD and Trajectory Data (from memory, thresholds in
[ArgoQC]): global range T -2.5..40 degC, S 2..41 PSU; spike test value
|V2 - (V3 + V1)/2| - |(V3 - V1)/2| against 6 degC / 0.9 PSU above 500 dbar and 2 degC /
0.3 PSU below; pressure must increase.  TEOS-10 through gsw (library as reference) and the
UNESCO 1983 freezing-point check value ([FofonoffMillard1983], from memory).  Geodesic
distances with pyproj.Geod (GeographicLib, [Karney2013]) as the reference for coast distances.
"""

from __future__ import annotations

import gsw
import numpy as np
import pyproj
import pytest

from obsprep.exceptions import ConfigError
from obsprep.geo.grid import RegularGrid
from obsprep.geo.seawater import depth_from_pressure, freezing_temperature, pressure_from_depth
from obsprep.model.table import make_table
from obsprep.qc import QcSettings, grid_checks, table_checks
from obsprep.qc.argo import global_range_test, pressure_increasing_test, spike_test
from obsprep.qc.freezing import below_freezing_test
from obsprep.qc.grid_checks import distance_to_land, too_shallow_test
from obsprep.settings.config import Window

T0 = np.datetime64("2026-11-19T12:00:00", "ns")
WINDOW = Window(np.datetime64("2026-11-20T00:00:00", "ns"), np.datetime64("2026-11-19T00:00:00", "ns"),
                np.datetime64("2026-11-20T00:00:00", "ns"), 86400.0)


def profile_table(values, depth, quantity="sea_water_temperature", group="p1", lat=-60.0,
                  file_id="f.nc"):
    n = len(values)
    return make_table(quantity=quantity, value=np.asarray(values, float),
                      depth=np.asarray(depth, float), lon=0.0, lat=lat, time=T0,
                      group=group, file_id=file_id, row=np.arange(n))


def depth_at(pressure_dbar, lat=-60.0):
    """Depth of a sea pressure with TEOS-10 (gsw.z_from_p)."""
    return -gsw.z_from_p(np.asarray(pressure_dbar, float), lat)


def reasons(table):
    return [None if isinstance(r, float) else r for r in table["rejected"].astype(object)]


# --- Argo real-time tests --------------------------------------------------------------------

def test_global_range_limits_from_the_argo_manual():
    # Argo QC manual (from memory): T -2.5..40 degC, S 2..41 PSU; the limits themselves pass
    t = profile_table([-2.6, -2.5, 40.0, 40.1], [10, 20, 30, 40])
    assert global_range_test(t).tolist() == [True, False, False, True]
    s = profile_table([1.9, 2.0, 41.0, 41.1], [10, 20, 30, 40], quantity="sea_water_salinity")
    assert global_range_test(s).tolist() == [True, False, False, True]


@pytest.mark.parametrize("pressure, spike, fails", [
    (100.0, 6.1, True), (100.0, 5.9, False),      # above 500 dbar: 6 degC
    (800.0, 2.1, True), (800.0, 1.9, False),      # at/below 500 dbar: 2 degC
])
def test_temperature_spike_thresholds(pressure, spike, fails):
    # a flat profile (V1 = V3) with V2 = V1 + spike: test value = spike
    p = np.array([pressure - 20, pressure - 10, pressure, pressure + 10, pressure + 20])
    t = profile_table([4.0, 4.0, 4.0 + spike, 4.0, 4.0], depth_at(p))
    assert spike_test(t).tolist() == [False, False, fails, False, False]


@pytest.mark.parametrize("pressure, spike, fails", [
    (100.0, 0.95, True), (100.0, 0.85, False), (800.0, 0.35, True), (800.0, 0.25, False)])
def test_salinity_spike_thresholds(pressure, spike, fails):
    p = np.array([pressure - 10, pressure, pressure + 10])
    s = profile_table([34.5, 34.5 + spike, 34.5], depth_at(p), quantity="sea_water_salinity")
    assert spike_test(s).tolist() == [False, fails, False]


def test_spike_test_value_subtracts_the_gradient():
    # V1 = 10, V2 = 17, V3 = 4: |17 - 7| - |(4 - 10)/2| = 10 - 3 = 7 > 6 -> fails;
    # V1 = 10, V2 = 13, V3 = 2: |13 - 6| - 4 = 3 -> passes although V2 is far from both
    fail = profile_table([10.0, 17.0, 4.0], depth_at([10, 20, 30]))
    assert spike_test(fail).tolist() == [False, True, False]
    steep = profile_table([10.0, 13.0, 2.0], depth_at([10, 20, 30]))
    assert not spike_test(steep).any()


def test_spike_neighbours_are_within_the_same_profile_and_kept_rows():
    t = profile_table([4.0, 4.0, 20.0, 4.0, 4.0], depth_at([10, 20, 30, 40, 50]))
    t["group"] = t["group"].cat.add_categories(["p2"])
    t.loc[3:, "group"] = "p2"    # profile p1: 4, 4, 20 (20 is an end point: not tested)
    assert not spike_test(t).any()
    u = profile_table([4.0, 30.0, 4.0, 4.0], depth_at([10, 20, 30, 40]))
    from obsprep.model.table import reject
    reject(u, np.array([False, False, True, False]), "provider_flag")
    # with level 2 flagged, the neighbours of level 1 are levels 0 and 3
    assert spike_test(u).tolist() == [False, True, False, False]


def test_pressure_increasing_flags_repeats_and_reversals():
    # pressures 10, 20, 20, 15, 30, 25, 40: the repeated 20, the reversal 15 and 25 fail
    p = [10, 20, 20, 15, 30, 25, 40]
    t = profile_table(np.full(len(p), 3.0), depth_at(p))
    assert pressure_increasing_test(t).tolist() == [False, False, True, True, False, True, False]
    two = profile_table(np.full(4, 3.0), depth_at([100, 200, 10, 20]))
    two["group"] = two["group"].cat.add_categories(["p2"])
    two.loc[2:, "group"] = "p2"  # a new profile starts shallow again
    assert not pressure_increasing_test(two).any()
    # stored from the bottom up (last level shallower than the first): tested in that
    # direction, so only the repeated 300 and the reversal 350 fail (common practice)
    up = profile_table(np.full(6, 3.0), depth_at([500, 400, 300, 300, 350, 100]))
    assert pressure_increasing_test(up).tolist() == [False, False, False, True, True, False]


def test_pressure_from_depth_inverts_teos10():
    p = np.array([0.0, 10.0, 500.0, 2000.0])
    np.testing.assert_allclose(pressure_from_depth(depth_at(p, 45.0), 45.0), p, atol=1e-8)


def test_depth_from_pressure_against_unesco_1983_and_teos10():
    # [FofonoffMillard1983], UNESCO Tech. Pap. Mar. Sci. 44 (from memory): 10 000 dbar at
    # 30 deg -> 9712.653 m; TEOS-10 is about 1.1 m deeper, within 1.5 m
    assert depth_from_pressure(10000.0, 30.0) == pytest.approx(9712.653, abs=1.5)
    # TEOS-10 via gsw (library as reference)
    p = np.array([0.0, 100.0, 1000.0, 6000.0])
    np.testing.assert_allclose(depth_from_pressure(p, -65.0), -gsw.z_from_p(p, -65.0), rtol=1e-12)


# --- freezing point ------------------------------------------------------------------------

def test_freezing_point_check_values():
    # TEOS-10 via gsw [TEOS10]: SP 35, p 0, 0 E 0 N, air-free -> about -1.919 degC
    assert freezing_temperature(35.0, 0.0, 0.0, 0.0, saturation_fraction=0.0) == \
        pytest.approx(-1.919, abs=5e-4)
    sa = gsw.SA_from_SP(34.5, 100.0, -30.0, -65.0)
    assert freezing_temperature(34.5, 100.0, -30.0, -65.0) == pytest.approx(
        gsw.t_freezing(sa, 100.0, 1.0), abs=1e-12)
    # UNESCO 1983 (Fofonoff & Millard, from memory): S 40, p 500 dbar -> -2.588567 degC; the
    # air-saturated TEOS-10 value agrees to a few mK (here 0.4 mK)
    assert freezing_temperature(40.0, 500.0, 0.0, 0.0) == pytest.approx(-2.588567, abs=2e-3)


def test_below_freezing_uses_the_salinity_of_the_same_level():
    depth = depth_at([10.0, 10.0])
    temp = profile_table([-1.95, -1.95], depth)
    temp.loc[1, "row"] = 1
    sal = profile_table([34.0, 30.0], depth, quantity="sea_water_salinity")
    from obsprep.model.table import concat_tables
    table = concat_tables([temp, sal])
    lat, lon = -60.0, 0.0
    p = pressure_from_depth(depth, lat)
    tf = [freezing_temperature(s, pi, lon, lat) for s, pi in zip((34.0, 30.0), p)]
    # at S 34 the freezing point is about -1.87: -1.95 is 0.08 below; at S 30, about -1.65
    fail = below_freezing_test(table, ["sea_water_temperature"], tolerance=0.05,
                               default_salinity=35.0)
    assert fail[:2].tolist() == [-1.95 < tf[0] - 0.05, -1.95 < tf[1] - 0.05] == [True, True]
    lenient = below_freezing_test(table, ["sea_water_temperature"], tolerance=0.1,
                                  default_salinity=35.0)
    assert lenient[:2].tolist() == [False, True]
    # without a salinity row the default salinity is used: S 35 -> about -1.92 at 10 dbar
    alone = profile_table([-1.95, -2.05], depth)
    alone.loc[1, "row"] = 1
    tf35 = freezing_temperature(35.0, p[0], lon, lat)
    expected = [-1.95 < tf35 - 0.1, -2.05 < tf35 - 0.1]
    assert below_freezing_test(alone, ["sea_water_temperature"], 0.1, 35.0).tolist() == expected
    assert expected == [False, True]


# --- grid checks ---------------------------------------------------------------------------

def small_grid():
    """5 x 6 one-degree cells from (0 E, 60 N); land in column 0; bathymetry rising to the
    coast."""
    mask = np.ones((5, 6), dtype=bool)
    mask[:, 0] = False
    bathymetry = np.tile([0.0, 50.0, 150.0, 400.0, 1000.0, 3000.0], (5, 1))
    return RegularGrid(0.0, 60.0, 1.0, 1.0, 6, 5, sea_mask=mask, bathymetry=bathymetry)


def test_distance_to_land_against_pyproj_geodesics():
    grid = small_grid()
    rng = np.random.default_rng(3)
    lon, lat = rng.uniform(0.5, 6.0, 50), rng.uniform(60.0, 65.0, 50)
    land_lon = grid.lon_center[~grid.sea_mask]
    land_lat = grid.lat_center[~grid.sea_mask]
    geod = pyproj.Geod(ellps="WGS84")
    reference = np.array([geod.inv(np.full(land_lon.size, x), np.full(land_lon.size, y),
                                   land_lon, land_lat)[2].min() for x, y in zip(lon, lat)])
    # the sphere of mean radius is within -0.45 % .. +0.56 % of the WGS 84 geodesic
    # (obsprep.geo.sphere; ratio of R to the extreme radii of curvature)
    np.testing.assert_allclose(distance_to_land(grid, lon, lat), reference, rtol=0.006)


def test_too_shallow_and_near_coast_rejections():
    grid = small_grid()
    lon = np.array([1.5, 2.5, 3.5, 4.5, 5.5])   # cells i = 1..5 of row j = 2
    lat = np.full(5, 62.5)
    table = make_table(quantity="sea_level_anomaly", value=np.zeros(5), lon=lon, lat=lat,
                       time=T0)
    i, j = grid.locate(lon, lat)
    assert too_shallow_test(grid, i, j, 200.0).tolist() == [True, True, False, False, False]
    # distances to the land-cell centre at 0.5 E, 62.5 N: about 51, 103, 154, 206, 257 km
    geod = pyproj.Geod(ellps="WGS84")
    d_km = geod.inv(lon, lat, np.full(5, 0.5), lat)[2] / 1000.0
    settings = QcSettings(min_depth=100.0, coast_distance_km=180.0)
    counts = grid_checks(table, grid, i, j, settings)
    assert d_km[2] < 180.0 < d_km[3]
    assert reasons(table) == ["too_shallow", "near_coast", "near_coast", None, None]
    assert counts == {"too_shallow": 1, "near_coast": 2}


def test_grid_without_land_is_never_near_the_coast():
    grid = RegularGrid(0.0, 0.0, 1.0, 1.0, 3, 3)
    assert np.isinf(distance_to_land(grid, [1.5], [1.5])).all()


# --- the stage: order and settings ---------------------------------------------------------

def test_stage_order_and_first_reason_wins():
    depth = depth_at([10, 20, 30, 40, 50, 60])
    t = profile_table([3.0, 45.0, 3.0, 30.0, 3.0, -2.4], depth)
    t.loc[0, "time"] = np.datetime64("2026-11-21T00:00:00")        # outside the window
    counts = table_checks(t, WINDOW, duplicate_groups=(), settings=QcSettings())
    # 45 degC fails the Argo global range before the gross range; 30 degC between 3s is a
    # spike (above 500 dbar: 27 > 6); -2.4 degC is below the freezing point at S 35
    assert reasons(t) == ["outside_window", "argo_global_range", None, "argo_spike", None,
                          "below_freezing_point"]
    assert counts["argo_global_range"] == 1 and counts["argo_spike"] == 1
    off = profile_table([3.0, 45.0, 3.0, 30.0, 3.0, -2.4], depth)
    table_checks(off, WINDOW, settings=QcSettings(argo_tests=False, freezing_point_quantities=()))
    assert reasons(off) == [None, "out_of_range", None, None, None, None]
    dup = profile_table([3.0, 3.1], depth[:2], group="6900001_010")
    table_checks(dup, WINDOW, settings=QcSettings(), duplicate_groups=frozenset({"6900001_010"}))
    assert reasons(dup) == ["duplicate", "duplicate"]


def test_qc_settings_errors_name_the_key():
    with pytest.raises(ConfigError, match=r"sources\[0\]\.qc\.min_dept"):
        QcSettings.from_dict({"min_dept": 10}, "sources[0].qc")
    with pytest.raises(ConfigError, match=r"qc\.duplicates.*true or false"):
        QcSettings.from_dict({"duplicates": "yes"}, "qc")
    with pytest.raises(ConfigError, match=r"qc\.freezing_point_quantities"):
        QcSettings.from_dict({"freezing_point_quantities": ["sea_level_anomaly"]}, "qc")
    s = QcSettings.from_dict({"min_depth": 300, "coast_distance_km": 20})
    assert (s.min_depth, s.coast_distance_km, s.argo_tests) == (300.0, 20.0, True)


# --- the registry: one declaration per check ----------------------------------------------

def test_registry_declarations_feed_settings_reasons_and_order():
    from obsprep.model.reasons import REASONS
    from obsprep.qc.registry import CHECKS
    from obsprep.settings.qc import QC_KEYS

    # every reason a check rejects under is a ledger reason, every setting a [sources.qc] key
    for check in CHECKS:
        assert set(check.reasons) <= set(REASONS), check.name
        for setting in check.settings:
            assert setting.key in QC_KEYS and getattr(QcSettings(), setting.key) == setting.default
    # the grid checks come last (they run after the model grid has placed the rows)
    needs_grid = [c.needs_grid for c in CHECKS]
    assert needs_grid == sorted(needs_grid) and any(needs_grid)


def test_registry_refuses_a_table_check_after_a_grid_check():
    from obsprep.qc.check import QcCheck
    from obsprep.qc.registry import _checked_order

    table_check = QcCheck(name="late", reasons={}, apply=lambda t, c, s: {})
    grid_check = QcCheck(name="grid", reasons={}, apply=lambda t, c, s: {}, needs_grid=True)
    with pytest.raises(ValueError, match="'late' needs no grid but is listed after"):
        _checked_order((grid_check, table_check))
    with pytest.raises(ValueError, match="listed twice"):
        _checked_order((table_check, table_check))


def test_qc_schema_from_the_declarations_matches_the_shipped_schema():
    # the configuration JSON schema shipped with the package (obsprep/schemas): same keys,
    # types, defaults and constraints as the declarations
    import json
    from pathlib import Path

    import obsprep
    from obsprep.settings.qc import qc_json_schema

    shipped = json.loads((Path(obsprep.__file__).parent / "schemas" / "config.schema.json")
                         .read_text())["properties"]["sources"]["items"]["properties"]["qc"]
    built = qc_json_schema()
    assert set(built["properties"]) == set(shipped["properties"])
    for key, prop in built["properties"].items():
        expected = {k: v for k, v in shipped["properties"][key].items() if k != "description"}
        assert {k: v for k, v in prop.items() if k != "description"} == expected, key


def test_reason_order_does_not_depend_on_which_check_module_is_imported_first():
    # the ledger lists reasons in REASONS order; a fresh interpreter importing one check
    # module directly must register the same codes in the same order as the registry does
    import subprocess
    import sys

    code = ("import {module}; from obsprep.model.reasons import REASONS; "
            "print(','.join(REASONS))")
    orders = {subprocess.run([sys.executable, "-c", code.format(module=m)], check=True,
                             capture_output=True, text=True).stdout
              for m in ("obsprep.qc", "obsprep.qc.duplicates", "obsprep.qc.grid_checks",
                        "obsprep.settings.qc")}
    assert len(orders) == 1 and "near_coast,duplicate" in orders.pop()


def test_values_mostly_outside_the_physical_range_warn_of_units():
    from obsprep.qc import gross_range_check

    # ice concentration in percent declared as "1": 0..100 read as fractions; the range is
    # -0.25..1.25 (obsprep.model.quantities), so only open water and 1 % pass
    percent = np.array([0.0, 0.0, 0.0, 1.0, 15.0, 40.0, 80.0, 95.0, 100.0, 100.0])
    t = make_table(len(percent), quantity="sea_ice_concentration", value=percent)
    assert gross_range_check(t) == 6
    assert t.attrs["warnings"] == [
        "more than 10% of the values of sea_ice_concentration are outside its physical range "
        "[-0.25, 1.25] '1': the file's units or scale may be wrong"]
    # one glitch in twenty fractions (5 %): no warning, the value alone rejected
    fractions = np.linspace(0.0, 1.0, 20)
    fractions[3] = 15.0
    t = make_table(20, quantity="sea_ice_concentration", value=fractions)
    assert gross_range_check(t) == 1
    assert "warnings" not in t.attrs
    # a narrowed valid_range rejects more, but only the physical range speaks of units
    t = make_table(20, quantity="sea_ice_concentration", value=np.linspace(0.0, 1.0, 20))
    assert gross_range_check(t, {"sea_ice_concentration": [0.0, 0.5]}) == 10
    assert "warnings" not in t.attrs
