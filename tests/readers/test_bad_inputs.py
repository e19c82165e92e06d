"""Bad input files in the new formats: each gives a one-line error naming the file (and the
variable where there is one); a build lists them in the ledger and goes on; ``obsprep inspect``
reports them and still describes the good files.

Files are written from the GDS 2.0 and Argo layouts (from memory, see tests/formats.py).
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest
from click.testing import CliRunner
from sample_files import GDS2_EPOCH, write_argo, write_gds2

from obsprep.cli.main import cli
from obsprep.exceptions import InputFileError
from obsprep.readers import read
from obsprep.run.build import build

DAY = np.datetime64("2026-11-19T12:00:00", "ns")
REFERENCE = int((DAY - GDS2_EPOCH) / np.timedelta64(1, "s"))
NAN = np.nan


def bad_files(tmp_path):
    """name -> (path, words the error must contain)."""
    sst = np.full((3, 4), 275.0)
    good = write_gds2(tmp_path / "sst_good.nc", sst, reference_seconds=REFERENCE)
    full = write_gds2(tmp_path / "full.nc", np.full((60, 80), 275.0), reference_seconds=REFERENCE)
    data = open(full, "rb").read()
    (tmp_path / "sst_truncated.nc").write_bytes(data[: len(data) // 2])
    (tmp_path / "full.nc").unlink()
    (tmp_path / "sst_empty.nc").write_bytes(b"")
    units = write_gds2(tmp_path / "sst_units.nc", sst, reference_seconds=REFERENCE)
    with netCDF4.Dataset(units, "a") as nc:
        nc["sea_surface_temperature"].units = "furlongs per fortnight"
    write_gds2(tmp_path / "sst_fill.nc", np.full((3, 4), NAN), reference_seconds=REFERENCE)
    argo = write_argo(tmp_path / "argo_nopres.nc", platform=["6901001"], cycle=[1], mode=["R"],
                      juld=[(DAY - np.datetime64("1950-01-01", "ns")) / np.timedelta64(1, "D")],
                      lat=[-60.0], lon=[-30.0], pres=[[5.0, 10.0]], temp=[[1.0, 1.1]],
                      psal=[[34.0, 34.1]])
    with netCDF4.Dataset(argo, "a") as nc:
        nc.renameVariable("PRES", "PRES_RENAMED")
    return good, {
        "sst_truncated.nc": ["truncated"],
        "sst_empty.nc": ["empty"],
        "sst_units.nc": ["'sea_surface_temperature'", "furlongs per fortnight", "degC"],
        "sst_fill.nc": ["'sea_surface_temperature'", "fill"],
        "argo_nopres.nc": ["'PRES'"],
    }


def test_each_bad_file_gives_one_line_naming_file_and_variable(tmp_path):
    good, expected = bad_files(tmp_path)
    assert len(read(good)) == 12
    for name, words in expected.items():
        path = str(tmp_path / name)
        with pytest.raises(InputFileError) as info:
            read(path, kind="argo" if name.startswith("argo") else None)
        message = str(info.value)
        assert "\n" not in message and message.startswith(path), message
        for word in words:
            assert word in message, (name, message)


def test_build_lists_bad_files_and_goes_on(tmp_path):
    good, expected = bad_files(tmp_path)
    cfg = {
        "window": {"analysis_time": "2026-11-20T00:00:00"},
        "grid": {"type": "regular", "lon_min": -40.0, "lat_min": -70.0, "dlon": 1.0,
                 "dlat": 1.0, "nlon": 40, "nlat": 20},
        "sources": [
            {"sensor": "sst_l2p", "paths": [str(tmp_path / "sst_*.nc")],
             "error": {"rule": "file"}},
            {"sensor": "argo", "paths": [str(tmp_path / "argo_*.nc")], "kind": "argo",
             "error": {"rule": "constant", "value": 0.01}},
        ],
        "output": {"directory": str(tmp_path / "out")},
    }
    result = build(cfg)
    entries = {e.file.rsplit("/", 1)[-1]: e for e in result.ledger.entries}
    assert entries["sst_good.nc"].status == "ok" and entries["sst_good.nc"].kept == 12
    for name, words in expected.items():
        entry = entries[name]
        assert entry.status == "unreadable" and "\n" not in entry.message
        for word in words:
            assert word in entry.message, (name, entry.message)
    assert int(result.superobs["count"].sum()) == 12
    runner = CliRunner()
    out = runner.invoke(cli, ["inspect", good, *(str(tmp_path / n) for n in expected)])
    assert out.exit_code == 1
    assert "kind: ghrsst_l2p" in out.output
    errors = [line for line in out.output.splitlines() if line.startswith("error: ")]
    assert sorted(e.split(":")[1].strip().rsplit("/", 1)[-1].split(",")[0] for e in errors) == \
        sorted(expected)
    assert f"{len(expected)} of {len(expected) + 1} file(s) could not be read" in out.output


def test_inspect_describes_kind_variables_time_and_reasons(tmp_path):
    quality = np.array([[5, 5, 2, 5], [5, 1, 5, 5], [5, 5, 5, 5]])
    flags = np.zeros((3, 4), dtype=int)
    flags[2, 3] = 2                                      # land
    sst = np.full((3, 4), 275.0)
    sst[0, 0] = NAN
    path = write_gds2(tmp_path / "l2p.nc", sst, quality=quality, flags=flags,
                      dtime=np.arange(12.0).reshape(3, 4) * 60.0, reference_seconds=REFERENCE)
    out = CliRunner().invoke(cli, ["inspect", path])
    assert out.exit_code == 0, out.output
    lines = out.output.splitlines()
    assert lines[0] == path and lines[1] == "  kind: ghrsst_l2p"
    assert "sea_surface_temperature [kelvin]" in lines[2] and "sst_dtime [second]" in lines[2]
    assert lines[3] == "  quantities: sea_surface_temperature 12"
    # reference 2026-11-19T12:00:00 plus 0 .. 11 minutes
    assert lines[4] == "  time: 2026-11-19T12:00:00 .. 2026-11-19T12:11:00 UTC"
    assert lines[5] == ("  rows: 12, valid 8, rejected quality_level 2, missing_value 1, "
                        "l2p_flag_land 1")
