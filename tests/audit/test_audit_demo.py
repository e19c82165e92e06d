"""The audit on the demo: with the configuration the demo writes, no sensor is flagged; with
one sensor given half its true noise (``--misassign``), exactly that sensor is flagged, with a
suggested factor near 2.

The demo's truth, sensor noise and ensemble are known (obsprep.demo; the ensemble mean error is
drawn from the ensemble's own distribution), so the right answer is known: factor 1 for every
sensor, 2 for the mis-assigned one.  Tolerances are the estimates' own standard errors (5 of
them, so a correct audit fails with probability below 1e-6 per check)."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from obsprep.audit import audit, load_run
from obsprep.cli.main import cli
from obsprep.demo import write_demo
from obsprep.run.build import build

SCALE = 0.05
MISASSIGNED = "altimeter_b"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"      # PNG specification (ISO/IEC 15948), file signature


@pytest.fixture(scope="module")
def correct(tmp_path_factory):
    paths = write_demo(tmp_path_factory.mktemp("audit_ok"), scale=SCALE)
    result = build(paths["config"])
    report = audit(result.outputs["netcdf"].parent, ensemble=[paths["ensemble"]])
    return paths, report


@pytest.fixture(scope="module")
def misassigned(tmp_path_factory):
    directory = tmp_path_factory.mktemp("audit_wrong") / "demo"
    runner = CliRunner()
    res = runner.invoke(cli, ["demo", str(directory), "--scale", str(SCALE),
                              "--misassign", MISASSIGNED])
    assert res.exit_code == 0, res.output
    command = re.search(r"obsprep audit (\S+) --ensemble (\S+)", res.output)
    assert command, res.output                       # the demo prints the audit command
    audited = runner.invoke(cli, ["audit", command.group(1), "--ensemble", command.group(2),
                                  "--no-figures"])
    assert audited.exit_code == 0, audited.output
    return directory, audited.output


def test_correct_demo_flags_no_sensor(correct):
    _, report = correct
    summary = report.summary
    assert report.flagged.empty, report.flagged[["sensor", "quantity", "reason"]]
    # drift (no model counterpart, one sensor) and the profiles (no 3-D ensemble, one sensor)
    # have no evidence on the super-observation error; every other sensor is judged ok
    unjudged = summary[summary["flag"] == "no_evidence"]
    assert set(unjudged["sensor"]) == {"ice_drift", "ts_profiles"}
    judged = summary[summary["flag"] != "no_evidence"]
    # correct errors are ok, or inconclusive where the evidence is thin (the IR swath at this
    # small demo scale), never flagged; the well-sampled sensors are ok
    assert judged["flag"].isin(["ok", "inconclusive"]).all(), judged[["sensor", "flag", "reason"]]
    ok = set(judged.loc[judged["flag"] == "ok", "sensor"])
    assert {"altimeter_a", "altimeter_b", "altimeter_c", "sst_microwave", "sst_grid",
            "ice_concentration"} <= ok, judged[["sensor", "flag", "reason"]]
    # the right factor, 1, lies inside every 95 % interval (11 intervals: a correct audit
    # misses one with probability about 0.4; the block standard errors make them honest)
    assert ((judged["factor_low"] <= 1.0) & (judged["factor_high"] >= 1.0)).sum() >= len(judged) - 1


def test_misassigned_sensor_is_flagged_with_a_factor_near_2(misassigned):
    directory, output = misassigned
    summary = pd.read_csv(directory / "out" / "audit" / "summary.csv")
    flagged = summary[summary["flag"].isin(["too_small", "too_large"])]
    assert list(flagged["sensor"]) == [MISASSIGNED]
    row = flagged.iloc[0]
    assert row["flag"] == "too_small"
    # half the true raw noise: the instrument part of the error is halved, the sampling part
    # is not, so the true F lies between 1 and 2.  It is known from the demo's truth: the rms of
    # z = (super-observation - truth) / error over the sensor, with its standard error over the
    # passes (tests/demo/superobs_z.py); the audit's F agrees within 3 combined standard errors
    import xarray as xr
    from demo.superobs_z import cluster_standard_error, error_groups, z_values

    quantity = "sea_level_anomaly"
    with xr.open_dataset(next((directory / "out").glob("superobs_*.nc"))) as ds:
        mine = ds[f"{quantity}_sensor"].to_numpy().astype(str) == MISASSIGNED
        z = z_values(ds, quantity)[mine]
        groups = error_groups(ds, quantity)[mine]
    true_factor = float(np.sqrt(np.mean(z * z)))
    true_se = cluster_standard_error(z * z, groups)[0] / (2.0 * true_factor)
    assert 1.2 < true_factor < 2.0
    audit_se = (row["factor_high"] - row["factor_low"]) / (2.0 * 1.96)
    assert abs(row["factor"] - true_factor) < 3.0 * np.hypot(audit_se, true_se), (row["factor"], true_factor)
    assert f"FLAG {MISASSIGNED} (sea_level_anomaly): errors look too small" in output
    text = (directory / "out" / "audit" / "summary.md").read_text()
    assert f"**{MISASSIGNED}**" in text and f"{row['factor']:.3g}" in text


def test_report_files_and_figures(correct):
    paths, report = correct
    folder = report.outputs["summary.md"].parent
    for name in ("summary.csv", "summary.md", "collocation.csv", "triple_collocation.csv",
                 "innovations.csv"):
        assert (folder / name).stat().st_size > 0, name
    for name in ("counts_map.png", "innovation_map.png", "normalised_innovations.png",
                 "spread_vs_error.png"):
        assert (folder / name).read_bytes()[:8] == PNG_SIGNATURE, name
    # three SST sensors overlap in the demo: triple collocation has a row for each
    assert set(report.triple["sensor"]) == {"sst_grid", "sst_microwave", "sst_swath_ir"}
    # the ledger counts are carried into the summary (read = kept + rejected)
    s = report.summary.drop_duplicates("sensor")
    rejected = s[[c for c in s if c.startswith("rejected_")]].fillna(0).sum(axis=1)
    assert (s["read"] == s["kept"] + rejected).all()


def test_output_carries_every_error_part(correct):
    paths, report = correct
    run = load_run(report.run.directory)
    so = run.superobs
    for column in ("error_spread", "error_raw_rms", "error_basis"):
        assert np.isfinite(so[column].astype(float)).any(), column
    # the raw error rules of the demo config, per sensor (constant or file, factor 1)
    origins = so.groupby("sensor")["error_origin"].unique().to_dict()
    assert list(origins["sst_swath_ir"]) == ["file"] and list(origins["altimeter_a"]) == ["constant"]


def test_raw_noise_check_is_one_sided(correct, misassigned):
    """The spread inside cells holds the uncorrelated raw noise plus the sub-cell variability of
    the demo's truth: for correct sensors the check never says "overstated"; with the raw noise
    of one sensor given as half the truth, its ratio doubles (same raw values, half the noise)."""
    _, report = correct
    checked = report.summary[report.summary["noise_check"] != "not_enough_values"]
    assert len(checked) >= 4
    assert not (checked["noise_check"] == "overstated").any(), checked
    assert (checked["noise_ratio_high"] >= 1.0).all(), checked[["sensor", "noise_ratio_high"]]
    directory, _ = misassigned
    wrong = pd.read_csv(directory / "out" / "audit" / "summary.csv").set_index(["sensor", "quantity"])
    right = report.summary.set_index(["sensor", "quantity"])
    key = (MISASSIGNED, "sea_level_anomaly")
    assert wrong.loc[key, "noise_ratio"] == pytest.approx(2.0 * right.loc[key, "noise_ratio"], rel=0.05)
    assert wrong.loc[key, "noise_check"] == "spread_exceeds_noise"


def test_audit_errors_are_clear(tmp_path):
    res = CliRunner().invoke(cli, ["audit", str(tmp_path)])
    assert res.exit_code == 1 and "no super-observation file" in res.output
    res = CliRunner().invoke(cli, ["demo", str(tmp_path / "d"), "--misassign", "nope"])
    assert res.exit_code == 2 and "key 'misassign'" in res.output


def test_demo_random_fields_have_unit_variance():
    from obsprep.demo.ensemble import unit_random_field

    rng = np.random.default_rng(4)
    # four points 32 cells apart (10 correlation lengths, periodic edges) of 2000 fields:
    # 8000 practically independent draws, whose variance has standard error sqrt(2/8000)
    samples = np.concatenate([unit_random_field(rng, (64, 64))[[0, 0, 32, 32], [0, 32, 0, 32]]
                              for _ in range(2000)])
    assert abs(samples.var() - 1.0) < 5.0 * np.sqrt(2.0 / samples.size)


def test_demo_ensemble_mean_error_matches_its_spread(correct):
    import xarray as xr

    from obsprep.demo.scenario import model_grid_lonlat
    from obsprep.demo.truth import truth_value

    paths, _ = correct
    lon, lat = model_grid_lonlat()
    with xr.open_dataset(paths["ensemble"]) as ds:
        assert ds.sizes["member"] == 20 and ds.sizes["time"] == 3
        for name in ("sea_level_anomaly", "sea_surface_temperature"):
            for t, when in enumerate(ds["time"].values):
                members = ds[name].isel(time=t).values
                error = members.mean(axis=0) - truth_value(name, lon, lat, 0.0, when)
                spread = members.var(axis=0, ddof=1)
                sea = np.isfinite(error)
                # E[(mean - truth)^2] = (1 + 1/N) E[ensemble variance] by construction (the
                # truth is statistically one more member); about 500 independent 30 km
                # patches per field: 5 standard errors of sqrt(2/500)
                ratio = np.mean(error[sea] ** 2) / np.mean(spread[sea]) / (1.0 + 1.0 / 20)
                assert abs(ratio - 1.0) < 5.0 * np.sqrt(2.0 / 500), (name, t, ratio)
