"""Where the per-file work runs: the fixed merge tree, local processes, a Dask cluster, and the
bit-for-bit identity of the super-observation file however the run was spread out.

References: the tree is checked against its own definition (consecutive groups of fan_in,
level by level) and against a single flat merge within floating tolerance; builds are checked
against each other bit for bit (the determinism requirement), and their counts against a
numpy count of the raw points that fall in the grid (an independent computation).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st
from sample_files import REGULAR_GRID_TOML, write_alongtrack

from obsprep.cli.main import cli
from obsprep.run import execution
from obsprep.run.build import build
from obsprep.run.execution import FixedTreeReducer, merge_group
from obsprep.run.outcome import EXIT_STATUS
from obsprep.superobs import Accumulator

ANALYSIS = np.datetime64("2026-11-20T00:00:00")
EPOCH_1950 = np.datetime64("1950-01-01T00:00:00")


# ----------------------------------------------------------------------------------------------
# the fixed tree

def partial(seed, n=50):
    """A small invented accumulator (keys in 0..5, values around 20)."""
    rng = np.random.default_rng(seed)
    keys = {"cell": rng.integers(0, 6, n).astype(np.int64)}
    return Accumulator.from_observations(keys, 20.0 + rng.normal(0, 1, n),
                                         rng.uniform(0.1, 1.0, n), rng.uniform(-10, 0, n),
                                         rng.uniform(0, 1, n), rng.uniform(50, 51, n), 0.0)


def level_by_level_tree(items, fan_in):
    """Reference: the fixed tree by its definition, written independently of the package:
    consecutive groups of ``fan_in`` merged with merge_group, level by level, until one is left."""
    level = list(items)
    if not level:
        return None
    while len(level) > 1:
        level = [merge_group(level[start:start + fan_in]) for start in range(0, len(level), fan_in)]
    return merge_group(level)


def reduce_incrementally(items, fan_in=None):
    reducer = FixedTreeReducer(fan_in)
    for item in items:
        reducer.add(item)
    return reducer.result()


def assert_state_identical(a, b):
    assert a.key_names == b.key_names
    for name in a.key_names:
        np.testing.assert_array_equal(a.keys[name], b.keys[name])
    for name, array in a.state.items():
        assert np.array_equal(array, b.state[name], equal_nan=True), name


@settings(max_examples=40, deadline=None)
@given(st.lists(st.one_of(st.none(), st.integers(0, 10_000)), min_size=0, max_size=40),
       st.integers(2, 5))
def test_incremental_tree_equals_level_by_level_tree(seeds, fan_in):
    # Reference: the definition, level_by_level_tree (consecutive groups, level by level);
    # None stands for a file that kept nothing.
    items = [None if s is None else partial(s) for s in seeds]
    expected = level_by_level_tree(items, fan_in)
    got = reduce_incrementally(items, fan_in)
    if expected is None:
        assert got is None
    else:
        assert_state_identical(got, expected)


def test_tree_agrees_with_one_flat_merge():
    items = [partial(s) for s in range(19)]
    tree = reduce_incrementally(items, 4).finalize(correlation=0.3)
    flat = Accumulator.merge(items).finalize(correlation=0.3)
    assert tree["count"].sum() == 19 * 50
    for column in ("count", "value", "spread", "time", "lon", "lat", "error"):
        np.testing.assert_allclose(tree[column], flat[column], rtol=1e-12, atol=1e-12)


def test_merge_group_passes_a_single_accumulator_through_unchanged():
    one = partial(1)
    assert merge_group([None, one, None]) is one
    assert merge_group([None, None]) is None
    assert reduce_incrementally([]) is None


# ----------------------------------------------------------------------------------------------
# builds spread over processes and a cluster

def many_files_scenario(tmp_path, n_files=11, n=300, seed=3):
    """Eleven invented along-track files (two sources), more than one merge-tree node."""
    rng = np.random.default_rng(seed)
    inside = 0
    for k in range(n_files):
        lon = rng.uniform(-11.0, -1.0, n)
        lat = rng.uniform(40.0, 46.0, n)
        times = ANALYSIS - np.timedelta64(72, "h") + rng.integers(0, 72 * 3600, n).astype(
            "timedelta64[s]")
        seconds = (times - EPOCH_1950) / np.timedelta64(1, "s")
        prefix = "a" if k % 2 else "b"
        write_alongtrack(tmp_path / f"{prefix}_{k:02d}.nc", lon, lat, seconds,
                         rng.normal(0.05, 0.03, n))
        inside += int(((lon >= -10.0) & (lon < -2.0) & (lat >= 40.0) & (lat < 46.0)).sum())
    config = tmp_path / "config.toml"
    config.write_text(f"""
[window]
analysis_time = "2026-11-20T00:00:00"
start_hours = -72.0
slot_hours = 12.0
{REGULAR_GRID_TOML}[[sources]]
sensor = "alt_a"
paths = ["a_*.nc"]
kind = "alongtrack"
correlation = 0.2
error = {{ rule = "constant", value = 0.03 }}
[[sources]]
sensor = "alt_b"
paths = ["b_*.nc"]
kind = "alongtrack"
error = {{ rule = "constant", value = 0.04 }}
[superobs]
representation_error = {{ sea_level_anomaly = 0.02 }}
[output]
directory = "out"
""")
    return config, inside


def data_variables(path):
    with xr.open_dataset(path) as ds:
        return {name: ds[name].values for name in ds.data_vars}


def assert_identical_files(a, b):
    va, vb = data_variables(a), data_variables(b)
    assert set(va) == set(vb)
    for name in va:
        equal_nan = va[name].dtype.kind == "f"
        assert va[name].dtype == vb[name].dtype, name
        assert np.array_equal(va[name], vb[name], equal_nan=equal_nan), name


def test_jobs_and_reruns_give_bit_for_bit_identical_files(tmp_path, monkeypatch):
    monkeypatch.setattr(execution, "MERGE_FAN_IN", 3)  # 11 files: a tree of three levels
    config, inside = many_files_scenario(tmp_path)
    one = build(config, out=tmp_path / "jobs1", jobs=1)
    again = build(config, out=tmp_path / "rerun", jobs=1)
    two = build(config, out=tmp_path / "jobs2", jobs=2)
    # Reference for the counts: numpy count of the raw points inside the grid.
    assert int(one.superobs["count"].sum()) == inside
    assert len(one.ledger.entries) == 11
    assert [e.file for e in one.ledger.entries] == [e.file for e in two.ledger.entries]
    assert_identical_files(one.outputs["netcdf"], again.outputs["netcdf"])
    assert_identical_files(one.outputs["netcdf"], two.outputs["netcdf"])


def test_dask_cluster_run_is_bit_for_bit_the_local_run(tmp_path, monkeypatch):
    distributed = pytest.importorskip("distributed")
    monkeypatch.setattr(execution, "MERGE_FAN_IN", 3)
    config, _ = many_files_scenario(tmp_path, n_files=9, n=200, seed=5)
    local = build(config, out=tmp_path / "local", jobs=1)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        on_cluster = build(config, out=tmp_path / "dask", scheduler=client)
        by_address = build(config, out=tmp_path / "dask_address", scheduler=cluster.scheduler_address)
    assert_identical_files(local.outputs["netcdf"], on_cluster.outputs["netcdf"])
    assert_identical_files(local.outputs["netcdf"], by_address.outputs["netcdf"])
    ledger = json.loads(on_cluster.outputs["ledger_json"].read_text())
    assert [e["file"] for e in ledger["entries"]] == [e.file for e in local.ledger.entries]


def test_cli_scheduler_that_cannot_be_reached_is_a_clear_usage_error(tmp_path):
    pytest.importorskip("distributed")
    import dask

    config, _ = many_files_scenario(tmp_path, n_files=2, n=20)
    with dask.config.set({"distributed.comm.timeouts.connect": "1s"}):
        result = CliRunner().invoke(cli, ["build", str(config), "--quiet", "--scheduler",
                                          "tcp://127.0.0.1:9"])  # port 9 (discard): unused
    assert result.exit_code == 2, result.output
    assert "--scheduler" in result.output and "cannot connect" in result.output


def test_identical_files_compares_whole_contents_within_a_source(tmp_path):
    from types import SimpleNamespace

    from obsprep.run.execution import FileTask, identical_files

    rng = np.random.default_rng(9)
    body = rng.bytes(5 << 20)  # 5 MiB: beyond the first-and-last-MiB prefilter
    changed = bytearray(body)
    changed[len(body) // 2] ^= 0xFF  # same size, same head and tail, one byte differs inside
    for name, content in (("a.nc", body), ("b.nc", bytes(changed)), ("c.nc", body),
                          ("d.nc", body)):
        (tmp_path / name).write_bytes(content)
    one, other = SimpleNamespace(index=0), SimpleNamespace(index=1)
    tasks = [FileTask(one, str(tmp_path / "a.nc"), 0), FileTask(one, str(tmp_path / "b.nc"), 1),
             FileTask(one, str(tmp_path / "c.nc"), 2), FileTask(other, str(tmp_path / "d.nc"), 3),
             FileTask(one, str(tmp_path / "missing.nc"), 4)]
    # Reference: byte-for-byte comparison by hand; d.nc belongs to another source (kept)
    assert identical_files(tasks) == {2: str(tmp_path / "a.nc")}


# ----------------------------------------------------------------------------------------------
# a cluster that loses workers, or has none

class KillWorkerOnFile:
    """The per-file work, except that the worker process running file ``index`` is killed with
    SIGKILL (as the kernel's out-of-memory killer does) the first ``kills`` times it is tried;
    the tries are counted in files under ``marker_dir``, shared by the worker processes."""

    def __init__(self, index, kills, marker_dir):
        self.index, self.kills, self.marker_dir = index, kills, str(marker_dir)

    def __call__(self, cfg, grid, source, path, file_index, sensor_names, strict):
        import os
        import signal
        from pathlib import Path

        from obsprep.run.build import process_file

        if file_index == self.index:
            tried = len(list(Path(self.marker_dir).glob("kill-*")))
            if tried < self.kills:
                Path(self.marker_dir, f"kill-{tried}").touch()
                os.kill(os.getpid(), signal.SIGKILL)
        return process_file(cfg, grid, source, path, file_index, sensor_names, strict)


def _process_cluster(distributed, n_workers=1):
    """A local cluster of worker processes, each under a nanny that restarts it when killed."""
    return distributed.LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                                    dashboard_address=None)


def test_worker_killed_in_the_middle_is_retried_and_the_result_is_identical(tmp_path, monkeypatch):
    # with the Dask default distributed.scheduler.allowed-failures = 3 the scheduler runs the
    # task again on the restarted worker; the build's own resubmission, for a task the
    # scheduler gives up, is tested with allowed-failures = 0 in the next test
    distributed = pytest.importorskip("distributed")

    from obsprep.run import build as build_module

    monkeypatch.setattr(execution, "MERGE_FAN_IN", 3)
    config, _ = many_files_scenario(tmp_path, n_files=7, n=200, seed=11)
    local = build(config, out=tmp_path / "local", jobs=1)
    (tmp_path / "markers").mkdir()
    monkeypatch.setattr(build_module, "process_file", KillWorkerOnFile(4, 1, tmp_path / "markers"))
    with _process_cluster(distributed) as cluster, distributed.Client(cluster) as client:
        on_cluster = build(config, out=tmp_path / "dask", scheduler=client)
    assert len(list((tmp_path / "markers").iterdir())) == 1  # the worker was killed once
    assert [e.status for e in on_cluster.ledger.entries] == ["ok"] * 7
    assert_identical_files(local.outputs["netcdf"], on_cluster.outputs["netcdf"])


def test_file_that_kills_every_worker_it_meets_is_listed_not_fatal(tmp_path, monkeypatch):
    distributed = pytest.importorskip("distributed")
    import dask

    from obsprep.run import build as build_module

    config, _ = many_files_scenario(tmp_path, n_files=4, n=100, seed=12)
    local = build(config, out=tmp_path / "local", jobs=1)
    (tmp_path / "markers").mkdir()
    monkeypatch.setattr(build_module, "process_file", KillWorkerOnFile(2, 99, tmp_path / "markers"))
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
            _process_cluster(distributed) as cluster, distributed.Client(cluster) as client:
        on_cluster = build(config, out=tmp_path / "dask", scheduler=client)
    tries = 1 + execution.FILE_RESUBMISSIONS
    assert len(list((tmp_path / "markers").iterdir())) == tries
    lost = on_cluster.ledger.entries[2]
    assert lost.file == local.ledger.entries[2].file and lost.status == "unreadable"
    assert f"lost {tries} time(s)" in lost.message and lost.read == 0
    # a file queued on the same worker when it was killed may be lost with it (the scheduler
    # cannot tell it from the culprit): then it is listed the same way, never silently missing
    for got, expected in zip(on_cluster.ledger.entries, local.ledger.entries, strict=True):
        assert got.file == expected.file
        if got.status == "ok":
            assert (got.read, got.kept, got.rejected) == (expected.read, expected.kept,
                                                          expected.rejected)
        else:
            assert got.status == "unreadable" and "Dask workers" in got.message
    assert int(on_cluster.superobs["count"].sum()) == sum(e.kept for e in on_cluster.ledger.entries)


def test_cluster_without_workers_fails_within_the_bound(tmp_path, monkeypatch):
    distributed = pytest.importorskip("distributed")
    import time

    from obsprep.exceptions import ClusterError

    monkeypatch.setattr(execution, "NO_WORKER_TIMEOUT_SECONDS", 2.0)
    monkeypatch.setattr(execution, "POLL_SECONDS", 0.2)
    config, _ = many_files_scenario(tmp_path, n_files=2, n=20)
    with distributed.LocalCluster(n_workers=0, processes=False, dashboard_address=None) as cluster:
        started = time.monotonic()
        with pytest.raises(ClusterError, match="no worker joined") as err:
            build(config, out=tmp_path / "none", scheduler=cluster.scheduler_address)
        assert time.monotonic() - started < 2.0 + 10.0  # the bound, and slack for a slow machine
        assert "\n" not in str(err.value)
        result = CliRunner().invoke(cli, ["build", str(config), "--quiet", "--out",
                                          str(tmp_path / "cli"), "--scheduler",
                                          cluster.scheduler_address])
    # the distinct status of a cluster without workers (README exit status table)
    assert result.exit_code == EXIT_STATUS["cluster_unavailable"] == 5, result.output
    assert "no worker joined" in result.output and "Traceback" not in result.output
    assert not (tmp_path / "none" / "superobs_20261120.nc").exists()


class PauseOnFile:
    """The per-file work, pausing ``seconds`` on file ``index`` after leaving a marker file."""

    def __init__(self, index, marker_dir, seconds):
        self.index, self.marker_dir, self.seconds = index, str(marker_dir), seconds

    def __call__(self, cfg, grid, source, path, file_index, sensor_names, strict):
        import time
        from pathlib import Path

        from obsprep.run.build import process_file

        if file_index == self.index:
            Path(self.marker_dir, "started").touch()
            time.sleep(self.seconds)
        return process_file(cfg, grid, source, path, file_index, sensor_names, strict)


def test_last_worker_lost_fails_within_the_bound(tmp_path, monkeypatch):
    # the only worker goes away while the build runs (its nanny closed, so nothing restarts
    # it): no worker is left, and the build stops within the bound with one line
    distributed = pytest.importorskip("distributed")
    import threading
    import time

    from obsprep.exceptions import ClusterError
    from obsprep.run import build as build_module

    monkeypatch.setattr(execution, "NO_WORKER_TIMEOUT_SECONDS", 2.0)
    monkeypatch.setattr(execution, "POLL_SECONDS", 0.2)
    config, _ = many_files_scenario(tmp_path, n_files=4, n=20)
    markers = tmp_path / "markers"
    markers.mkdir()
    monkeypatch.setattr(build_module, "process_file", PauseOnFile(1, markers, 1.0))
    with _process_cluster(distributed, n_workers=1) as cluster, \
            distributed.Client(cluster) as client:
        def remove_the_worker():
            deadline = time.monotonic() + 60.0
            while not (markers / "started").exists() and time.monotonic() < deadline:
                time.sleep(0.05)
            cluster.scale(0)

        remover = threading.Thread(target=remove_the_worker)
        remover.start()
        started = time.monotonic()
        try:
            with pytest.raises(ClusterError, match="has had no worker for 2 s") as err:
                build(config, out=tmp_path / "dask", scheduler=client)
        finally:
            remover.join()
        assert time.monotonic() - started < 2.0 + 20.0
    assert "\n" not in str(err.value) and "files done" in str(err.value)


def test_scheduler_lost_in_the_middle_is_a_cluster_error(tmp_path, monkeypatch):
    distributed = pytest.importorskip("distributed")
    import threading
    import time

    from obsprep.exceptions import ClusterError
    from obsprep.run import build as build_module

    monkeypatch.setattr(execution, "POLL_SECONDS", 0.2)
    config, _ = many_files_scenario(tmp_path, n_files=3, n=20)
    markers = tmp_path / "markers"
    markers.mkdir()
    monkeypatch.setattr(build_module, "process_file", PauseOnFile(1, markers, 1.0))
    cluster = distributed.LocalCluster(n_workers=1, processes=False, dashboard_address=None)
    client = distributed.Client(cluster)

    def stop_the_scheduler():
        deadline = time.monotonic() + 60.0
        while not (markers / "started").exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        cluster.sync(cluster.scheduler.close)

    stopper = threading.Thread(target=stop_the_scheduler)
    stopper.start()
    started = time.monotonic()
    try:
        with pytest.raises(ClusterError, match="scheduler") as err:
            build(config, out=tmp_path / "dask", scheduler=client)
        assert time.monotonic() - started < 30.0
    finally:
        stopper.join()
        import contextlib

        with contextlib.suppress(TimeoutError):  # the scheduler is gone: do not wait for it
            client.close(timeout=2)
            cluster.close(timeout=2)
    assert "\n" not in str(err.value) and "files done" in str(err.value)


def test_readme_states_the_no_worker_bound():
    from pathlib import Path

    text = " ".join((Path(__file__).parents[2] / "README.md").read_text().split())
    assert f"none is left, for {execution.NO_WORKER_TIMEOUT_SECONDS:g} s" in text
