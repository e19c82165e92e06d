"""The ready configurations in examples/, each built on the demo data."""

import shutil
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from superobs_z import z_statistics

from obsprep.demo import write_demo
from obsprep.demo.truth import truth_value
from obsprep.geo.grid import grid_from_config
from obsprep.run.build import build
from obsprep.settings.config import load_config

EXAMPLES = Path(__file__).parents[2] / "examples"


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    root = tmp_path_factory.mktemp("examples")
    write_demo(root, scale=0.1)
    return root


def test_demo_example_is_the_config_the_demo_writes(demo_dir):
    assert (EXAMPLES / "demo.toml").read_text() == (demo_dir / "weddell_spring.toml").read_text()


def _truth(ds, q, grid):
    """Truth at the super-observations; drift along the grid axes rotated with the grid's own
    angle (the east/north truth is independent of the pipeline's rotation)."""
    lon, lat = ds[f"{q}_lon"].to_numpy(), ds[f"{q}_lat"].to_numpy()
    depth, time = ds[f"{q}_depth"].to_numpy(), ds[f"{q}_time"].to_numpy()
    if q in ("sea_ice_drift_x", "sea_ice_drift_y"):
        end = ds[f"{q}_time_end"].to_numpy()
        u = truth_value("sea_ice_drift_east", lon, lat, depth, time, end)
        v = truth_value("sea_ice_drift_north", lon, lat, depth, time, end)
        a = grid.axis_angle(ds[f"{q}_i"].to_numpy(), ds[f"{q}_j"].to_numpy())
        # rotation by the axis angle a (counterclockwise from east), hand-written
        return u * np.cos(a) + v * np.sin(a) if q.endswith("_x") else -u * np.sin(a) + v * np.cos(a)
    return truth_value(q, lon, lat, depth, time)


@pytest.mark.parametrize("name", ["regular_grid.toml", "curvilinear_grid.toml"])
def test_example_builds_and_is_consistent_with_truth(demo_dir, name):
    shutil.copy(EXAMPLES / name, demo_dir / name)
    result = build(demo_dir / name)
    cfg = load_config(demo_dir / name)
    grid = grid_from_config(cfg.grid, cfg.base_dir)
    ds = xr.open_dataset(result.outputs["netcdf"])
    ledger = result.ledger.to_frame()
    assert (ledger["status"] == "ok").all()
    assert int(ledger["kept"].sum()) == int(result.superobs["count"].sum())
    quantities = sorted(set(result.superobs["quantity"]))
    assert len(quantities) == 7
    for q in quantities:
        i, j = ds[f"{q}_i"].to_numpy(), ds[f"{q}_j"].to_numpy()
        assert ((i >= 0) & (i < grid.nx) & (j >= 0) & (j < grid.ny)).all()
        assert grid.sea_mask[j, i].all()
        # each super-observation's mean position lies in its own cell or on its edge: demo points
        # sit exactly on some edges (e.g. 0.1-degree product centres on 0.25-degree edges), so
        # the position is also tried 1e-7 degree away in each direction (rounding of the mean)
        lon, lat = ds[f"{q}_lon"].to_numpy(), ds[f"{q}_lat"].to_numpy()
        inside = np.zeros(len(lon), dtype=bool)
        for dlon in (-1e-7, 0.0, 1e-7):
            for dlat in (-1e-7, 0.0, 1e-7):
                li, lj = grid.locate(lon + dlon, lat + dlat)
                inside |= (li == i) & (lj == j)
        assert inside.all(), (name, q, np.flatnonzero(~inside)[:5])
        # z ~ N(0, 1) if errors are right: 5 standard errors of the mean and of the std, from
        # the demo's error groups (cluster-robust, tests/demo/superobs_z.py)
        s = z_statistics(ds, q, 5.0, truth=_truth(ds, q, grid))
        assert abs(s["mean"]) < s["mean_tolerance"], (name, q, s)
        assert abs(s["std"] - 1) < s["std_tolerance"], (name, q, s)
    if name == "regular_grid.toml":
        assert set(ds["sea_level_anomaly_sensor"].to_numpy()) == {"altimetry"}
        assert ds.attrs["superobs_mode"] == "weighted"
