"""The covariance of the two drift components' errors made by the rotation onto the grid axes
is kept and written as their correlation; checked against numpy Monte Carlo of rotated
independent east/north errors (the rotation itself is checked against PROJ in tests/geo)."""

from __future__ import annotations

import numpy as np
import pyproj
import pytest
import xarray as xr
from sample_files import TIME_1950, var, write_nc

from obsprep.geo.grid.projected import ProjectedGrid
from obsprep.run.build import build

LON, LAT = 10.3, -70.2
SIGMA_EAST, SIGMA_NORTH = 300.0, 800.0


def _drift_file(path, n=4):
    return write_nc(path, {"n": n, "nv": 2}, {
        "time": var(("n",), np.full(n, 27000.0), bounds="time_bnds", **TIME_1950),
        "time_bnds": var(("n", "nv"), np.tile([27000.0, 27001.0], (n, 1))),
        "lat": var(("n",), np.full(n, LAT), standard_name="latitude", units="degrees_north"),
        "lon": var(("n",), np.full(n, LON), standard_name="longitude", units="degrees_east"),
        "de": var(("n",), np.linspace(2.0, 4.0, n), standard_name="eastward_sea_ice_displacement",
                  units="km"),
        "dn": var(("n",), np.full(n, -1.0), standard_name="northward_sea_ice_displacement",
                  units="km"),
    })


@pytest.mark.parametrize("mode", ["mean", "weighted"])
def test_component_error_correlation_matches_monte_carlo(tmp_path, mode):
    x, y = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:3031", always_xy=True).transform(LON, LAT)
    grid_cfg = {"type": "projected", "crs": "EPSG:3031", "x_min": x - 50e3, "y_min": y - 50e3,
                "dx": 100e3, "dy": 100e3, "nx": 1, "ny": 1}
    config = {
        "window": {"analysis_time": "2023-12-05T00:00:00", "start_hours": -24.0,
                   "end_hours": 24.0, "slot_hours": 6.0},
        "grid": grid_cfg,
        "sources": [{"sensor": "drift", "kind": "ice_drift", "paths": [_drift_file(tmp_path / "d.nc")],
                     "error": {"rule": "constant",
                               "value": {"sea_ice_drift_east": SIGMA_EAST,
                                         "sea_ice_drift_north": SIGMA_NORTH}}}],
        "superobs": {"mode": mode, "representation_error": {"sea_ice_drift_x": 0.0,
                                                            "sea_ice_drift_y": 0.0},
                     "error_floor": {"sea_ice_drift_x": 1e-3, "sea_ice_drift_y": 1e-3}},
        "output": {"directory": str(tmp_path / "out")},
    }
    result = build(config)
    superobs = result.superobs.set_index("quantity")
    correlation = superobs.loc["sea_ice_drift_x", "error_correlation"]
    assert correlation == superobs.loc["sea_ice_drift_y", "error_correlation"]
    # numpy Monte Carlo: independent east/north errors rotated by the grid
    grid = ProjectedGrid("EPSG:3031", x - 50e3, y - 50e3, 100e3, 100e3, 1, 1)
    rng = np.random.default_rng(2)
    east = SIGMA_EAST * rng.standard_normal(200000)
    north = SIGMA_NORTH * rng.standard_normal(200000)
    zeros = np.zeros(east.size, dtype=np.int64)
    ux, vy = grid.east_north_to_grid(east, north, zeros, zeros)
    expected = np.corrcoef(ux, vy)[0, 1]
    assert abs(expected) > 0.1            # the rotation here is far from 0 or 90 degrees
    assert correlation == pytest.approx(expected, abs=0.01)   # MC standard error ~0.002
    with xr.open_dataset(result.outputs["netcdf"]) as ds:
        np.testing.assert_allclose(ds["sea_ice_drift_x_error_correlation"], correlation)
