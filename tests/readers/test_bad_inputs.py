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
from sample_files import GDS2_EPOCH, write_argo, write_gds2, write_netcdf4_dimension_bomb

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
    # a file with nothing valid is read, not unreadable: every value counted under its reason
    empty = entries["sst_fill.nc"]
    assert empty.status == "ok" and empty.kept == 0, empty
    assert any("all 12 values" in w for w in empty.warnings), empty.warnings
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
    assert lines[3] == "  quantities: sea_surface_skin_temperature 12"  # the file is GDS 2.0 SSTskin
    # reference 2026-11-19T12:00:00 plus 0 .. 11 minutes
    assert lines[4] == "  time: 2026-11-19T12:00:00 .. 2026-11-19T12:11:00 UTC"
    assert lines[5] == ("  rows: 12, valid 8, rejected quality_level 2, missing_value 1, "
                        "l2p_flag_land 1")


# --------------------------------------------------------------------------------------------
# Files cut short or declaring more data than they hold: unreadable before any data are read
# --------------------------------------------------------------------------------------------

#: the worked example "tiny" of [NetCDF3] ("Examples"), byte for byte from its dump: the CDL
#: ``dimensions: dim = 5; variables: short vx(dim); data: vx = 3, 1, 4, 1, 5``, 92 bytes, the
#: data at offset 80 ("[offset: 80]"), 10 bytes of values and 2 of padding (the fill -32767)
TINY_CDF1 = bytes.fromhex(
    "43444601000000000000000a00000001"
    "0000000364696d000000000500000000"
    "000000000000000b0000000100000002"
    "76780000000000010000000000000000"
    "00000000000000030000000c00000050"
    "0003000100040001000580 01".replace(" ", ""))


def test_the_format_specification_example_and_its_cuts(tmp_path):
    from obsprep.readers.cf import open_dataset
    from obsprep.readers.cf.classic import classic_layout

    assert len(TINY_CDF1) == 92  # [NetCDF3]: "corresponds to a 92-byte netCDF file"
    path = tmp_path / "tiny.nc"
    path.write_bytes(TINY_CDF1)
    with open(path, "rb") as fh:
        layout = classic_layout(fh, 92)
    (vx,) = layout.variables
    assert (layout.header_bytes, vx.name, vx.begin, vx.nbytes, vx.is_record) == (80, "vx", 80, 10, False)
    # the netCDF library (reference implementation) reads the example
    with netCDF4.Dataset(path) as nc:
        np.testing.assert_array_equal(nc["vx"][:], [3, 1, 4, 1, 5])
    np.testing.assert_array_equal(open_dataset(path)["vx"].values, [3, 1, 4, 1, 5])

    # without its final padding every value is there: still readable
    path.write_bytes(TINY_CDF1[:90])
    np.testing.assert_array_equal(open_dataset(path)["vx"].values, [3, 1, 4, 1, 5])

    # cut after two values: the library returns zeros for the rest, obsprep refuses the file
    path.write_bytes(TINY_CDF1[:84])
    with netCDF4.Dataset(path) as nc:
        np.testing.assert_array_equal(nc["vx"][:], [3, 1, 0, 0, 0])
    with pytest.raises(InputFileError, match="file is truncated: header implies 90 bytes, "
                                             "file has 84") as info:
        open_dataset(path)
    assert info.value.variable == "vx"

    # cut inside the header
    path.write_bytes(TINY_CDF1[:60])
    with pytest.raises(InputFileError, match="inside its netCDF-3 header"):
        open_dataset(path)


def _track(n=20):
    lon = np.linspace(-9.5, -2.5, n)
    lat = np.linspace(40.5, 45.5, n)
    seconds = 2.4e9 + np.arange(n) * 7.0  # seconds since 1950, distinct for the byte search
    sla = np.linspace(-0.2, 0.3, n)
    return lon, lat, seconds, sla


@pytest.mark.parametrize("fmt", ["NETCDF3_CLASSIC", "NETCDF3_64BIT_OFFSET", "NETCDF3_64BIT_DATA"])
def test_netcdf3_files_cut_at_several_points_are_unreadable(tmp_path, fmt):
    from sample_files import write_alongtrack

    lon, lat, seconds, sla = _track()
    n = len(lon)
    fixed = tmp_path / "fixed.nc"
    write_alongtrack(fixed, lon, lat, seconds, sla, fmt=fmt)
    records = tmp_path / "records.nc"
    write_alongtrack(records, lon, lat, seconds, sla, fmt=fmt, record=True)
    for path in (fixed, records):  # the uncut files read whole
        table = read(path)
        assert len(table) == n
        np.testing.assert_allclose(table["value"], sla)

    # Where the data lie, found in the bytes themselves (netCDF-3 data are big-endian,
    # [NetCDF3]): the first variable's values begin where the header ends.
    data = fixed.read_bytes()
    header_end = data.find(np.asarray(seconds, ">f8").tobytes())
    sla_begin = data.find(np.asarray(sla, ">f8").tobytes())
    assert 0 < header_end < sla_begin
    # record file: one record holds one value of each of the 4 double variables, 32 bytes
    # (the record size is the sum of the record variables' vsize, [NetCDF3])
    record_data = records.read_bytes()
    cuts = {fixed: [header_end, sla_begin + 8 * 5],                 # after the header, inside sla
            records: [len(record_data) - 32,                        # the last record lost whole
                      len(record_data) - 32 * (n // 2) - 3]}        # inside the record section
    for path, at in cuts.items():
        whole = path.read_bytes()
        for cut in at:
            cut_path = tmp_path / f"cut_{cut}_{path.name}"
            cut_path.write_bytes(whole[:cut])
            with pytest.raises(InputFileError) as info:
                read(cut_path)
            message = str(info.value)
            # a file written by the netCDF library ends with its last value (doubles: no
            # padding), so the size the header implies is the whole file's
            assert f"file is truncated: header implies {len(whole)} bytes, file has {cut}" in message
            assert "\n" not in message and message.startswith(str(cut_path))


def test_a_netcdf3_dimension_bomb_is_unreadable_without_allocating(tmp_path):
    from sample_files import write_alongtrack

    lon, lat, seconds, sla = _track()
    path = tmp_path / "bomb3.nc"
    write_alongtrack(path, lon, lat, seconds, sla, fmt="NETCDF3_CLASSIC")
    data = path.read_bytes()
    # the dimension entry "time" = 20 ([NetCDF3] grammar: name length, name, dim_length)
    entry = b"\x00\x00\x00\x04time" + (20).to_bytes(4, "big")
    assert data.count(entry) == 1
    path.write_bytes(data.replace(entry, b"\x00\x00\x00\x04time" + (400_000_000).to_bytes(4, "big")))
    assert path.stat().st_size < 11_000
    with pytest.raises(InputFileError, match=r"file is truncated: header implies \d+ bytes, file has "
                                             f"{len(data)}"):
        read(path)


def test_a_netcdf4_dimension_bomb_is_unreadable_without_allocating(tmp_path):
    path = tmp_path / "bomb4.nc"
    write_netcdf4_dimension_bomb(path)  # netCDF-4: HDF5 leaves unwritten chunks unallocated
    assert path.stat().st_size < 100_000
    with pytest.raises(InputFileError, match="declares 400000000 values") as info:
        read(path)
    assert "implausible" in str(info.value) and info.value.variable in ("time", "longitude", "latitude", "sla")


def test_a_time_beyond_the_representable_range_is_not_a_time():
    import cftime

    from obsprep.readers.cf import add_seconds, decode_time

    values = [0.0, 1e19, -1e19, 86400.5, 1e300, np.inf, np.nan, 3.0e9]
    for calendar in ("standard", "noleap", "360_day"):
        decoded = decode_time(values, "seconds since 1970-01-01", calendar, "f.nc")
        valid = [0, 3, 7]
        assert np.isnat(decoded[[1, 2, 4, 5, 6]]).all()
        # the labels cftime (the CF calendar implementation) gives for the valid ones
        labels = cftime.num2date([values[k] for k in valid], "seconds since 1970-01-01",
                                 calendar=calendar)
        expected = [np.datetime64(label.strftime("%Y-%m-%dT%H:%M:%S"), "ns")
                    + np.timedelta64(label.microsecond, "us") for label in labels]
        np.testing.assert_array_equal(decoded[valid], np.array(expected, dtype="datetime64[ns]"))
    # a per-pixel offset beyond the range: NaT, never an integer overflow to another date;
    # numpy's own datetime arithmetic is the reference for the valid ones
    start = np.array(["2026-11-19T12:00", "2026-11-19T12:00", "NaT", "2261-12-31T00:00"],
                     dtype="datetime64[ns]")
    shifted = add_seconds(start, [90.0, 1e19, 1.0, 86400.0 * 400])
    assert shifted[0] == start[0] + np.timedelta64(90, "s")
    assert np.isnat(shifted[1:]).all()


def test_implausible_longitudes_are_not_wrapped_onto_a_meridian():
    from obsprep.geo.sphere import wrap_longitude

    lon = np.array([1e300, -1e300, 720.5, -721.0, np.inf, 719.0, -540.0, 359.0, 10.0])
    wrapped = wrap_longitude(lon)
    assert np.isnan(wrapped[:5]).all()
    # ((lon + 180) mod 360) - 180 by hand for the plausible ones
    np.testing.assert_array_equal(wrapped[5:], [-1.0, -180.0, -1.0, 10.0])


def test_a_drift_vector_without_both_interval_ends_is_a_bad_time(tmp_path):
    from sample_files import geographic_drift_file, reasons

    path = geographic_drift_file(tmp_path / "drift.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc["time_bnds"][2, 1] = 1e19  # days since 1950: beyond any datetime64[ns]
    table = read(path)
    # rows: east components of the three vectors, then north (CF 1-D list of vectors); the
    # second east component is fill in the file
    assert reasons(table) == [None, "missing_value", "bad_time", None, None, "bad_time"]
    assert np.isnat(table["time_end"].to_numpy()[[2, 5]]).all()
