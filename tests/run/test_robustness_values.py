"""Nothing wrong reaches the output: in one build, netCDF-3 files cut short and dimension bombs
are unreadable with their reason, a time beyond the representable range, an impossible
longitude or latitude and an impossible raw error reject one row each under their reason,
a file whose values mostly fail the physical range is kept with a units warning, one file too
big for memory is that file's reason; the ledger balances and the super-observations hold
only finite numbers.

References: the netCDF classic format specification [NetCDF3] for where a file may be cut;
CF conventions 1.10 for the files (units, standard_error ancillary variables; from memory);
numpy to count by hand what each file should contribute.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from sample_files import write_alongtrack, write_alongtrack_config, write_netcdf4_dimension_bomb

from obsprep.run.build import build

ANALYSIS = np.datetime64("2026-11-20T00:00:00")
N = 40  # raw values per file


def _seconds_since_1950(times):
    return (times - np.datetime64("1950-01-01T00:00:00")) / np.timedelta64(1, "s")


def corpus(tmp_path):
    """Write the files and the configuration; returns (config, {file name: (status, detail,
    kept)}), detail being the rejected counts of a readable file or words of the reason."""
    rng = np.random.default_rng(3)
    lon = rng.uniform(-9.9, -2.1, N)   # inside the grid (-10..-2 E, 40..46 N)
    lat = rng.uniform(40.1, 45.9, N)
    times = ANALYSIS - np.timedelta64(12, "h") + rng.integers(0, 6 * 3600, N).astype("timedelta64[s]")
    seconds = _seconds_since_1950(times)
    sla = rng.normal(0.05, 0.03, N)
    obs = tmp_path / "obs"
    obs.mkdir()
    expect = {}

    def track(name, lon=lon, lat=lat, seconds=seconds, sla=sla, folder=obs, **options):
        write_alongtrack(folder / name, lon, lat, seconds, sla, platform=None,
                         time_units="seconds since 1950-01-01 00:00:00", **options)
        return folder / name

    track("good.nc")
    expect["good.nc"] = ("ok", {}, N)

    # netCDF-3 files cut short ([NetCDF3]: the header, then the non-record variables, then the
    # records); the uncut ones read whole
    classic = track("classic.nc", fmt="NETCDF3_CLASSIC").read_bytes()
    expect["classic.nc"] = ("ok", {}, N)
    records = track("records_cdf5.nc", fmt="NETCDF3_64BIT_DATA", record=True).read_bytes()
    expect["records_cdf5.nc"] = ("ok", {}, N)
    header_end = classic.find(np.asarray(seconds, ">f8").tobytes())  # the first variable's data
    for name, whole, cut in (("cut_after_header.nc", classic, header_end),
                             ("cut_in_variable.nc", classic, len(classic) - 8 * N // 2),
                             ("cut_in_records.nc", records, len(records) - 32 * 3 - 5)):
        (obs / name).write_bytes(whole[:cut])
        expect[name] = ("unreadable",
                        f"file is truncated: header implies {len(whole)} bytes, file has {cut}", 0)

    # dimension bombs: a netCDF-3 header patched to declare 400 million values, and a
    # netCDF-4 file declaring them with only ten written
    entry = b"\x00\x00\x00\x04time" + N.to_bytes(4, "big")  # name length, name, dim_length
    (obs / "bomb3.nc").write_bytes(classic.replace(
        entry, b"\x00\x00\x00\x04time" + (400_000_000).to_bytes(4, "big")))
    expect["bomb3.nc"] = ("unreadable", "file is truncated: header implies", 0)
    write_netcdf4_dimension_bomb(obs / "bomb4.nc")
    expect["bomb4.nc"] = ("unreadable", "declares 400000000 values", 0)

    # one time of 1e19 s: that row is a bad time, the other 39 are kept
    late = seconds.copy()
    late[7] = 1e19
    track("time_1e19.nc", seconds=late)
    expect["time_1e19.nc"] = ("ok", {"bad_time": 1}, N - 1)

    # impossible longitudes and latitudes are bad positions; 0..360 longitudes are not
    bad_lon, bad_lat = lon % 360.0, lat.copy()
    bad_lon[[3, 4, 5]] = [1e300, -1e300, 721.0]
    bad_lat[[10, 11]] = [1e300, 91.0]
    track("bad_positions.nc", lon=bad_lon, lat=bad_lat)
    expect["bad_positions.nc"] = ("ok", {"bad_position": 5}, N - 5)

    # sea level in cm declared as m: most values fail the range of -3..3 m, a warning
    in_cm = np.linspace(-40.0, 40.0, N)   # "m", 36 of them beyond 3
    track("sla_in_cm.nc", sla=in_cm)
    outside = int(np.count_nonzero(np.abs(in_cm) > 3.0))
    expect["sla_in_cm.nc"] = ("ok", {"out_of_range": outside}, N - outside)
    # two glitches in forty (5 %) are no sign of wrong units: no warning
    glitches = sla.copy()
    glitches[[0, 1]] = [50.0, -7.0]
    track("two_glitches.nc", sla=glitches)
    expect["two_glitches.nc"] = ("ok", {"out_of_range": 2}, N - 2)

    # raw errors from the file: 1e300, 1e28, inf, 0 and -1 are implausible (the range of sea
    # level is 6 m wide), NaN is no error at all
    errors = np.full(N, 0.03)
    errors[:6] = [1e300, 1e28, np.inf, 0.0, -1.0, np.nan]
    file_errors = tmp_path / "obs_err"
    file_errors.mkdir()
    track("file_errors.nc", folder=file_errors, error=errors)
    expect["file_errors.nc"] = ("ok", {"implausible_error": 5, "missing_error": 1}, N - 6)

    config = write_alongtrack_config(tmp_path / "values.toml", ["obs/*.nc"], slot_hours=6.0)
    with open(config, "a") as fh:
        fh.write('\n[[sources]]\nsensor = "alt_err"\npaths = ["obs_err/*.nc"]\n'
                 'kind = "alongtrack"\nerror = { rule = "file" }\n')
    return config, expect


def test_nothing_wrong_reaches_the_output(tmp_path):
    config, expect = corpus(tmp_path)
    result = build(config)  # must not raise
    entries = {Path(e.file).name: e for e in result.ledger.entries}
    assert sorted(entries) == sorted(expect)
    for name, (status, detail, kept) in expect.items():
        entry = entries[name]
        assert entry.status == status, (name, entry.status, entry.message)
        if isinstance(detail, str):
            assert detail in entry.message and "\n" not in entry.message, (name, entry.message)
        else:
            assert entry.rejected == detail, (name, entry.rejected)
        assert entry.kept == kept, (name, entry.kept)
        assert entry.read == entry.kept + sum(entry.rejected.values())  # the balance
    # the units warnings, in the file's ledger entry only: values mostly out of range, raw
    # errors implausible for more than a tenth of the rows (5 of 40 here)
    assert [w for w in entries["sla_in_cm.nc"].warnings if "units" in w] == [
        "more than 10% of the values of sea_level_anomaly are outside its physical range "
        "[-3, 3] 'm': the file's units or scale may be wrong"]
    assert any("raw errors of sea_level_anomaly" in w and "the file's uncertainty may be wrong" in w
               for w in entries["file_errors.nc"].warnings), entries["file_errors.nc"].warnings
    for name in ("good.nc", "two_glitches.nc", "time_1e19.nc"):
        assert not any("units" in w for w in entries[name].warnings), (name, entries[name].warnings)
    # every kept value reaches a super-observation, and every number there is finite
    superobs = result.superobs
    assert int(superobs["count"].sum()) == sum(e.kept for e in result.ledger.entries)
    # (spreads are NaN for a single value by declaration, obsprep.model.product)
    always = ["value", "value_min", "value_max", "error", "error_instrument",
              "error_representation", "error_raw_rms", "lon", "lat", "depth", "time_offset"]
    assert np.isfinite(superobs[always].to_numpy(dtype=float)).all()
    assert (superobs["error"] > 0).all() and not superobs["time"].isna().any()
    # the values kept are the plausible ones: within the physical range of sea level, -3..3 m
    assert superobs["value_min"].min() >= -3.0 and superobs["value_max"].max() <= 3.0


def test_a_file_too_big_for_memory_is_that_files_reason(tmp_path, monkeypatch):
    from obsprep.readers.products import alongtrack

    rng = np.random.default_rng(5)
    obs = tmp_path / "obs"
    obs.mkdir()
    times = ANALYSIS - np.timedelta64(6, "h") + np.arange(N).astype("timedelta64[m]")
    for name in ("a.nc", "huge.nc"):
        write_alongtrack(obs / name, rng.uniform(-9.9, -2.1, N), rng.uniform(40.1, 45.9, N),
                         _seconds_since_1950(times), rng.normal(0.0, 0.1, N), platform=None,
                         time_units="seconds since 1950-01-01 00:00:00")
    reader = next(r for r in vars(alongtrack).values()
                  if isinstance(r, type) and getattr(r, "kind", None) == "alongtrack")
    original = reader.read_dataset

    def read_dataset(self, ds, path, **kwargs):
        if Path(path).name == "huge.nc":
            raise MemoryError  # what numpy raises when an array cannot be allocated
        return original(self, ds, path, **kwargs)

    monkeypatch.setattr(reader, "read_dataset", read_dataset)
    config = write_alongtrack_config(tmp_path / "memory.toml", ["obs/*.nc"])
    result = build(config)  # must not raise
    entries = {Path(e.file).name: e for e in result.ledger.entries}
    assert entries["a.nc"].status == "ok" and entries["a.nc"].kept == N
    assert entries["huge.nc"].status == "unreadable"
    assert entries["huge.nc"].message.startswith("not enough memory to read and process the file")
