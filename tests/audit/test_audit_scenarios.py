"""The audit's verdict on whole builds of three collocated infrared sensors whose true errors
are known: the right verdict or an honest "inconclusive", never a confident wrong one.

GDS 2.0 L2P files are written with netCDF4 from a known truth plus errors drawn with numpy
(the reference), built with :func:`obsprep.run.build.build` and audited with
:func:`obsprep.audit.audit`, with an ensemble and without a model (pairs and triple
collocation only).  The ensemble's members and the truth are independent draws of the same
Gaussian random field about a common mean on the model grid (exchangeable, so the ensemble
mean misses the truth by (1 + 1/N) times the ensemble variance; the generator is the
calibration benchmark's, checked in test_calibration_generator.py).

Cases (a 30 x 30 grid of 1-degree cells; sensors ir_a, ir_b, ir_c of pixel noise 0.5, 0.6,
0.8 K, 3 x 3, 3 x 3 and 4 x 4 pixels per cell at their own positions):

- correlated field: ir_a also carries an error field correlated over cells (0.45 K, Gaussian
  correlation of 4 cells) that its files do not state: its super-observation errors are about
  2.2 times too small (its pixel noise, all the within-cell spread sees, is right);
- configured correlation: ir_c's errors are independent but it is configured with a
  within-sensor correlation of 0.6, which inflates its super-observation errors by
  sqrt(1 + (n - 1) 0.6), about 2.3 for n = 8 (too large);
- coarse grid: a sub-cell pattern of 0.8 K rms inside every cell (zero mean over each cell's
  pixels, so it inflates the spread and not the super-observations), correct sensors, without
  representation error and with a real one of 0.3 K common to all sensors that the
  configuration states;
- misassigned by 3: ir_b's files state a third of its pixel noise; with 900 cells per sensor
  the audit must say too_small (the check that the others cannot pass by always answering
  inconclusive).

Clouds: in the non-coarse cases each pixel is clear with a chance drawn per cell in 0.15-1,
so n varies from 1 to the pixels per cell.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from sample_files import write_gds2

from obsprep.audit import audit
from obsprep.run.build import build

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "benchmarks"))

from audit_synthetic import gaussian_random_field  # noqa: E402

NX = NY = 30
LON0, LAT0 = 0.0, 0.0
SKIN = "sea_surface_skin_temperature"
GDS2_REFERENCE_SECONDS = 1_000_000_000        # 2012-09-09T01:46:40 UTC
WINDOW = {"analysis_time": "2012-09-09T12:00:00", "start_hours": -24.0, "end_hours": 24.0,
          "slot_hours": 48.0}
#: name, pixel noise (K), pixels per cell side
SENSORS = (("ir_a", 0.5, 3), ("ir_b", 0.6, 3), ("ir_c", 0.8, 4))
MEMBERS = 30
BACKGROUND_SIGMA = 0.3
BACKGROUND_CELLS = 4.0
FLAGS = ("too_small", "too_large")
ACCEPTED = {"too_small": {"too_small", "inconclusive"}, "too_large": {"too_large", "inconclusive"},
            "ok": {"ok", "inconclusive"}}


def truth_kelvin(lon, lat):
    """A smooth truth, K: 0.5 K of large-scale structure about 290 K."""
    return 290.0 + 0.4 * np.sin(2 * np.pi * lon / 30.0) + 0.3 * np.cos(2 * np.pi * lat / 20.0)


def pixel_positions(per_side):
    """Pixel centre longitudes and latitudes (1-D, degrees) of ``per_side`` pixels per cell
    side over the grid."""
    offsets = (np.arange(per_side) + 0.5) / per_side
    lon = (LON0 + np.arange(NX)[:, None] + offsets[None, :]).ravel()
    lat = (LAT0 + np.arange(NY)[:, None] + offsets[None, :]).ravel()
    return lon, lat


def subcell_pattern(lon, lat, amplitude):
    """A cos(2 pi u) cos(2 pi v), (u, v) the position inside the cell (0..1): its mean over m x
    m pixel centres (u = (k + 0.5) / m) is exactly 0 for m >= 2 (a sum of roots of unity);
    rms amplitude / 2."""
    return amplitude * np.cos(2 * np.pi * (lon - LON0))[None, :] \
        * np.cos(2 * np.pi * (lat - LAT0))[:, None]


def write_night(directory, rng, *, field_on=None, field_sigma=0.0, stated_divisor=None,
                clouds=True, subcell_amplitude=0.0, representation_sigma=0.0):
    """The three sensors' files (one granule each) and an ensemble file; returns the paths."""
    directory.mkdir(parents=True, exist_ok=True)
    per_cell_representation = representation_sigma * rng.standard_normal((NY, NX))
    correlated = field_sigma * gaussian_random_field(rng, (NY, NX), 4.0)[0]
    paths = {}
    for name, sigma, per_side in SENSORS:
        lon, lat = pixel_positions(per_side)
        cell_i = np.floor(lon - LON0).astype(int)
        cell_j = np.floor(lat - LAT0).astype(int)
        sst = truth_kelvin(lon[None, :], lat[:, None]) \
            + subcell_pattern(lon, lat, subcell_amplitude) \
            + per_cell_representation[cell_j[:, None], cell_i[None, :]] \
            + sigma * rng.standard_normal((lat.size, lon.size))
        if name == field_on:
            sst = sst + correlated[cell_j[:, None], cell_i[None, :]]
        if clouds:
            clear = rng.uniform(0.15, 1.0, (NY, NX))[cell_j[:, None], cell_i[None, :]]
            sst[rng.uniform(size=sst.shape) > clear] = np.nan
        stated = sigma / (stated_divisor or {}).get(name, 1.0)
        paths[name] = write_gds2(directory / f"{name}.nc", sst, sd=np.full(sst.shape, stated),
                                 lat=lat, lon=lon, reference_seconds=GDS2_REFERENCE_SECONDS)
    # ensemble: truth and members exchangeable about a common mean at the cell centres
    centre_lon = LON0 + np.arange(NX) + 0.5
    centre_lat = LAT0 + np.arange(NY) + 0.5
    errors = BACKGROUND_SIGMA * gaussian_random_field(rng, (NY, NX), BACKGROUND_CELLS,
                                                      count=MEMBERS + 1)
    members = truth_kelvin(centre_lon[None, :], centre_lat[:, None]) - errors[0] + errors[1:]
    ensemble = directory / "ensemble.nc"
    xr.Dataset({"sst": (("member", "lat", "lon"), members,
                        {"standard_name": SKIN, "units": "K"})},
               coords={"lat": centre_lat, "lon": centre_lon}).to_netcdf(ensemble)
    paths["ensemble"] = str(ensemble)
    return paths


def configure(directory, paths, *, correlation=None, representation=0.0):
    correlation = correlation or {}
    return {
        "window": WINDOW,
        "grid": {"type": "regular", "lon_min": LON0, "lat_min": LAT0, "dlon": 1.0, "dlat": 1.0,
                 "nlon": NX, "nlat": NY},
        "sources": [{"sensor": name, "kind": "ghrsst_l2p", "paths": [paths[name]],
                     "correlation": correlation.get(name, 0.0), "error": {"rule": "file"}}
                    for name, _, _ in SENSORS],
        "superobs": {"representation_error": {SKIN: representation},
                     "error_floor": {SKIN: 1e-3}},
        "output": {"directory": str(directory / "out")},
    }


def true_factors(superobs):
    """Per sensor, the factor its assigned errors should be multiplied by, from the truth:
    the rms of (value - truth) / error (numpy), the truth (what the model represents: no
    representation error) taken at the super-observation's mean position (the truth is
    smooth: linear to 0.01 K over a cell)."""
    factors = {}
    for sensor, group in superobs.groupby("sensor"):
        truth = truth_kelvin(group["lon"].to_numpy(), group["lat"].to_numpy()) - 273.15
        residual = group["value"].to_numpy() - truth
        factors[sensor] = float(np.sqrt(np.mean((residual / group["error"].to_numpy()) ** 2)))
    return factors


def built_and_audited(directory, paths, **config):
    """The summaries audited with and without the ensemble, indexed by sensor, and the true
    factors (``true_factors``)."""
    result = build(configure(directory, paths, **config))
    run_dir = result.outputs["netcdf"].parent
    with_model = audit(run_dir, ensemble=[paths["ensemble"]], out=directory / "audit_ensemble",
                       figures=False)
    without = audit(run_dir, out=directory / "audit_collocation", figures=False)
    return {"ensemble": with_model.summary.set_index("sensor"),
            "collocation only": without.summary.set_index("sensor"),
            "true": true_factors(result.superobs)}


def verdicts(summaries, way):
    summary = summaries[way]
    return {sensor: (summary.loc[sensor, "flag"], summary.loc[sensor, "reason"])
            for sensor in summary.index}


def assert_accepted(summaries, way, expected: dict):
    """Every sensor's flag within the accepted set of its right verdict."""
    found = verdicts(summaries, way)
    print(way, {s: f for s, (f, _) in found.items()}, "true factors", summaries["true"])
    for sensor, right in expected.items():
        flag, reason = found[sensor]
        assert flag in ACCEPTED[right], (way, sensor, right, flag, reason)


@pytest.fixture(scope="module")
def correlated_field(tmp_path_factory):
    directory = tmp_path_factory.mktemp("correlated_field")
    paths = write_night(directory, np.random.default_rng(101), field_on="ir_a",
                        field_sigma=0.45)
    return built_and_audited(directory, paths)


@pytest.fixture(scope="module")
def configured_correlation(tmp_path_factory):
    directory = tmp_path_factory.mktemp("configured_correlation")
    paths = write_night(directory, np.random.default_rng(202))
    return built_and_audited(directory, paths, correlation={"ir_c": 0.6})


@pytest.fixture(scope="module", params=[0.0, 0.3], ids=["no_representation", "representation"])
def coarse_grid(tmp_path_factory, request):
    directory = tmp_path_factory.mktemp("coarse")
    paths = write_night(directory, np.random.default_rng(303), clouds=False,
                        subcell_amplitude=1.6, representation_sigma=request.param)
    return built_and_audited(directory, paths, representation=request.param)


@pytest.fixture(scope="module")
def misassigned_by_three(tmp_path_factory):
    directory = tmp_path_factory.mktemp("misassigned")
    paths = write_night(directory, np.random.default_rng(404), stated_divisor={"ir_b": 3.0})
    return built_and_audited(directory, paths)


@pytest.mark.parametrize("way", ["ensemble", "collocation only"])
def test_unstated_correlated_error_field_is_never_called_ok(correlated_field, way):
    """ir_a's true super-observation error is sqrt(0.25 / n + 0.45^2) against its assigned
    0.5 / sqrt(n): about 2.2 times too small for n = 5 (never ok, never too large)."""
    assert_accepted(correlated_field, way, {"ir_a": "too_small", "ir_b": "ok", "ir_c": "ok"})


@pytest.mark.parametrize("way", ["ensemble", "collocation only"])
def test_wrongly_configured_correlation_is_never_called_too_small(configured_correlation, way):
    """ir_c's assigned errors are sqrt(1 + (n - 1) 0.6) times its true ones (independent
    pixel noise): too large, never too small."""
    true = configured_correlation["true"]
    assert true["ir_c"] < 0.55 and all(0.85 < true[s] < 1.15 for s in ("ir_a", "ir_b")), true
    assert_accepted(configured_correlation, way, {"ir_a": "ok", "ir_b": "ok",
                                                  "ir_c": "too_large"})


@pytest.mark.parametrize("way", ["ensemble", "collocation only"])
def test_coarse_grid_with_subcell_variability_flags_no_correct_sensor(coarse_grid, way):
    """Sub-cell variability inflates the spread (0.8 K rms on top of 0.5-0.8 K noise) but
    not the super-observations; a representation error common to all sensors is configured
    as it is, and cancels in the sensors' differences."""
    assert all(0.85 < f < 1.15 for f in coarse_grid["true"].values()), coarse_grid["true"]
    assert_accepted(coarse_grid, way, {"ir_a": "ok", "ir_b": "ok", "ir_c": "ok"})


@pytest.mark.parametrize("way", ["ensemble", "collocation only"])
def test_sensor_misassigned_by_three_is_found(misassigned_by_three, way):
    """ir_b's stated errors are a third of its true ones, 900 cells: a confident too_small,
    and the correct sensors are not flagged."""
    true = misassigned_by_three["true"]
    assert 2.6 < true["ir_b"] < 3.4 and all(0.85 < true[s] < 1.15 for s in ("ir_a", "ir_c")), \
        true
    found = verdicts(misassigned_by_three, way)
    print(way, {s: f for s, (f, _) in found.items()}, "true", misassigned_by_three["true"])
    assert found["ir_b"][0] == "too_small", found["ir_b"]
    for sensor in ("ir_a", "ir_c"):
        assert found[sensor][0] not in FLAGS, (sensor, found[sensor])
