"""Observation table: columns, dtypes, the schema document, rejection bookkeeping."""

import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest

from obsprep.model.table import COLUMNS, concat_tables, kept, make_table, reject, validate_table

SCHEMA = json.loads((Path(__file__).parents[2] / "schemas" / "observation.schema.json").read_text())


def test_schema_documents_every_column_with_its_dtype():
    assert list(SCHEMA["properties"]) == list(COLUMNS)
    for name, (dtype, units, _meaning) in COLUMNS.items():
        prop = SCHEMA["properties"][name]
        assert prop["x-dtype"] == dtype
        assert prop.get("x-units", "") == units
        assert prop["description"]


def test_schema_validates_a_row_of_a_real_table():
    t = make_table(2, quantity="sea_level_anomaly", value=[0.1, 0.2], lon=[1.0, 2.0], lat=[3.0, 4.0],
                   time=np.array(["2026-11-19T00:00", "2026-11-19T01:00"], dtype="datetime64[ns]"),
                   sensor="alt_a")
    reject(t, [True, False], "land")
    for rec in json.loads(t.to_json(orient="records", date_format="iso")):
        jsonschema.validate(rec, SCHEMA)  # jsonschema as the reference validator


def test_make_table_defaults_and_dtypes():
    t = make_table(3, quantity="sea_surface_temperature", value=[1.0, 2.0, 3.0])
    validate_table(t)
    assert t["error"].isna().all()
    assert (t["depth"] == 0).all()
    assert t["time_end"].isna().all()
    assert list(t["row"]) == [0, 1, 2]
    assert kept(t).all()


def test_make_table_rejects_unknown_columns():
    with pytest.raises(KeyError, match="valeu"):
        make_table(1, valeu=[1.0])


def test_reject_keeps_first_reason_and_counts_new_rows():
    t = make_table(4, value=np.arange(4.0))
    assert reject(t, [True, True, False, False], "land") == 2
    assert reject(t, [False, True, True, False], "outside_grid") == 1
    assert list(t["rejected"].astype(object).where(t["rejected"].notna(), None)) == ["land", "land", "outside_grid", None]
    with pytest.raises(KeyError):
        reject(t, [True] * 4, "no_such_reason")


def test_concat_keeps_categories():
    a = make_table(2, quantity="sea_level_anomaly", sensor="a")
    b = make_table(1, quantity="sea_surface_temperature", sensor="b")
    c = concat_tables([a, b])
    validate_table(c)
    assert list(c["sensor"]) == ["a", "a", "b"]
    assert isinstance(c["quantity"].dtype, pd.CategoricalDtype)
