"""A model-output file among a source's observation files: the build reads the others, records
it as unreadable with the one-line reason, says so on stderr and exits "files lost"."""

from __future__ import annotations

import netCDF4
import numpy as np
import pandas as pd
from click.testing import CliRunner
from sample_files import write_alongtrack, write_alongtrack_config

from obsprep.cli.main import cli
from obsprep.run.outcome import EXIT_STATUS

INSIDE = np.datetime64("2026-11-19T12:00:00")  # inside the window of write_alongtrack_config
EPOCH = np.datetime64("1950-01-01T00:00:00")


def _alongtrack(path, rng, n=30):
    times = INSIDE + rng.integers(0, 3600, n).astype("timedelta64[s]")
    write_alongtrack(path, rng.uniform(-9, -3, n), rng.uniform(41, 45, n),
                     (times - EPOCH) / np.timedelta64(1, "s"), rng.normal(0.0, 0.05, n))


def test_a_model_file_in_a_source_is_an_unreadable_entry_naming_the_sign(tmp_path):
    rng = np.random.default_rng(11)
    (tmp_path / "obs").mkdir()
    _alongtrack(tmp_path / "obs" / "a_20261119.nc", rng)
    _alongtrack(tmp_path / "obs" / "a_20261119_model.nc", rng)
    with netCDF4.Dataset(tmp_path / "obs" / "a_20261119_model.nc", "a") as nc:
        nc.realization_index = 1  # CMIP6 global attribute of model output (from memory)
    config = write_alongtrack_config(tmp_path / "config.toml", ["obs/a_*.nc"])
    result = CliRunner().invoke(cli, ["build", str(config), "--quiet"])
    assert result.exit_code == EXIT_STATUS["files_lost"], result.output
    assert "a_20261119_model.nc" in result.stderr and "not observations" in result.stderr
    [csv] = (tmp_path / "out").glob("*_ledger.csv")
    ledger = pd.read_csv(csv, keep_default_na=False).set_index("file")
    model = next(f for f in ledger.index if f.endswith("a_20261119_model.nc"))
    good = next(f for f in ledger.index if f.endswith("a_20261119.nc"))
    assert ledger.loc[model, "status"] == "unreadable"
    assert "global attribute 'realization_index'" in ledger.loc[model, "message"]
    assert ledger.loc[good, "status"] == "ok" and int(ledger.loc[good, "read"]) == 30
