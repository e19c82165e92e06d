"""Reading a file's parts from one opening (obsprep.readers.read_each_part) against what it
replaces: obsprep.readers.read_parts, then obsprep.readers.read of each part, every table equal
column by column with the same counts of rows left out, the same warnings, and a file's
problem raised the same way."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from test_read_in_parts import gds_swath

from obsprep.exceptions import InputFileError
from obsprep.readers import cf, read, read_each_part, read_parts


@pytest.mark.parametrize("max_values", [13 * 40, 40, None, 10**9])
def test_each_part_equals_read_of_that_part(tmp_path, max_values):
    path = gds_swath(tmp_path)
    parts = read_parts(path, max_values=max_values)
    expected = [read(path, leave_out_rejected=True, row_slice=p, sensor="sst") for p in parts]
    got = list(read_each_part(path, max_values=max_values, leave_out_rejected=True,
                              sensor="sst"))
    assert len(got) == len(expected) == len(parts)
    for table, reference in zip(got, expected):
        pd.testing.assert_frame_equal(table, reference)
        assert table.attrs.get(cf.NOT_IN_TABLE) == reference.attrs.get(cf.NOT_IN_TABLE)
        assert table.attrs.get("warnings") == reference.attrs.get("warnings")
        assert table.attrs["kind"] == reference.attrs["kind"]
    assert sum(len(t) for t in got) > 0


def test_a_file_that_is_not_netcdf_is_refused_the_same_way(tmp_path):
    path = tmp_path / "broken.nc"
    path.write_bytes(b"not a netCDF file at all")
    with pytest.raises(InputFileError) as by_read:
        read(path)
    with pytest.raises(InputFileError) as by_parts:
        list(read_each_part(path, max_values=100))
    assert str(by_parts.value) == str(by_read.value)


def test_an_unknown_kind_is_refused_before_the_file_is_opened(tmp_path):
    with pytest.raises(Exception, match="unknown reader kind 'no_such_kind'"):
        list(read_each_part(tmp_path / "absent.nc", kind="no_such_kind", max_values=100))


def test_rows_number_the_whole_file(tmp_path):
    path = gds_swath(tmp_path)
    whole = read(path, leave_out_rejected=True)
    joined = pd.concat(list(read_each_part(path, max_values=13 * 40, leave_out_rejected=True)),
                       ignore_index=True)
    np.testing.assert_array_equal(joined["row"].to_numpy(), whole["row"].to_numpy())
