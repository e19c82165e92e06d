"""The demo end to end: every quantity present with grid indices, times, offsets and errors; the
ledger balances.  (super-observation - truth) / error against the known truth, with the demo's
correlated errors: tests/demo/test_demo_error_consistency.py."""

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from click.testing import CliRunner

from obsprep.cli.main import cli
from obsprep.demo import write_demo
from obsprep.run.build import build

QUANTITIES = ["sea_level_anomaly", "sea_surface_temperature", "sea_ice_concentration",
              "sea_ice_drift_x", "sea_ice_drift_y", "sea_water_temperature", "sea_water_salinity"]


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("demo")
    paths = write_demo(root, scale=0.3)
    result = build(paths["config"])
    return paths, result, xr.open_dataset(result.outputs["netcdf"])


def test_all_quantities_with_indices_times_offsets_errors(demo_run):
    _, result, ds = demo_run
    for q in QUANTITIES:
        assert ds.sizes[f"{q}_obs"] > 0, q
        for suffix in ("i", "j", "k", "time", "time_offset", "slot", "error", "lon", "lat", "count"):
            v = ds[f"{q}_{suffix}"].to_numpy()
            assert np.all(np.isfinite(v) if v.dtype.kind == "f" else ~np.isnat(v) if v.dtype.kind == "M" else v >= 0), (q, suffix)
        assert (ds[f"{q}_error"] > 0).all()
        # offsets are the mean time minus the analysis time (hand computation); an interval
        # (drift) is placed at its end by default (superobs.interval_time)
        placed = ds[f"{q}_time_end"] if f"{q}_time_end" in ds else ds[f"{q}_time"]
        offset = (placed.to_numpy() - np.datetime64(ds.attrs["analysis_time"][:-1], "ns")) / np.timedelta64(1, "s")
        np.testing.assert_allclose(ds[f"{q}_time_offset"], offset, atol=1e-3)
        assert (ds[f"{q}_slot"] >= 0).all() and (ds[f"{q}_slot"] < 3).all()
    assert ds.attrs["featureType"] == "point"
    assert len(json.loads(ds.attrs["input_files"])) == len(result.ledger.entries)


def test_ledger_balances_for_every_file(demo_run):
    paths, result, ds = demo_run
    ledger = pd.read_csv(result.outputs["ledger_csv"])
    rejected = ledger[[c for c in ledger if c.startswith("rejected_")]].sum(axis=1)
    assert (ledger["read"] == ledger["kept"] + rejected).all()
    assert (ledger["status"] == "ok").all()
    assert int(ledger["kept"].sum()) == sum(int(ds[f"{q}_count"].sum()) for q in QUANTITIES)
    # the swath's flagged pixels and the altimeter's land points are counted, not lost
    assert ledger.loc[ledger["sensor"] == "sst_swath_ir", "rejected_provider_flag"].sum() > 0
    assert ledger.loc[ledger["sensor"] == "altimeter_a", "rejected_land"].sum() > 0


def test_demo_command_runs(tmp_path):
    res = CliRunner().invoke(cli, ["demo", str(tmp_path / "d"), "--scale", "0.1", "--quiet"])
    assert res.exit_code == 0, res.output
    assert (tmp_path / "d" / "out" / "superobs_20261120.nc").exists()


def test_drift_vectors_are_combined_only_within_one_interval(demo_run):
    _, _, ds = demo_run
    start = ds["sea_ice_drift_x_time"].to_numpy()
    end = ds["sea_ice_drift_x_time_end"].to_numpy()
    # every demo drift vector spans exactly 48 h, and the two products' intervals overlap in
    # space: a super-observation mixing them would have a mean start time between the two
    # starts, so (end - mean start) would differ from 48 h
    np.testing.assert_array_equal((end - start) / np.timedelta64(1, "h"), 48.0)
    cells = pd.DataFrame({"i": ds["sea_ice_drift_x_i"].to_numpy(), "j": ds["sea_ice_drift_x_j"].to_numpy(),
                          "end": end})
    assert (cells.groupby(["i", "j"])["end"].nunique() > 1).any()
