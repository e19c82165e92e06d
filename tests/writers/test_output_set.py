"""The output set of a build: published by a manifest written last, locked while written,
stale temporaries removed, the output directory checked before any input is read, and nothing
non-finite written.

References: SHA-256 test vector "abc" from FIPS 180-4 (NIST, example in its companion
document "SHA256.pdf"; from memory) and hashlib; IEEE 754 for what is finite (numpy.isfinite);
POSIX ``flock``/``rename`` semantics as documented in the Linux man pages flock(2) and
rename(2) (from memory); the independent set checker in ``tests/output_set_check.py``.
"""

from __future__ import annotations

import json
import os
import socket
from pathlib import Path

import numpy as np
import pytest
from output_set_check import file_run_id, published_run_id, set_files
from sample_files import write_alongtrack, write_alongtrack_config

import obsprep.run.build as build_module
from obsprep.audit.rundir import load_run
from obsprep.exceptions import InputFileError, NonFiniteOutputError, OutputError, OutputLockedError, OutputSetError
from obsprep.geo.grid import grid_from_config
from obsprep.run.build import build
from obsprep.settings.config import load_config
from obsprep.writers import OutputSet
from obsprep.writers.manifest import sha256_of

STEM = "superobs_20261120"


def scenario(tmp_path, parquet=True, n=30) -> Path:
    """Two small along-track files inside the grid and window of write_alongtrack_config."""
    rng = np.random.default_rng(7)
    (tmp_path / "obs").mkdir(exist_ok=True)
    for name in ("a.nc", "b.nc"):
        times = np.datetime64("2026-11-19T12:00:00") + rng.integers(0, 3600, n).astype("timedelta64[s]")
        days = (times - np.datetime64("1950-01-01T00:00:00")) / np.timedelta64(1, "D")
        write_alongtrack(tmp_path / "obs" / name, rng.uniform(-9, -3, n), rng.uniform(41, 45, n),
                         days, rng.normal(0.0, 0.05, n), units="m",
                         time_units="days since 1950-01-01 00:00:00", platform=None)
    config = write_alongtrack_config(tmp_path / "config.toml", ["obs/*.nc"])
    text = config.read_text().replace("[window]\n", '[window]\ndate = "2026-11-20"\n', 1)
    config.write_text(text + ("parquet = true\n" if parquet else ""))
    return config


def test_sha256_of_matches_the_published_test_vector(tmp_path):
    # FIPS 180-4 example: SHA-256("abc") (from memory), and hashlib on a larger file
    (tmp_path / "abc").write_bytes(b"abc")
    assert sha256_of(tmp_path / "abc") == \
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    import hashlib

    blob = np.random.default_rng(1).bytes(9 << 20)  # more than one read chunk
    (tmp_path / "big").write_bytes(blob)
    assert sha256_of(tmp_path / "big") == hashlib.sha256(blob).hexdigest()


def test_a_build_publishes_one_set_with_a_manifest_naming_every_file(tmp_path):
    result = build(scenario(tmp_path))
    out = tmp_path / "out"
    run_id = published_run_id(out, STEM)
    assert run_id is not None
    manifest = json.loads((out / f"{STEM}_manifest.json").read_text())
    assert sorted(f["name"] for f in manifest["files"]) == sorted(set_files(STEM)[:-1])
    # nothing else is left: no lock, no temporary (the run ended normally)
    assert sorted(p.name for p in out.iterdir() if not p.name.endswith("_build.log")) == sorted(set_files(STEM))
    assert result.outputs["manifest"] == out / f"{STEM}_manifest.json"
    # every data file carries the run id of its manifest
    for name in (f"{STEM}.nc", f"{STEM}.parquet", f"{STEM}_ledger.json"):
        assert file_run_id(out / name) == run_id
    # a second build is another run: a new id in every file
    build(scenario(tmp_path))
    second = published_run_id(out, STEM)
    assert second is not None and second != run_id


def test_rerun_without_parquet_removes_the_previous_parquet_copy(tmp_path):
    build(scenario(tmp_path, parquet=True))
    assert (tmp_path / "out" / f"{STEM}.parquet").exists()
    build(scenario(tmp_path, parquet=False))
    # an older copy beside the new set would be a file of another run
    assert not (tmp_path / "out" / f"{STEM}.parquet").exists()
    assert published_run_id(tmp_path / "out", STEM) is not None


def test_a_second_output_set_of_the_same_outputs_is_refused_saying_who_holds_it(tmp_path):
    cfg = load_config(scenario(tmp_path))
    with OutputSet(cfg) as first:
        lock_file = tmp_path / "out" / f".{STEM}.lock"
        holder = json.loads(lock_file.read_text())
        assert holder["pid"] == os.getpid() and holder["run_id"] == first.run_id
        # flock(2) locks belong to the open file description: a second open in the same
        # process conflicts too, so this stands for a second build
        with pytest.raises(OutputLockedError) as refused:
            with OutputSet(cfg):
                pass
        message = str(refused.value)
        assert "\n" not in message
        assert f"pid {os.getpid()}" in message and socket.gethostname() in message
        assert holder["since"] in message and str(lock_file) in message
        # another night's set in the same directory is not blocked
        other = load_config(scenario(tmp_path), date="2026-11-21")
        with OutputSet(other):
            pass
    assert not lock_file.exists()  # released and removed on leaving
    with OutputSet(cfg):  # and free again
        pass


def test_stale_temporaries_of_this_set_are_removed_and_nothing_else(tmp_path):
    cfg = load_config(scenario(tmp_path))
    out = tmp_path / "out"
    out.mkdir()
    stale = [f".{STEM}.nc.k1ll3d.partial", f".{STEM}.parquet.a_b_c.partial",
             f".{STEM}_ledger.csv.x1.partial", f".{STEM}_ledger.json.x2.partial",
             f".{STEM}_manifest.json.x3.partial"]
    kept = [f"{STEM}_build.log",                 # the live log of the build
            f".{STEM}.lock",                     # a lock left by a killed build
            ".superobs_20261121.nc.zz.partial",  # another night's set
            f".{STEM}_v2.nc.yy.partial",         # another set whose name starts alike
            "notes.partial"]
    for name in stale + kept:
        (out / name).write_text("left over")
    with OutputSet(cfg) as output_set:
        assert sorted(p.name for p in output_set.removed_stale) == sorted(stale)
    assert sorted(p.name for p in out.iterdir()) == sorted(set(kept) - {f".{STEM}.lock"})


def test_the_next_build_removes_temporaries_left_by_a_killed_one_and_reports_them(tmp_path,
                                                                                   monkeypatch):
    config = scenario(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    (out / f".{STEM}.nc.abc123.partial").write_bytes(b"\x89HDF half")
    seen = {}
    original_enter = OutputSet.__enter__

    def entering(self):
        entered = original_enter(self)
        seen["removed"] = list(self.removed_stale)
        return entered

    monkeypatch.setattr(OutputSet, "__enter__", entering)
    build(config)
    assert [p.name for p in seen["removed"]] == [f".{STEM}.nc.abc123.partial"]
    assert sorted(p.name for p in out.iterdir() if not p.name.endswith("_build.log")) == sorted(set_files(STEM))


def _no_reading(monkeypatch):
    """Make any read of an observation file fail the test."""
    def must_not_read(*args, **kwargs):
        raise AssertionError("an input file was read before the output directory was checked")

    monkeypatch.setattr(build_module, "read", must_not_read)
    monkeypatch.setattr(build_module, "read_parts", must_not_read)
    monkeypatch.setattr(build_module, "find_duplicates", must_not_read)


def test_an_output_directory_that_cannot_exist_is_found_before_any_input_is_read(tmp_path,
                                                                                 monkeypatch):
    config = scenario(tmp_path)
    (tmp_path / "a_file").write_text("a regular file, not a directory")
    target = tmp_path / "a_file" / "out"  # its parent is a regular file: ENOTDIR (POSIX)
    _no_reading(monkeypatch)
    with pytest.raises(OutputError) as refused:
        build(config, out=target)
    assert str(target) in str(refused.value) and "\n" not in str(refused.value)


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0,
                    reason="running as root: permission bits do not stop root from writing, so a "
                           "read-only directory cannot be made this way (the test above covers an "
                           "unusable directory another way)")
def test_a_read_only_output_directory_is_found_before_any_input_is_read(tmp_path, monkeypatch):
    config = scenario(tmp_path)
    target = tmp_path / "readonly"
    target.mkdir()
    target.chmod(0o555)
    _no_reading(monkeypatch)
    try:
        with pytest.raises(OutputError, match="not writable"):
            build(config, out=target)
    finally:
        target.chmod(0o755)


def _publish_again(tmp_path, first, table):
    """Publish ``table(copy of first.superobs)`` as the outputs of the scenario's configuration."""
    cfg = load_config(tmp_path / "config.toml")
    grid = grid_from_config(cfg.grid, cfg.base_dir)
    with OutputSet(cfg) as output_set:
        output_set.publish(table(first.superobs.copy()), first.ledger, grid, first.inputs)


@pytest.mark.parametrize("column, bad, what", [
    ("value", np.nan, "value of 1 sea_level_anomaly row not finite"),
    ("value", np.inf, "value of 1 sea_level_anomaly row not finite"),
    ("error", 0.0, "error of 1 sea_level_anomaly row not finite (NaN or infinite) or not positive"),
    ("error", -np.inf, "error of 1 sea_level_anomaly row"),
    ("error_instrument", np.nan, "error_instrument of 1 sea_level_anomaly row"),
    ("lon", np.inf, "lon of 1 sea_level_anomaly row"),
    ("lat", np.nan, "lat of 1 sea_level_anomaly row"),
    ("time_offset", np.nan, "time_offset of 1 sea_level_anomaly row"),
    ("time", np.datetime64("NaT"), "time of 1 sea_level_anomaly row no valid time"),
    ("spread", np.inf, "spread of 1 sea_level_anomaly row infinite"),
])
def test_a_non_finite_super_observation_is_refused_and_the_previous_set_kept(tmp_path, column, bad,
                                                                            what):
    out = tmp_path / "out"

    def spoil(table):
        table.loc[table.index[0], column] = bad
        return table

    first = build(scenario(tmp_path))
    before = {name: (out / name).read_bytes() for name in set_files(STEM)}
    with pytest.raises(NonFiniteOutputError) as refused:
        _publish_again(tmp_path, first, spoil)
    assert what in str(refused.value) and "\n" not in str(refused.value)
    # nothing was written: the previous set, byte for byte, and no temporary
    assert {name: (out / name).read_bytes() for name in set_files(STEM)} == before
    assert sorted(p.name for p in out.iterdir() if not p.name.endswith("_build.log")) == sorted(set_files(STEM))


def test_several_bad_columns_are_counted_per_quantity_in_one_line(tmp_path):
    def spoil(table):
        table.loc[table.index[:3], "error"] = np.nan
        table.loc[table.index[:2], "lat"] = -np.inf
        return table

    with pytest.raises(NonFiniteOutputError) as refused:
        _publish_again(tmp_path, build(scenario(tmp_path)), spoil)
    message = str(refused.value)
    assert "error of 3 sea_level_anomaly rows" in message
    assert "lat of 2 sea_level_anomaly rows" in message


def test_undefined_statistics_may_be_nan(tmp_path):
    """A spread of a single value is NaN by declaration (sample standard deviation, ddof=1):
    the set is written."""
    def single_values(table):
        table["spread"] = np.nan
        table["error_spread"] = np.nan
        return table

    _publish_again(tmp_path, build(scenario(tmp_path)), single_values)
    assert published_run_id(tmp_path / "out", STEM) is not None


def test_the_build_refuses_to_write_a_non_finite_table(tmp_path, monkeypatch):
    """Through the whole build: a NaN that reached the table stops the run before any file."""
    original = build_module.finalize_superobs

    def with_a_nan(*args, **kwargs):
        table = original(*args, **kwargs)
        table.loc[table.index[-1], "value"] = np.nan
        return table

    monkeypatch.setattr(build_module, "finalize_superobs", with_a_nan)
    with pytest.raises(NonFiniteOutputError, match="value of 1 sea_level_anomaly row"):
        build(scenario(tmp_path))
    # nothing published; only the build's log, which says the run failed and why
    assert [p.name for p in (tmp_path / "out").iterdir()] == [f"{STEM}_build.log"]
    assert "build failed: NonFiniteOutputError" in (tmp_path / "out" / f"{STEM}_build.log").read_text()


# ----------------------------------------------------------------------------------------------
# reading a set back: the audit's run-directory reader
# ----------------------------------------------------------------------------------------------


def test_a_mixed_set_is_refused_by_the_run_directory_reader(tmp_path):
    config = scenario(tmp_path)
    build(config, out=tmp_path / "night_a")
    build(config, out=tmp_path / "night_b")
    a, b = tmp_path / "night_a", tmp_path / "night_b"
    assert len(load_run(a).superobs) > 0
    # run B's ledger beside run A's netCDF and manifest
    (a / f"{STEM}_ledger.json").write_bytes((b / f"{STEM}_ledger.json").read_bytes())
    with pytest.raises(OutputSetError, match=f"{STEM}_ledger.json.*(differs|bytes)"):
        load_run(a)


def test_a_super_observation_file_without_manifest_is_an_incomplete_set(tmp_path):
    build(scenario(tmp_path))
    (tmp_path / "out" / f"{STEM}_manifest.json").unlink()
    with pytest.raises(OutputSetError, match="no manifest"):
        load_run(tmp_path / "out")


def test_a_file_named_by_the_manifest_missing_is_an_incomplete_set(tmp_path):
    build(scenario(tmp_path))
    (tmp_path / "out" / f"{STEM}.parquet").unlink()
    with pytest.raises(OutputSetError, match="missing"):
        load_run(tmp_path / "out")


def test_an_empty_run_is_one_clear_refusal(tmp_path):
    # every observation outside the window: the build writes an empty set (its exit status is
    # the build's matter)
    config = scenario(tmp_path)
    config.write_text(config.read_text().replace("2026-11-20T00:00:00", "2020-01-01T00:00:00"))
    assert len(build(config).superobs) == 0
    with pytest.raises(InputFileError, match="no super-observations"):
        load_run(tmp_path / "out")
    empty = tmp_path / "nothing"
    empty.mkdir()
    with pytest.raises(InputFileError, match="no super-observation file"):
        load_run(empty)


def test_a_failed_write_names_the_file_and_leaves_the_previous_set(tmp_path, monkeypatch):
    """A full disk while the Parquet copy is written (ENOSPC, POSIX errno; simulated: the
    writer raises it after writing part of the file)."""
    import errno

    import obsprep.writers.outputs as outputs

    config = scenario(tmp_path)
    build(config)
    out = tmp_path / "out"
    before = {name: (out / name).read_bytes() for name in set_files(STEM)}

    def disk_full(superobs, path, run_id):
        Path(path).write_bytes(b"PAR1 partial")
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))

    monkeypatch.setattr(outputs, "_write_parquet", disk_full)
    with pytest.raises(OutputError) as refused:
        build(config)
    message = str(refused.value)
    assert f"{STEM}.parquet" in message and os.strerror(errno.ENOSPC) in message
    assert "previous set is unchanged" in message
    assert {name: (out / name).read_bytes() for name in set_files(STEM)} == before
    assert sorted(p.name for p in out.iterdir() if not p.name.endswith("_build.log")) == sorted(set_files(STEM))
