"""A fault inside obsprep is reported as an internal error (exit 1, traceback in a log file),
never disguised as an unreadable input file or a silently missing sensor."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
from click.testing import CliRunner
from sample_files import write_alongtrack, write_alongtrack_config

from obsprep.cli.main import cli
from obsprep.readers import registered_readers


def _scenario(tmp_path) -> Path:
    rng = np.random.default_rng(5)
    n = 30
    times = np.datetime64("2026-11-19T12:00:00") + rng.integers(0, 3600, n).astype("timedelta64[s]")
    days = (times - np.datetime64("1950-01-01T00:00:00")) / np.timedelta64(1, "D")
    (tmp_path / "obs").mkdir()
    write_alongtrack(tmp_path / "obs" / "a.nc", rng.uniform(-9, -3, n), rng.uniform(41, 45, n),
                     days, rng.normal(0.0, 0.05, n), units="m",
                     time_units="days since 1950-01-01 00:00:00", platform=None)
    return write_alongtrack_config(tmp_path / "config.toml", ["obs/*.nc"])


def test_a_programming_error_in_a_reader_exits_1_as_an_internal_error(tmp_path, monkeypatch):
    config = _scenario(tmp_path)
    reader = registered_readers()["alongtrack"]

    def broken(*args, **kwargs):
        raise KeyError("a key the code forgot")

    monkeypatch.setattr(reader, "read_dataset", broken)
    result = CliRunner().invoke(cli, ["build", str(config)])
    assert result.exit_code == 1, result.output
    assert "internal error" in result.output and "KeyError" in result.output
    assert "unreadable" not in result.output
    # no output is published; the build's log beside the outputs says how the run ended
    written = {p.name for p in (tmp_path / "out").iterdir()} if (tmp_path / "out").exists() else set()
    logs = [name for name in written if name.endswith("_build.log")]
    assert {name for name in written if not name.startswith(".")} <= set(logs), written
    for name in logs:
        assert "build failed: KeyError" in (tmp_path / "out" / name).read_text()
    log = re.search(r"traceback in (\S+)\)", result.output).group(1)
    text = Path(log).read_text()
    assert "Traceback" in text and "a key the code forgot" in text
    Path(log).unlink()


def test_the_same_build_without_the_fault_succeeds(tmp_path):
    """Control for the test above: the scenario itself is a good one."""
    result = CliRunner().invoke(cli, ["build", str(_scenario(tmp_path)), "-q"])
    assert result.exit_code == 0, result.output
    assert any((tmp_path / "out").glob("*.nc"))
