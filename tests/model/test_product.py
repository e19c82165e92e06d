"""The super-observation product as declared in obsprep/model/product.py: written by the writers,
read back by the run-directory reader, and documented in the README."""

import re
from pathlib import Path

import netCDF4
import numpy as np
import pandas as pd
import pytest

from obsprep.audit.rundir import load_run
from obsprep.demo import write_demo
from obsprep.model.product import NETCDF_VARIABLES, OUTPUT_VARIABLES, TABLE_COLUMNS
from obsprep.model.quantities import QUANTITIES
from obsprep.run.build import build
from obsprep.writers.netcdf import cf_flag_meaning

ROOT = Path(__file__).parents[2]


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """The regular-grid example built on the demo data, with its Parquet copy switched on."""
    root = tmp_path_factory.mktemp("product")
    write_demo(root, scale=0.1)
    text = (ROOT / "examples" / "regular_grid.toml").read_text()
    assert "parquet = false" in text
    (root / "regular_grid.toml").write_text(text.replace("parquet = false", "parquet = true"))
    return build(root / "regular_grid.toml")


def _in_file_order(table: pd.DataFrame) -> pd.DataFrame:
    """The table's rows in the order the reader returns them: by quantity as listed in
    QUANTITIES, the table order kept within a quantity."""
    rank = {name: n for n, name in enumerate(QUANTITIES)}
    order = np.argsort(table["quantity"].map(rank).to_numpy(), kind="stable")
    return table.iloc[order].reset_index(drop=True)


def test_every_declared_variable_round_trips_through_netcdf_and_the_reader(built):
    table = _in_file_order(built.superobs)
    assert len(set(table["quantity"])) == 7  # every demo quantity, surface, profile and vector
    back = load_run(built.outputs["netcdf"].parent).superobs
    assert len(back) == len(table)
    pd.testing.assert_series_equal(back["quantity"], table["quantity"], check_dtype=False)
    for declared in NETCDF_VARIABLES:
        column = declared.column
        written = table[column]
        applies = table["quantity"].map(lambda q, d=declared: d.applies_to(QUANTITIES[q]))
        if declared.flags_from_labels:
            # CF 1.10 section 3.5: flag_meanings are blank-separated words
            written = written.map(cf_flag_meaning)
        if declared.dtype == "str":
            written = written.where(applies, "")
        elif declared.dtype.startswith("datetime64"):
            written = written.where(applies, pd.NaT)
        elif not applies.all():
            written = written.where(applies, np.nan)
        expected = written.reset_index(drop=True).rename(column)
        got = back[column].rename(column)
        if declared.dtype in ("str",) or declared.flags_from_labels:
            pd.testing.assert_series_equal(got.astype(str), expected.astype(str), obj=column)
        elif declared.dtype.startswith("datetime64"):
            # stored as float64 seconds since the analysis time (CF time coordinate): within a
            # day float64 resolves about 1e-11 s, so a microsecond bounds the rounding
            delta = (got - expected).dt.total_seconds().abs()
            assert (got.isna() == expected.isna()).all(), column
            assert (delta[got.notna()] < 1e-6).all(), column
        else:
            np.testing.assert_array_equal(got.to_numpy(dtype=float),
                                          expected.to_numpy(dtype=float), err_msg=column)


def test_netcdf_variables_have_the_declared_dtype_and_cf_flags(built):
    with netCDF4.Dataset(built.outputs["netcdf"]) as ds:
        for name in sorted(set(built.superobs["quantity"])):
            q = QUANTITIES[name]
            expected = [d.variable_name(name) for d in NETCDF_VARIABLES if d.applies_to(q)]
            assert [v for v in ds.variables if v == name or v.startswith(f"{name}_")] == expected
            for declared in NETCDF_VARIABLES:
                if not declared.applies_to(q):
                    continue
                var = ds.variables[declared.variable_name(name)]
                assert var.dimensions == (f"{name}_obs",)
                if declared.dtype == "str":
                    assert var.dtype is str
                elif declared.dtype.startswith("datetime64"):
                    # CF 1.10 section 4.4: "<unit> since <reference time>" (the time of day may
                    # be left out at midnight, UDUNITS) and a calendar
                    assert re.fullmatch(r"seconds since \d{4}-\d\d-\d\d( \d\d:\d\d(:\d\d)?)?", var.units)
                    assert var.calendar == "standard" and var.dtype == np.float64
                else:
                    assert var.dtype == np.dtype(declared.dtype), var.name
                if declared.flag_values is not None or declared.flags_from_labels:
                    # CF 1.10 section 3.5: one flag meaning per flag value, same type as the data
                    assert len(var.flag_meanings.split()) == len(np.atleast_1d(var.flag_values))
                    assert np.asarray(var.flag_values).dtype == var.dtype


def test_parquet_copy_has_the_declared_columns_and_the_table_values(built):
    parquet = pd.read_parquet(built.outputs["parquet"])
    assert list(parquet.columns) == list(TABLE_COLUMNS)
    pd.testing.assert_frame_equal(parquet, built.superobs.reset_index(drop=True),
                                  check_dtype=False)


def test_readme_output_table_names_every_declared_netcdf_variable():
    text = (ROOT / "README.md").read_text()
    section = text.split("\n## Outputs\n", 1)[1].split("\n## ", 1)[0]
    rows = [line for line in section.splitlines() if line.startswith("| `")]
    documented = {name for row in rows for name in re.findall(r"`([^`]+)`", row.split("|")[1])}
    declared = {d.variable_name("q") for d in NETCDF_VARIABLES}
    assert documented == declared


def test_declarations_name_each_column_and_variable_once():
    columns = [d.column for d in OUTPUT_VARIABLES]
    suffixes = [d.suffix for d in NETCDF_VARIABLES]
    assert len(set(columns)) == len(columns) and len(set(suffixes)) == len(suffixes)
    assert sorted(TABLE_COLUMNS) == sorted(columns)


def test_total_error_is_the_basis_part_and_representation_in_quadrature(built):
    table = built.superobs
    basis = table["error_basis"].to_numpy()
    error = table["error"].to_numpy()
    representation = table["error_representation"].to_numpy()
    # independent errors add in variance (any statistics textbook); numpy's hypot as reference,
    # a few ulp apart from sqrt(a^2 + b^2)
    for code, part in ((0, "error_instrument"), (1, "error_spread")):
        rows = basis == code
        np.testing.assert_allclose(error[rows], np.hypot(table[part].to_numpy()[rows],
                                                         representation[rows]), rtol=1e-15)
    assert (basis == 0).any()
