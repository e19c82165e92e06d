"""A corpus of bad input in one build: every file gets a clear verdict in the ledger, the run
finishes, the ledger balances; and a build killed while writing leaves the previous output.

References: CF conventions 1.10 for the files (units, calendars, sec. 4.4; from memory); cftime
(the CF calendar implementation) to write times in other calendars; numpy to count by hand
what each file should contribute.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import cftime
import numpy as np
import xarray as xr
from sample_files import write_alongtrack, write_alongtrack_config

from obsprep.run.build import build

ANALYSIS = np.datetime64("2026-11-20T00:00:00")
N = 40  # raw values per good file


def write_track(path, lon, lat, time_values, sla, *, time_units="days since 1950-01-01 00:00:00",
                sla_units="m", **options):
    """A small CF along-track file (CF 1.10 trajectory-like series), times in days."""
    write_alongtrack(path, lon, lat, time_values, sla, units=sla_units, time_units=time_units,
                     platform=None, **options)


def days_since_1950(times):
    return (times - np.datetime64("1950-01-01T00:00:00")) / np.timedelta64(1, "D")


def corpus(tmp_path):
    """Write the corpus; returns (config path, expected verdicts per file name)."""
    rng = np.random.default_rng(11)
    lon = rng.uniform(-9.9, -2.1, N)   # inside the grid (-10..-2 E, 40..46 N)
    lat = rng.uniform(40.1, 45.9, N)
    times = ANALYSIS - np.timedelta64(12, "h") + rng.integers(0, 6 * 3600, N).astype(
        "timedelta64[s]")
    sla = rng.normal(0.05, 0.03, N)
    d = tmp_path / "obs"
    d.mkdir()
    expect = {}

    write_track(d / "good.nc", lon, lat, days_since_1950(times), sla)
    expect["good.nc"] = ("ok", {}, N)

    good = (d / "good.nc").read_bytes()
    (d / "truncated.nc").write_bytes(good[: len(good) // 2])
    expect["truncated.nc"] = ("unreadable", "truncated or corrupt", 0)
    (d / "empty.nc").write_bytes(b"")
    expect["empty.nc"] = ("unreadable", "empty", 0)
    (d / "not_netcdf.nc").write_text("lon,lat,sla\n1,2,3\n")
    expect["not_netcdf.nc"] = ("unreadable", "not a netCDF file", 0)

    write_track(d / "no_sla.nc", lon, lat, days_since_1950(times), sla, with_sla=False)
    expect["no_sla.nc"] = ("unreadable", "sea_surface_height_above_sea_level", 0)

    write_track(d / "nonsense_units.nc", lon, lat, days_since_1950(times), sla,
                sla_units="furlongs per fortnight")
    expect["nonsense_units.nc"] = ("unreadable", "cannot be converted to 'm'", 0)
    write_track(d / "bad_time_units.nc", lon, lat, days_since_1950(times), sla,
                time_units="fortnights since 1950-01-01")
    expect["bad_time_units.nc"] = ("unreadable", "time unit 'fortnights' not understood", 0)

    bad_lat, bad_lon = lat.copy(), lon.copy()
    bad_lat[:5] = np.nan
    bad_lon[5:8] = np.inf
    bad_lon[8:10] = -np.inf
    write_track(d / "nan_inf_positions.nc", bad_lon, bad_lat, days_since_1950(times), sla)
    expect["nan_inf_positions.nc"] = ("ok", {"bad_position": 10}, N - 10)

    # the same positions as good.nc with longitudes in 0..360 (all are west of 0 E here)
    write_track(d / "lon_0_360.nc", lon % 360.0, lat, days_since_1950(times), sla)
    expect["lon_0_360.nc"] = ("ok", {}, N)

    # the same instants in other epochs, units and CF calendars (labels per cftime)
    labels = [t.astype("datetime64[s]").astype(object) for t in times]
    for name, units, calendar in (("epoch_2000_seconds.nc", "seconds since 2000-01-01T00:00:00Z",
                                   "proleptic_gregorian"),
                                  ("noleap_hours.nc", "hours since 1900-01-01", "noleap"),
                                  ("360day_minutes.nc", "minutes since 2026-01-01", "360_day")):
        kind = {"proleptic_gregorian": cftime.DatetimeProlepticGregorian,
                "noleap": cftime.DatetimeNoLeap, "360_day": cftime.Datetime360Day}[calendar]
        numbers = cftime.date2num([kind(x.year, x.month, x.day, x.hour, x.minute, x.second)
                                   for x in labels], units, calendar=calendar)
        write_track(d / name, lon, lat, numbers, sla, time_units=units, calendar=calendar)
        expect[name] = ("ok", {}, N)

    late = times + np.timedelta64(3, "D")  # after the window end
    write_track(d / "outside_window.nc", lon, lat, days_since_1950(late), sla)
    expect["outside_window.nc"] = ("ok", {"outside_window": N}, 0)

    absurd = sla.copy()
    absurd[:4] = [1e6, -1e6, 50.0, 3.5]  # metres; the physical range is -3..3 m
    write_track(d / "absurd_values.nc", lon, lat, days_since_1950(times), absurd)
    expect["absurd_values.nc"] = ("ok", {"out_of_range": 4}, N - 4)

    (d / "redelivered_good.nc").write_bytes(good)  # the same file delivered twice
    expect["redelivered_good.nc"] = ("duplicate_file", "same content as", 0)

    # good.nc twice: by the pattern and by name (the same path is read once)
    config = write_alongtrack_config(tmp_path / "corpus.toml", ["obs/*.nc", "obs/good.nc"],
                                     slot_hours=6.0)
    return config, expect, (lon, lat, times, sla)


def test_bad_input_corpus_gives_a_verdict_per_file_and_a_balanced_ledger(tmp_path):
    config, expect, (lon, lat, times, sla) = corpus(tmp_path)
    result = build(config)  # must not raise
    entries = {Path(e.file).name: e for e in result.ledger.entries}
    assert sorted(entries) == sorted(expect)  # every file once, good.nc not twice
    for name, (status, detail, kept) in expect.items():
        entry = entries[name]
        assert entry.status == status, (name, entry.status, entry.message)
        if isinstance(detail, str):
            assert detail in entry.message, (name, entry.message)
            assert entry.read == entry.kept == 0
        else:
            assert entry.rejected == detail, (name, entry.rejected)
        assert entry.kept == kept, (name, entry.kept)
        assert entry.read == entry.kept + sum(entry.rejected.values())  # the balance
    # the readable good values all reach the super-observations (count conservation)
    assert int(result.superobs["count"].sum()) == sum(e.kept for e in result.ledger.entries)

    # Mixed longitudes and calendars: the same 40 positions and instants land in the same
    # cells and slots.  Reference: numpy floor of the offsets from the grid corner.
    i = np.floor(lon + 10.0).astype(int)
    j = np.floor(lat - 40.0).astype(int)
    slot = ((times - (ANALYSIS - np.timedelta64(24, "h"))) // np.timedelta64(6, "h")).astype(int)
    cells, per_cell = np.unique(np.stack([slot, j, i], axis=1), axis=0, return_counts=True)
    so = result.superobs.sort_values(["slot", "j", "i"])
    np.testing.assert_array_equal(so[["slot", "j", "i"]].to_numpy(), cells)
    same_inputs = ("good.nc", "lon_0_360.nc", "epoch_2000_seconds.nc", "noleap_hours.nc",
                   "360day_minutes.nc")
    partly = expect["nan_inf_positions.nc"][2] + expect["absurd_values.nc"][2]
    assert int(so["count"].sum()) == len(same_inputs) * N + partly
    # every file's unit vectors agree, so each cell's mean position is the mean of one copy
    assert (so["count"].to_numpy() >= len(same_inputs) * per_cell).all()

    with xr.open_dataset(result.outputs["netcdf"]) as ds:
        statuses = {Path(f["file"]).name: f["status"] for f in __import__("json").loads(
            ds.attrs["input_files"])}
    assert statuses["truncated.nc"] == "unreadable" and statuses["good.nc"] == "ok"


DRIVER = """
import sys, time
from pathlib import Path
import obsprep.writers.netcdf as netcdf

original = netcdf.write_netcdf

def write_then_hang(ds, encoding, path):
    original(ds, encoding, path)
    with open(path, "r+b") as fh:      # leave the temporary file half-written
        fh.truncate(Path(path).stat().st_size // 2)
    Path(sys.argv[2]).write_text(str(path))  # tell the test where we are
    time.sleep(120)                    # ... and wait to be killed

netcdf.write_netcdf = write_then_hang
import obsprep.writers.outputs
obsprep.writers.outputs.write_netcdf = write_then_hang
from obsprep.run.build import build
build(sys.argv[1])
"""


def test_sigkill_while_writing_leaves_the_previous_output_intact(tmp_path):
    config, _, _ = corpus(tmp_path)
    first = build(config)
    final = first.outputs["netcdf"]
    # the build's log is live (each run rewrites it); the published outputs must not change
    before = {p.name: p.read_bytes() for p in final.parent.iterdir() if not p.name.endswith("_build.log")}
    marker = tmp_path / "writing"
    driver = tmp_path / "driver.py"
    driver.write_text(DRIVER)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(Path(__file__).resolve().parents[2])] + sys.path))
    child = subprocess.Popen([sys.executable, str(driver), str(config), str(marker)], env=env,
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while not marker.exists():
            assert child.poll() is None, child.communicate()[1].decode()[-2000:]
            assert time.monotonic() < deadline, "the build never reached the writer"
            time.sleep(0.05)
        temporary = Path(marker.read_text())
        assert temporary.exists() and temporary.parent == final.parent
        assert temporary.name != final.name
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
        child.communicate()
    assert child.returncode == -signal.SIGKILL
    # the previous outputs are byte for byte what they were, and still open as netCDF
    for name, content in before.items():
        assert (final.parent / name).read_bytes() == content, name
    with xr.open_dataset(final) as ds:
        assert int(ds["sea_level_anomaly_count"].sum()) == int(first.superobs["count"].sum())
    # nothing half-written under a final name: only the hidden temporary is new
    new = {p.name for p in final.parent.iterdir() if not p.name.endswith("_build.log")} - set(before)
    assert new <= {temporary.name}
    assert all(name.startswith(".") and name.endswith(".partial") for name in new)
