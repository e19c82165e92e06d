"""The night never fails silently: the exit status states the outcome (obsprep.run.outcome,
documented in the README), every configured source has a ledger entry, problems reach stderr
whatever -q says and the build's log beside the outputs, and the ledger has the same columns
every night with the run's metadata in its JSON."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sample_files import write_alongtrack, write_alongtrack_config

from obsprep.cli.main import cli
from obsprep.model.reasons import REASONS
from obsprep.run.ledger import ENTRY_COLUMNS
from obsprep.run.outcome import EXIT_STATUS

# the window of write_alongtrack_config: the 24 h before 2026-11-20T00:00 UTC
INSIDE = np.datetime64("2026-11-19T12:00:00")
EPOCH = np.datetime64("1950-01-01T00:00:00")


def _alongtrack(path, rng, n=40, start=INSIDE):
    times = start + rng.integers(0, 3600, n).astype("timedelta64[s]")
    write_alongtrack(path, rng.uniform(-9, -3, n), rng.uniform(41, 45, n),
                     (times - EPOCH) / np.timedelta64(1, "s"), rng.normal(0.0, 0.05, n))


def _config(tmp_path, second_paths, *, second_required=None):
    """Two along-track sources: ``alt`` (one good file) and ``alt2`` with ``second_paths``."""
    rng = np.random.default_rng(3)
    (tmp_path / "obs").mkdir(exist_ok=True)
    _alongtrack(tmp_path / "obs" / "a_20261119.nc", rng)
    config = write_alongtrack_config(tmp_path / "config.toml", ["obs/a_*.nc"])
    required = "" if second_required is None else f"required = {str(second_required).lower()}\n"
    patterns = ", ".join(f'"{p}"' for p in second_paths)
    text = config.read_text().replace("[output]", f"""[[sources]]
sensor = "alt2"
paths = [{patterns}]
kind = "alongtrack"
{required}error = {{ rule = "constant", value = 0.03 }}
[output]""")
    config.write_text(text)
    return config


def _run(config, *args):
    return CliRunner().invoke(cli, ["build", str(config), *args])


def _ledger(tmp_path):
    [csv] = (tmp_path / "out").glob("*_ledger.csv")
    [js] = (tmp_path / "out").glob("*_ledger.json")
    return pd.read_csv(csv, keep_default_na=False), json.loads(js.read_text())


def test_every_source_delivering_exits_0_with_the_outcome_line_last(tmp_path):
    rng = np.random.default_rng(4)
    (tmp_path / "obs").mkdir()
    _alongtrack(tmp_path / "obs" / "b_20261119.nc", rng)
    res = _run(_config(tmp_path, ["obs/b_*.nc"]))
    assert res.exit_code == EXIT_STATUS["ok"] == 0, res.output
    assert res.stderr == ""
    assert res.stdout.strip().splitlines()[-1].startswith("outcome: ok (exit status 0)")
    _, js = _ledger(tmp_path)
    assert js["run"]["exit_status"] == 0 and js["run"]["outcome"] == "ok"


def test_a_required_source_without_files_exits_4_and_has_a_no_files_entry(tmp_path):
    res = _run(_config(tmp_path, ["obs/nothing_*.nc"]), "--quiet")
    assert res.exit_code == EXIT_STATUS["source_missing"] == 4, res.output
    assert res.stdout == ""  # -q: no summary ...
    lines = res.stderr.strip().splitlines()  # ... but every problem on stderr
    assert any(line.startswith("no files: source 'alt2'") and "nothing_*.nc" in line for line in lines)
    assert lines[-1].startswith("outcome: SOURCE MISSING (exit status 4)")
    assert "'alt2' delivered no files" in lines[-1]
    frame, js = _ledger(tmp_path)
    entry = frame[frame["sensor"] == "alt2"]
    assert list(entry["status"]) == ["no_files"] and "nothing_*.nc" in entry["message"].iloc[0]
    assert js["run"]["exit_status"] == 4 and js["run"]["outcome"] == "source_missing"
    # the build's log beside the outputs holds the same problems and the outcome
    [log_path] = (tmp_path / "out").glob("*_build.log")
    log = log_path.read_text()
    assert "no files: source 'alt2'" in log and "SOURCE MISSING (exit status 4)" in log


def test_an_optional_source_without_files_is_reported_but_exits_0(tmp_path):
    res = _run(_config(tmp_path, ["obs/nothing_*.nc"], second_required=False), "--quiet")
    assert res.exit_code == 0, res.output
    assert "no files: source 'alt2'" in res.stderr
    frame, js = _ledger(tmp_path)
    assert list(frame.loc[frame["sensor"] == "alt2", "status"]) == ["no_files"]
    assert js["run"]["optional_sources"] == ["alt2"] and js["run"]["required_sources"] == ["alt"]


def test_a_wrong_date_finds_no_file_and_exits_4_with_an_empty_output(tmp_path):
    config = _config(tmp_path, ["obs/a_{date:%Y%m%d}*.nc"])
    config.write_text(config.read_text().replace('"obs/a_*.nc"', '"obs/a_{date:%Y%m%d}*.nc"')
                      .replace('analysis_time = "2026-11-20T00:00:00"', 'analysis_time = "{date}T00:00:00"'))
    assert _run(config, "--quiet", "--date", "2026-11-20").exit_code == 0
    res = _run(config, "--quiet", "--date", "2025-11-20")
    assert res.exit_code == 4, res.output
    last = res.stderr.strip().splitlines()[-1]
    assert "'alt' delivered no files" in last and "no super-observation" in last


def test_a_required_source_of_unreadable_files_only_exits_4(tmp_path):
    (tmp_path / "obs").mkdir()
    (tmp_path / "obs" / "b_20261119.nc").write_bytes(b"not a netCDF file")
    res = _run(_config(tmp_path, ["obs/b_*.nc"]), "--quiet")
    assert res.exit_code == 4, res.output
    assert "unreadable: " in res.stderr and "b_20261119.nc" in res.stderr
    assert "'alt2' delivered no readable file" in res.stderr


def test_a_required_source_whose_observations_are_all_rejected_exits_4(tmp_path):
    rng = np.random.default_rng(6)
    (tmp_path / "obs").mkdir()
    _alongtrack(tmp_path / "obs" / "b_20261119.nc", rng, start=np.datetime64("2026-11-25T00:00:00"))
    res = _run(_config(tmp_path, ["obs/b_*.nc"]), "--quiet")
    assert res.exit_code == 4, res.output
    assert "'alt2' delivered no kept observation (40 read, all rejected)" in res.stderr
    frame, _ = _ledger(tmp_path)
    assert frame.loc[frame["sensor"] == "alt2", "rejected_outside_window"].tolist() == [40]


def test_one_unreadable_file_beside_good_ones_exits_3(tmp_path):
    rng = np.random.default_rng(7)
    (tmp_path / "obs").mkdir()
    _alongtrack(tmp_path / "obs" / "b_20261119.nc", rng)
    (tmp_path / "obs" / "b_20261119b.nc").write_bytes(b"")
    res = _run(_config(tmp_path, ["obs/b_*.nc"]))
    assert res.exit_code == EXIT_STATUS["files_lost"] == 3, res.output
    assert "b_20261119b.nc" in res.stderr and "file is empty" in res.stderr
    assert res.stdout.strip().splitlines()[-1].startswith("outcome: FILES LOST (exit status 3)")


def test_a_pattern_matching_nothing_beside_one_that_matches_is_a_warning(tmp_path):
    rng = np.random.default_rng(8)
    (tmp_path / "obs").mkdir()
    _alongtrack(tmp_path / "obs" / "b_20261119.nc", rng)
    res = _run(_config(tmp_path, ["obs/b_*.nc", "obs/c_*.nc"]), "--quiet")
    assert res.exit_code == 0, res.output
    assert "warning: source 'alt2': no file matches" in res.stderr and "c_*.nc" in res.stderr
    _, js = _ledger(tmp_path)
    assert any("c_*.nc" in w for w in js["run"]["warnings"])


def test_the_ledger_has_the_same_columns_whatever_occurred(tmp_path):
    """Every reason the build knows is a column, zero when unused (a database can ingest it)."""
    rng = np.random.default_rng(9)
    (tmp_path / "obs").mkdir()
    _alongtrack(tmp_path / "obs" / "b_20261119.nc", rng)
    first = tmp_path / "first"
    first.mkdir()
    _run(_config(first, ["obs/nothing_*.nc"]), "--quiet")
    columns_first = list(_ledger(first)[0].columns)
    _run(_config(tmp_path, ["obs/b_*.nc"]), "--quiet")
    frame, js = _ledger(tmp_path)
    assert list(frame.columns) == columns_first
    assert columns_first == list(ENTRY_COLUMNS) + [f"rejected_{r}" for r in REASONS]
    assert set(js["reasons"]) == set(REASONS)
    # every row balances, as the CSV says it (read == kept + rejected)
    rejected = frame[[c for c in frame if c.startswith("rejected_")]].sum(axis=1)
    assert (frame["read"] == frame["kept"] + rejected).all()


def test_the_ledger_json_carries_the_run_metadata(tmp_path):
    config = _config(tmp_path, ["obs/nothing_*.nc"], second_required=False)
    _run(config, "--quiet")
    _, js = _ledger(tmp_path)
    run = js["run"]
    assert run["analysis_time"] == "2026-11-20T00:00:00Z"
    assert (run["window_start"], run["window_end"]) == ("2026-11-19T00:00:00Z", "2026-11-20T00:00:00Z")
    from obsprep import __version__

    assert run["version"] == __version__ and run["configuration_file"] == str(config.resolve())
    assert run["started"] <= run["finished"]  # ISO 8601 UTC strings sort as times
    hash_first = run["configuration_sha256"]
    assert len(hash_first) == 64
    # a comment does not change the configuration's hash, a value does
    config.write_text("# tonight's run\n" + config.read_text())
    _run(config, "--quiet")
    assert _ledger(tmp_path)[1]["run"]["configuration_sha256"] == hash_first
    config.write_text(config.read_text().replace("value = 0.03", "value = 0.04", 1))
    _run(config, "--quiet")
    assert _ledger(tmp_path)[1]["run"]["configuration_sha256"] != hash_first


@pytest.mark.parametrize("required", [None, True])
def test_sources_are_required_by_default(tmp_path, required):
    res = _run(_config(tmp_path, ["obs/nothing_*.nc"], second_required=required), "--quiet")
    assert res.exit_code == 4
