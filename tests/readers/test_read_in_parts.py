"""One huge file read in parts: the same table rows, the same ledger, the same super-observations.

A global high-resolution L3 grid or a full-orbit swath can hold more pixels than the build's
memory allows; readers that can (GHRSST GDS 2.0 here) are read a slice of rows at a time.  The
reference for each check is the same file read whole.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from sample_files import REGULAR_GRID_TOML, ice_concentration_file, sst_grid_file, sst_swath_file, write_gds2

from obsprep.readers import read, read_parts
from obsprep.run import build as pipeline
from obsprep.run.build import build


def gds_swath(tmp_path, rows=90, columns=40, seed=5):
    """An L2P swath over 40..46 N, -10..-2 E with cloud-like quality and a few ice flags."""
    rng = np.random.default_rng(seed)
    lat = np.linspace(40.2, 45.8, rows)
    lon = np.linspace(350.2, 357.8, columns)  # 0..360 as many swaths store it
    sst = 285.0 + 3.0 * rng.standard_normal((rows, columns))
    sst[rng.random(sst.shape) < 0.05] = np.nan
    quality = rng.choice([0, 1, 3, 4, 5], size=sst.shape, p=[0.05, 0.1, 0.15, 0.3, 0.4])
    flags = np.where(rng.random(sst.shape) < 0.03, 4, 0)
    dtime = np.repeat(np.arange(rows, dtype=float)[:, None] * 30.0, columns, axis=1)
    path = write_gds2(tmp_path / "20261119120000-DEMO-L2P_GHRSST-SSTskin.nc", sst,
                      bias=0.02 * rng.standard_normal(sst.shape), sd=0.3 + 0.1 * rng.random(sst.shape),
                      dtime=dtime, quality=quality, flags=flags, lat=lat, lon=lon,
                      reference_seconds=int((np.datetime64("2026-11-19T12:00:00")
                                             - np.datetime64("1981-01-01T00:00:00"))
                                            / np.timedelta64(1, "s")))
    return path


def test_parts_cover_the_file_and_rows_number_the_whole_file(tmp_path):
    path = gds_swath(tmp_path)
    parts = read_parts(path, max_values=13 * 40)
    assert len(parts) == 7  # 90 rows of 40 pixels, 13 rows a part
    assert parts[0] == slice(0, 13) and parts[-1] == slice(78, 90)
    whole = read(path, leave_out_rejected=True)
    pieces = [read(path, leave_out_rejected=True, row_slice=p) for p in parts]
    joined = pd.concat(pieces, ignore_index=True)
    for column in ("row", "value", "error", "lon", "lat", "time"):
        np.testing.assert_array_equal(joined[column].to_numpy(), whole[column].to_numpy())
    counted: dict = {}
    for piece in pieces:
        for reason, n in piece.attrs["rejected_not_in_table"].items():
            counted[reason] = counted.get(reason, 0) + n
    assert counted == whole.attrs["rejected_not_in_table"]
    assert read_parts(path, max_values=None) == [None]
    assert read_parts(path, max_values=10**9) == [None]  # small enough to read whole


def config_for(tmp_path, path):
    out = tmp_path / "out"
    text = f"""
[window]
date = "2026-11-20"
analysis_time = "{{date}}T00:00:00"
start_hours = -24.0
end_hours = 0.0
slot_hours = 6.0
{REGULAR_GRID_TOML}[[sources]]
sensor = "sst_l2p"
paths = ["{path}"]
kind = "auto"
error = {{ rule = "file" }}
[output]
directory = "{out}"
"""
    toml = tmp_path / "config.toml"
    toml.write_text(text)
    return toml


def test_a_build_in_parts_equals_the_build_of_the_whole_file(tmp_path, monkeypatch):
    path = gds_swath(tmp_path)
    toml = config_for(tmp_path, path)
    whole = build(toml, out=tmp_path / "whole")
    monkeypatch.setattr(pipeline, "READ_PART_VALUES", 7 * 40)  # 13 parts of 7 rows
    slices = []

    def reading(*args, row_slice=None, **kwargs):
        slices.append(row_slice)
        return read(*args, row_slice=row_slice, **kwargs)

    monkeypatch.setattr(pipeline, "read", reading)
    parts = build(toml, out=tmp_path / "parts")
    assert len(slices) == 13 and slices[0] == slice(0, 7) and slices[-1] == slice(84, 90)
    # the ledger: the same counts per reason, balanced
    a, b = whole.ledger.entries[0], parts.ledger.entries[0]
    assert (a.read, a.kept, a.rejected) == (b.read, b.kept, b.rejected)
    assert a.read == 90 * 40
    # the super-observations: the same groups and counts; statistics equal to rounding
    # (sums merged in another order)
    key = ["quantity", "sensor", "slot", "j", "i"]
    sa = whole.superobs.sort_values(key).reset_index(drop=True)
    sb = parts.superobs.sort_values(key).reset_index(drop=True)
    pd.testing.assert_frame_equal(sa[key + ["count"]], sb[key + ["count"]])
    for column in ("value", "spread", "error", "lon", "lat", "time_offset"):
        np.testing.assert_allclose(sb[column], sa[column], rtol=1e-12, atol=1e-9,
                                   equal_nan=True, err_msg=column)
    with xr.open_dataset(parts.outputs["netcdf"]) as ds:
        assert int(ds.sizes[next(iter(ds.sizes))]) > 0


@pytest.mark.parametrize("max_values", [1, 40, 41, 1199])
def test_parts_never_split_a_row_and_never_overlap(tmp_path, max_values):
    path = gds_swath(tmp_path, rows=30, columns=40)
    parts = read_parts(path, max_values=max_values)
    covered = np.concatenate([np.arange(p.start, p.stop) for p in parts])
    np.testing.assert_array_equal(covered, np.arange(30))


def test_a_part_of_nothing_but_fill_is_counted_not_refused(tmp_path):
    # The first rows of a granule are often fill (outside the scan); a part made only of them
    # is counted as missing values, and the ledger still balances.
    rows, columns = 30, 40
    sst = np.full((rows, columns), 285.0)
    sst[:10] = np.nan
    lat = np.linspace(40.2, 45.8, rows)
    path = write_gds2(tmp_path / "edge.nc", sst, quality=np.full(sst.shape, 5), lat=lat,
                      lon=np.linspace(350.2, 357.8, columns))
    parts = read_parts(path, max_values=5 * columns)
    first = read(path, leave_out_rejected=True, row_slice=parts[0])
    assert len(first) == 0 and first.attrs["rejected_not_in_table"] == {"missing_value": 200}
    tables = [read(path, leave_out_rejected=True, row_slice=p) for p in parts]
    assert sum(len(t) for t in tables) == 20 * columns
    assert sum(sum(t.attrs["rejected_not_in_table"].values()) for t in tables) == 10 * columns


@pytest.mark.parametrize("kind", ["sst_grid", "sst_swath", "ice_concentration"])
def test_cf_grids_and_swaths_read_in_parts_equal_the_whole_file(tmp_path, kind):
    # Reference: the same file read whole.
    rng = np.random.default_rng(11)
    if kind == "sst_grid":
        sst = 280.0 + rng.random((9, 5))
        sst[2, 1] = np.nan
        path = sst_grid_file(tmp_path / "g.nc", sst, lat=tuple(np.linspace(50, 54, 9)),
                             lon=tuple(np.linspace(0, 4, 5)))
    elif kind == "sst_swath":
        path = sst_swath_file(tmp_path / "s.nc", ny=7, nx=4)
    else:
        conc = rng.uniform(0, 100, (1, 6, 3))
        conc[0, 4, 2] = np.nan
        path = ice_concentration_file(tmp_path / "i.nc", conc=conc,
                                      y=tuple(np.linspace(-2.0e6, -1.5e6, 6)))
    parts = read_parts(path, max_values=8)
    assert len(parts) > 1
    whole = read(path)
    joined = pd.concat([read(path, row_slice=p) for p in parts], ignore_index=True)
    assert whole.attrs["kind"] == kind
    for column in ("row", "value", "lon", "lat", "time"):
        np.testing.assert_array_equal(joined[column].to_numpy(), whole[column].to_numpy())
    assert (joined["rejected"].astype(str).tolist() == whole["rejected"].astype(str).tolist())
