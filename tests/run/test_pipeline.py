"""End to end on small CF files written here: counts and means against an independent pandas
computation, the ledger balance, unreadable files, atomic outputs, the CLI."""

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from click.testing import CliRunner
from sample_files import to_toml, write_alongtrack

from obsprep.cli.main import cli
from obsprep.run.build import build

ANALYSIS = np.datetime64("2026-11-20T00:00:00")


def scenario(tmp_path, rng):
    """Two days of random along-track points over a regular 1-degree grid with one land cell."""
    grid = {"type": "regular", "lon_min": -10.0, "lat_min": 40.0, "dlon": 1.0, "dlat": 1.0,
            "nlon": 8, "nlat": 6, "mask_file": "mask.nc", "layer_interfaces": [0.0, 5000.0]}
    mask = np.ones((6, 8), dtype=np.int8)
    mask[2, 3] = 0  # one land cell: rows j, columns i
    bathy = np.full((6, 8), 3000.0)
    xr.Dataset({"mask": (("y", "x"), mask, {"standard_name": "sea_binary_mask", "units": "1"}),
                "depth": (("y", "x"), bathy, {"standard_name": "sea_floor_depth_below_geoid", "units": "m"})}
               ).to_netcdf(tmp_path / "mask.nc")
    frames = []
    epoch = np.datetime64("1950-01-01T00:00:00")
    for day in ("20261118", "20261119"):
        n = 400
        lon = rng.uniform(-11.0, -1.5, n)   # some points west of the grid
        lat = rng.uniform(40.0, 46.0, n)
        t0 = np.datetime64(f"{day[:4]}-{day[4:6]}-{day[6:]}T00:00:00")
        times = t0 + rng.integers(0, 86400, n).astype("timedelta64[s]")
        sla_cm = np.round(rng.normal(5.0, 3.0, n)).astype(np.int16)
        secs = (times - epoch).astype("timedelta64[s]").astype(float)
        write_alongtrack(tmp_path / f"alt_{day}.nc", lon, lat, secs, sla_cm, units="cm", packed=True)
        frames.append(pd.DataFrame({"lon": lon, "lat": lat, "time": times.astype("datetime64[ns]"),
                                    "value": sla_cm * 0.01, "file": day}))
    (tmp_path / "alt_20261117.nc").write_bytes(b"CDF\x01 truncated")  # an unreadable file
    config = {
        "window": {"analysis_time": "{date}T00:00:00", "date": "2026-11-20", "start_hours": -72.0,
                   "end_hours": 0.0, "slot_hours": 24.0},
        "grid": grid,
        "sources": [{"sensor": "alt_a", "paths": ["alt_{date:%Y%m%d}.nc"], "kind": "alongtrack",
                     "error": {"rule": "constant", "value": 0.03}}],
        "superobs": {"representation_error": {"sea_level_anomaly": 0.02}},
        "output": {"directory": "out", "parquet": True},
    }
    toml = tmp_path / "config.toml"
    toml.write_text(to_toml(config))
    return toml, pd.concat(frames, ignore_index=True)


def expected_with_pandas(raw):
    """Independent computation with pandas groupby (reference implementation)."""
    df = raw.copy()
    df["i"] = np.floor((df["lon"] + 10.0) / 1.0).astype(int)
    df["j"] = np.floor((df["lat"] - 40.0) / 1.0).astype(int)
    start = ANALYSIS - np.timedelta64(72, "h")
    df["slot"] = ((df["time"] - start) / np.timedelta64(24, "h")).astype(int)
    inside = (df["i"] >= 0) & (df["i"] < 8) & (df["j"] >= 0) & (df["j"] < 6)
    land = (df["i"] == 3) & (df["j"] == 2)
    df = df[inside & ~land]
    g = df.groupby(["slot", "j", "i"])["value"]
    return pd.DataFrame({"count": g.size(), "value": g.mean(), "spread": g.std(ddof=1)}).reset_index(), inside, land


def test_build_matches_pandas_and_balances(tmp_path):
    toml, raw = scenario(tmp_path, np.random.default_rng(7))
    result = build(toml)
    so = result.superobs.sort_values(["slot", "j", "i"]).reset_index(drop=True)
    exp, inside, land = expected_with_pandas(raw)
    assert len(so) == len(exp)
    np.testing.assert_array_equal(so[["slot", "j", "i"]].to_numpy(), exp[["slot", "j", "i"]].to_numpy())
    np.testing.assert_array_equal(so["count"], exp["count"])
    np.testing.assert_allclose(so["value"], exp["value"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(so["spread"], exp["spread"], rtol=1e-9, equal_nan=True)
    # equal sigma 0.03, rho 0: instrument error 0.03/sqrt(n); representation 0.02 in quadrature
    np.testing.assert_allclose(so["error"], np.sqrt(0.03**2 / exp["count"] + 0.02**2), rtol=1e-12)

    frame = result.ledger.to_frame()
    ok = frame[frame["status"] == "ok"]
    assert int(ok["read"].sum()) == len(raw)
    assert int(ok["rejected_outside_grid"].sum()) == int((~inside).sum())
    assert int(ok["rejected_land"].sum()) == int((inside & land).sum())
    bad = frame[frame["status"] != "ok"]
    assert list(bad["file"].str.rsplit("/", n=1).str[-1]) == ["alt_20261117.nc"]
    for _, r in frame.iterrows():
        assert r["read"] == r["kept"] + sum(r[c] for c in frame if c.startswith("rejected_"))

    ds = xr.open_dataset(result.outputs["netcdf"])
    assert ds.attrs["featureType"] == "point"
    assert ds["sea_level_anomaly"].attrs["standard_name"] == "sea_surface_height_above_sea_level"
    assert ds["sea_level_anomaly"].attrs["units"] == "m"
    for v in ds.data_vars:
        assert "units" in ds[v].attrs or ds[v].dtype.kind in "OSU" or np.issubdtype(ds[v].dtype, np.datetime64), v
    assert int(ds["sea_level_anomaly_count"].sum()) == int(exp["count"].sum())
    offsets = ds["sea_level_anomaly_time_offset"].to_numpy()
    assert (offsets < 0).all() and (offsets >= -72 * 3600).all()
    inputs = json.loads(ds.attrs["input_files"])
    assert {d["status"] for d in inputs} == {"ok", "unreadable"}
    pq = pd.read_parquet(result.outputs["parquet"])
    assert len(pq) == len(so)


def test_strict_stops_at_unreadable_file(tmp_path):
    toml, _ = scenario(tmp_path, np.random.default_rng(8))
    from obsprep.exceptions import InputFileError

    with pytest.raises(InputFileError, match="alt_20261117.nc"):
        build(toml, strict=True)


def test_cli_build_summary_and_exit_codes(tmp_path):
    toml, _ = scenario(tmp_path, np.random.default_rng(9))
    runner = CliRunner()
    # the scenario holds one unreadable file: outputs written, exit status 3 (files lost,
    # obsprep.run.outcome), and the problem on stderr even with --quiet
    res = runner.invoke(cli, ["build", str(toml), "--quiet", "--out", str(tmp_path / "o")])
    assert res.exit_code == 3, res.output
    assert (tmp_path / "o" / "superobs_20261120.nc").exists()
    assert res.stdout == ""
    assert "unreadable: " in res.stderr and "alt_20261117.nc" in res.stderr
    assert res.stderr.strip().splitlines()[-1].startswith("outcome: FILES LOST (exit status 3)")
    res = runner.invoke(cli, ["build", str(toml), "--out", str(tmp_path / "o2")])
    assert res.exit_code == 3 and "alt_a" in res.stdout and "unreadable" in res.stderr
    assert res.stdout.strip().splitlines()[-1].startswith("outcome: FILES LOST (exit status 3)")
    res = runner.invoke(cli, ["build", str(toml), "--strict", "--quiet"])
    assert res.exit_code == 1 and "alt_20261117.nc" in res.output
    bad = tmp_path / "bad.toml"
    bad.write_text(toml.read_text().replace("slot_hours", "slot_hour"))
    res = runner.invoke(cli, ["build", str(bad)])
    assert res.exit_code == 2 and "window.slot_hour" in res.output and "slot_hours" in res.output
    res = runner.invoke(cli, ["build", str(tmp_path / "missing.toml")])
    assert res.exit_code == 2


def test_cli_read_writes_table(tmp_path):
    toml, raw = scenario(tmp_path, np.random.default_rng(10))
    out = tmp_path / "t.csv"
    res = CliRunner().invoke(cli, ["read", str(tmp_path / "alt_20261118.nc"), "-o", str(out)])
    assert res.exit_code == 0, res.output
    table = pd.read_csv(out)
    assert len(table) == int((raw["file"] == "20261118").sum())
    np.testing.assert_allclose(table["value"], raw.loc[raw["file"] == "20261118", "value"], atol=1e-9)


def test_thinning_keeps_the_raw_value_nearest_the_cell_centre(tmp_path):
    import pyproj

    toml, raw = scenario(tmp_path, np.random.default_rng(11))
    toml.write_text(toml.read_text().replace("[superobs]", '[superobs]\nmode = "thin"'))
    so = build(toml).superobs
    exp, inside, land = expected_with_pandas(raw)
    df = raw.copy()
    df["i"] = np.floor(df["lon"] + 10.0).astype(int)
    df["j"] = np.floor(df["lat"] - 40.0).astype(int)
    df["slot"] = ((df["time"] - (ANALYSIS - np.timedelta64(72, "h"))) / np.timedelta64(24, "h")).astype(int)
    df = df[inside & ~land]
    # distance to the cell centre with pyproj.Geod (GeographicLib, [Karney2013]) as the reference;
    # the ranking is the same on the sphere for these separations
    _, _, df["dist"] = pyproj.Geod(ellps="WGS84").inv(df["lon"], df["lat"], -10.0 + df["i"] + 0.5, 40.0 + df["j"] + 0.5)
    nearest = df.sort_values("dist").groupby(["slot", "j", "i"]).first().reset_index()
    merged = so.merge(nearest, on=["slot", "j", "i"], suffixes=("", "_ref"))
    assert len(merged) == len(exp) == len(so)
    np.testing.assert_allclose(merged["value"], merged["value_ref"], atol=1e-12)
    np.testing.assert_allclose(merged["lon"], merged["lon_ref"], atol=1e-9)
    np.testing.assert_array_equal(so.sort_values(["slot", "j", "i"])["count"], exp["count"])
    # a thinned value keeps its raw error (0.03) plus the representation error (0.02)
    np.testing.assert_allclose(so["error"], np.hypot(0.03, 0.02), rtol=1e-12)


def test_outputs_have_ordinary_file_permissions(tmp_path):
    import os
    import stat

    from obsprep.writers import atomic_path

    target = tmp_path / "x.txt"
    with atomic_path(target) as tmp:
        tmp.write_text("done")
    umask = os.umask(0)
    os.umask(umask)
    # POSIX: a new file gets 0666 & ~umask (open(2)); the temporary name is gone
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~umask
    assert [p.name for p in tmp_path.iterdir()] == ["x.txt"]
