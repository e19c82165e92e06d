"""A corpus of bad input in one build: every file gets a clear verdict in the ledger, the run
finishes, the ledger balances; a build killed at any moment of writing leaves the previous
output set or no published set, never a mixed one; two builds of the same outputs at once: the
second is refused and the first's set is intact.

References: CF conventions 1.10 for the files (units, calendars, sec. 4.4; from memory); cftime
(the CF calendar implementation) to write times in other calendars; numpy to count by hand
what each file should contribute; the set checker of tests/output_set_check.py (hashlib,
netCDF4, pyarrow) for what a published set is; POSIX signals (SIGKILL cannot be caught, so
nothing of the killed build runs after it; from memory).
"""

from __future__ import annotations

import contextlib
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import cftime
import numpy as np
import pytest
import xarray as xr
from output_set_check import file_run_id, published_run_id, set_files
from sample_files import write_alongtrack, write_alongtrack_config

from obsprep.audit.rundir import load_run
from obsprep.exceptions import OutputSetError
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
    # the previous set is byte for byte what it was, still published, and opens as netCDF
    stem = final.stem
    for name in set_files(stem, parquet=False):
        assert (final.parent / name).read_bytes() == before[name], name
    assert published_run_id(final.parent, stem) == file_run_id(final)
    with xr.open_dataset(final) as ds:
        assert int(ds["sea_level_anomaly_count"].sum()) == int(first.superobs["count"].sum())
    # nothing half-written under a final name: only the hidden temporary is new, and the lock
    # file of the killed build (its lock died with it)
    new = {p.name for p in final.parent.iterdir() if not p.name.endswith("_build.log")} - set(before)
    assert new <= {temporary.name, f".{stem}.lock"}
    assert temporary.name in new and temporary.name.endswith(".partial")


# ----------------------------------------------------------------------------------------------
# kills during publishing and concurrent builds: one consistent output set
# ----------------------------------------------------------------------------------------------

STEM = "superobs_20261120"

#: a build that SIGKILLs itself at the Nth step of publishing, "before" or "after" doing it.  A
#: step is a rename onto, or a removal of, a visible (not hidden) name in the output directory;
#: each step is appended to a trace file first.
KILL_DRIVER = """
import os, signal, sys
from pathlib import Path

config, out_dir, step, when, trace = sys.argv[1], Path(sys.argv[2]).resolve(), int(sys.argv[3]), \\
    sys.argv[4], Path(sys.argv[5])
real_replace, real_unlink = os.replace, os.unlink
steps = []

def publish_step(kind, target, action):
    target = Path(target)
    if target.parent.resolve() != out_dir or target.name.startswith("."):
        return action()
    steps.append(f"{kind} {target.name}")
    trace.write_text("\\n".join(steps))
    if len(steps) == step and when == "before":
        os.kill(os.getpid(), signal.SIGKILL)
    result = action()
    if len(steps) == step and when == "after":
        os.kill(os.getpid(), signal.SIGKILL)
    return result

def replace(src, dst, *args, **kwargs):
    return publish_step("rename", dst, lambda: real_replace(src, dst, *args, **kwargs))

def unlink(path, *args, **kwargs):
    return publish_step("remove", path, lambda: real_unlink(path, *args, **kwargs))

os.replace, os.unlink = replace, unlink
from obsprep.run.build import build
build(config)
"""

#: a build that stops at its first step of publishing (its temporaries written), says so in a
#: marker file and waits for a go file before going on
HOLD_DRIVER = """
import os, sys, time
from pathlib import Path

config, out_dir, marker, go = sys.argv[1], Path(sys.argv[2]).resolve(), Path(sys.argv[3]), \\
    Path(sys.argv[4])
real_replace = os.replace

def replace(src, dst, *args, **kwargs):
    if Path(dst).parent.resolve() == out_dir and not marker.exists():
        marker.write_text(str(os.getpid()))
        deadline = time.monotonic() + 120
        while not go.exists() and time.monotonic() < deadline:
            time.sleep(0.02)
    return real_replace(src, dst, *args, **kwargs)

os.replace = replace
from obsprep.run.build import build
build(config)
"""


def small_night(tmp_path) -> Path:
    """Two good along-track files; the configuration writes the Parquet copy too."""
    rng = np.random.default_rng(3)
    (tmp_path / "obs").mkdir(exist_ok=True)
    for name in ("a.nc", "b.nc"):
        times = ANALYSIS - np.timedelta64(12, "h") + rng.integers(0, 6 * 3600, N).astype("timedelta64[s]")
        write_track(tmp_path / "obs" / name, rng.uniform(-9.9, -2.1, N), rng.uniform(40.1, 45.9, N),
                    days_since_1950(times), rng.normal(0.05, 0.03, N))
    config = write_alongtrack_config(tmp_path / "night.toml", ["obs/*.nc"])
    text = config.read_text().replace("[window]\n", '[window]\ndate = "2026-11-20"\n', 1)
    config.write_text(text + "parquet = true\n")
    return config


def _child_env():
    return dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(Path(__file__).resolve().parents[2])] + sys.path))


def _run_driver(tmp_path, source, *args, timeout=120):
    driver = tmp_path / "driver.py"
    driver.write_text(source)
    return subprocess.run([sys.executable, str(driver), *map(str, args)], env=_child_env(),
                          capture_output=True, timeout=timeout)


# the publishing steps of a night with a previous set, in order (the trace checks them)
PUBLISH_STEPS = [f"remove {STEM}_manifest.json", f"rename {STEM}.nc", f"rename {STEM}.parquet",
                 f"rename {STEM}_ledger.csv", f"rename {STEM}_ledger.json",
                 f"rename {STEM}_manifest.json"]


@pytest.mark.parametrize("step, when", [
    (1, "before"),  # before the previous manifest is removed
    (2, "before"),  # manifest removed, no file renamed yet
    (3, "before"),  # between the renames of the netCDF file and the Parquet copy
    (5, "before"),  # between the renames of the two ledgers
    (6, "before"),  # every file renamed, the manifest not yet
    (6, "after"),   # just after the manifest
])
def test_sigkill_while_publishing_never_leaves_a_mixed_published_set(tmp_path, step, when):
    config = small_night(tmp_path)
    out = tmp_path / "out"
    build(config)
    previous = published_run_id(out, STEM)
    before = {name: (out / name).read_bytes() for name in set_files(STEM)}
    trace = tmp_path / "trace"
    child = _run_driver(tmp_path, KILL_DRIVER, config, out, step, when, trace)
    assert child.returncode == -signal.SIGKILL, child.stderr.decode()[-2000:]
    steps = trace.read_text().splitlines()
    assert steps == PUBLISH_STEPS[:step]  # the kill came where it was meant to

    published = published_run_id(out, STEM)  # fails on a manifest naming a mixed set
    if step == 1:
        assert published == previous  # the previous set, untouched
        assert {name: (out / name).read_bytes() for name in set_files(STEM)} == before
    elif when == "before":
        assert published is None  # no published set: the audit refuses the directory
        with pytest.raises(OutputSetError, match="no manifest"):
            load_run(out)
        carried = {file_run_id(out / name) for name in (f"{STEM}.nc", f"{STEM}_ledger.json")}
        if step in (3, 5):  # a mixed directory, and visibly so by the run ids the files carry
            assert len(carried) == 2 and previous in carried
    else:
        assert published is not None and published != previous  # the new set, complete
        assert len(load_run(out).superobs) > 0

    # the next night's build cleans up and publishes a complete set
    leftovers = [p.name for p in out.iterdir() if p.name.endswith(".partial")]
    assert bool(leftovers) == (when == "before")  # the killed run's temporaries
    again = build(config)
    assert sorted(p.name for p in out.iterdir() if not p.name.endswith("_build.log")) == sorted(set_files(STEM))
    assert published_run_id(out, STEM) == file_run_id(again.outputs["netcdf"])
    assert len(load_run(out).superobs) == len(again.superobs)


def test_two_builds_of_one_output_set_the_second_is_refused_and_the_first_completes(tmp_path):
    config = small_night(tmp_path)
    out = tmp_path / "out"
    build(config)  # a previous night's set: the first build's temporaries sit beside it
    marker, go = tmp_path / "publishing", tmp_path / "go"
    driver = tmp_path / "hold.py"
    driver.write_text(HOLD_DRIVER)
    first = subprocess.Popen([sys.executable, str(driver), str(config), str(out), str(marker),
                              str(go)], env=_child_env(), stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while not marker.exists():
            assert first.poll() is None, first.communicate()[1].decode()[-2000:]
            assert time.monotonic() < deadline, "the first build never reached publishing"
            time.sleep(0.05)
        temporaries = sorted(p.name for p in out.iterdir() if p.name.endswith(".partial"))
        assert len(temporaries) == 5  # four files and the manifest, written in full
        second = subprocess.run([sys.executable, "-m", "obsprep", "build", str(config), "-q"],
                                env=_child_env(), capture_output=True, timeout=120, text=True)
        assert second.returncode != 0
        refusal = [line for line in second.stderr.splitlines() if "another build" in line]
        assert len(refusal) == 1, second.stderr
        assert f"pid {first.pid}" in refusal[0] and socket.gethostname() in refusal[0]
        assert "since" in refusal[0]
        assert "Traceback" not in second.stderr
        # the refused build touched nothing of the first's
        assert sorted(p.name for p in out.iterdir() if p.name.endswith(".partial")) == temporaries
        go.write_text("go")
        _, stderr = first.communicate(timeout=120)
    finally:
        if first.poll() is None:
            first.kill()
            first.communicate()
    assert first.returncode == 0, stderr.decode()[-2000:]
    assert sorted(p.name for p in out.iterdir() if not p.name.endswith("_build.log")) == sorted(set_files(STEM))
    published = published_run_id(out, STEM)
    assert published is not None and len(load_run(out).superobs) > 0


#: a build with two worker processes that get stuck reading; each worker writes its pid
ORPHAN_DRIVER = """
import os, sys, time
from pathlib import Path
import obsprep.run.build as build_module

config, markers = sys.argv[1], Path(sys.argv[2])

def stuck(*args, **kwargs):
    (markers / str(os.getpid())).write_text("reading")
    time.sleep(300)

build_module.process_file = stuck
build_module.build(config, jobs=2)
"""


def test_workers_orphaned_by_a_killed_build_do_not_keep_its_lock(tmp_path):
    """Forked workers inherit the lock's descriptor, and flock(2) keeps a lock while any copy is
    open; the workers of a killed build must not block the next night."""
    config = small_night(tmp_path)
    markers = tmp_path / "workers"
    markers.mkdir()
    driver = tmp_path / "orphans.py"
    driver.write_text(ORPHAN_DRIVER)
    log = tmp_path / "orphans.log"  # a file, not a pipe: the orphans would hold a pipe open
    with open(log, "wb") as output:
        child = subprocess.Popen([sys.executable, str(driver), str(config), str(markers)],
                                 env=_child_env(), stdout=output, stderr=subprocess.STDOUT)
    workers = []
    try:
        deadline = time.monotonic() + 60
        while len(list(markers.iterdir())) < 2:
            assert child.poll() is None, log.read_text()[-2000:]
            assert time.monotonic() < deadline, "the workers never started"
            time.sleep(0.05)
        workers = [int(p.name) for p in markers.iterdir()]
        assert child.pid not in workers
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
        for pid in workers:
            os.kill(pid, 0)  # still alive: orphaned, stuck in their file
        result = build(config)  # not refused by a lock of the dead build
        assert published_run_id(tmp_path / "out", STEM) == file_run_id(result.outputs["netcdf"])
    finally:
        if child.poll() is None:
            child.kill()
            child.wait(timeout=30)
        for pid in workers:
            with contextlib.suppress(ProcessLookupError):
                os.kill(pid, signal.SIGKILL)
