"""The observation table: the one pandas DataFrame every reader returns and every stage consumes.

``schemas/observation.schema.json`` documents the same columns; a test keeps the two in step.
Times are timezone-naive ``datetime64[ns]`` holding UTC.  A row whose ``rejected`` is missing
(NaN) is kept; otherwise ``rejected`` holds the code (see :mod:`obsprep.model.reasons`) of the first test
that rejected it.  Rejected rows stay in the table until the ledger has counted them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.model.reasons import REASONS

#: name -> (dtype, units, meaning).  Categorical columns hold strings.
COLUMNS: dict[str, tuple[str, str, str]] = {
    "quantity": ("category", "", "quantity name from obsprep.model.quantities"),
    "value": ("float64", "canonical units of the quantity", "observed value"),
    "error": ("float64", "canonical units of the quantity",
              "1-sigma observation error; NaN until assigned"),
    "error_origin": ("category", "", "which rule set the error (e.g. 'constant', 'file')"),
    "lon": ("float64", "degrees_east", "longitude in -180..180"),
    "lat": ("float64", "degrees_north", "latitude in -90..90"),
    "depth": ("float64", "m", "depth, positive down, 0 at the surface"),
    "time": ("datetime64[ns]", "UTC", "observation time (start of the interval for drift)"),
    "time_end": ("datetime64[ns]", "UTC", "end of an interval observation; NaT otherwise"),
    "sensor": ("category", "", "source name given by the user"),
    "platform": ("category", "", "platform identifier (satellite, float WMO number, ship)"),
    "group": ("category", "", "pass, granule or profile identifier"),
    "file_id": ("category", "", "path of the source file"),
    "row": ("int64", "", "position of the value in the source file (flat index)"),
    "rejected": ("category", "", "rejection reason code; missing when the row is kept"),
}

CATEGORICAL = [c for c, (dtype, _, _) in COLUMNS.items() if dtype == "category"]


#: ``table.attrs`` key under which any stage leaves one-line warnings about the file the table
#: came from (a quirk read in the most sensible way, a suspicious share of values, ...); the
#: build copies them into the file's ledger entry
WARNINGS = "warnings"


def add_warning(table: pd.DataFrame, message: str) -> None:
    """Record a one-line warning about the table's file (kept once, in order of arrival)."""
    warnings = table.attrs.setdefault(WARNINGS, [])
    if message not in warnings:
        warnings.append(message)


def warn_of_large_shares(table: pd.DataFrame, rows_of: dict, bad: np.ndarray, share: float,
                         message) -> None:
    """Warn (:func:`add_warning`) for each group of rows where more than ``share`` (0..1) of
    its rows still kept are ``bad``: ``rows_of`` {name: boolean mask}, ``message(name)`` the
    line for that group (used by the units checks of values and of raw errors)."""
    live = kept(table)
    for name, mask in rows_of.items():
        rows = live & mask
        n = int(np.count_nonzero(rows))
        if n and np.count_nonzero(rows & bad) > share * n:
            add_warning(table, message(name))


def make_table(n: int | None = None, **columns) -> pd.DataFrame:
    """Build an observation table from column arrays.

    Missing columns are filled: ``error`` NaN, ``depth`` 0, ``time_end`` NaT, ``row`` 0..n-1,
    strings empty, ``rejected`` missing.  Scalars are broadcast.  Unknown column names raise
    ``KeyError`` so a typo in a reader fails loudly.

    Writeable numpy arrays of the right dtype become columns without a copy (a swath of
    millions of rows would otherwise be held twice while the table is built): a reader must not
    modify them afterwards.
    """
    unknown = set(columns) - set(COLUMNS)
    if unknown:
        raise KeyError(f"unknown observation-table columns: {sorted(unknown)}")
    if n is None:
        lengths = [len(v) for v in columns.values() if np.ndim(v) > 0]
        n = lengths[0] if lengths else 0
    data = {}
    for name, (dtype, _, _) in COLUMNS.items():
        v = columns.get(name)
        if dtype == "category":
            data[name] = _categorical(name, v, n)
            continue
        if v is None:
            if name == "row":
                v = np.arange(n, dtype=np.int64)
            elif name == "depth":
                v = np.zeros(n)
            elif name in ("time", "time_end"):
                v = np.full(n, np.datetime64("NaT"), dtype="datetime64[ns]")
            else:
                v = np.full(n, np.nan)
        if np.ndim(v) == 0:
            v = np.full(n, v)
        v = (np.asarray(v).astype("datetime64[ns]", copy=False) if dtype.startswith("datetime64")
             else np.asarray(v, dtype=dtype))
        if len(v) != n:
            raise ValueError(f"column '{name}' has length {len(v)}, expected {n}")
        if not v.flags.writeable or v.base is not None and not v.flags.c_contiguous:
            v = v.copy()  # read-only views (e.g. broadcasts) and strided views: own copy
        data[name] = v
    return pd.DataFrame(data, copy=False)


def _categorical(name, v, n) -> pd.Categorical:
    """A categorical column; scalars and defaults are built from codes (fast for millions of rows)."""
    if name == "rejected":
        if v is None:
            return pd.Categorical.from_codes(np.full(n, -1, dtype=np.int8), categories=list(REASONS))
        if isinstance(v, pd.Categorical) and list(v.categories) == list(REASONS):
            out = v  # already coded against the reasons (a reader's per-row reasons)
        else:
            out = pd.Categorical(v, categories=list(REASONS))
    elif v is None or np.ndim(v) == 0:
        label = {"error_origin": "unset"}.get(name, "") if v is None else str(v)
        out = pd.Categorical.from_codes(np.zeros(n, dtype=np.int8), categories=[label])
    elif isinstance(v, pd.Categorical):
        out = v.rename_categories([str(c) for c in v.categories]) if len(v.categories) else v
    else:
        out = pd.Categorical(np.asarray(v, dtype=object).astype(str))
    if len(out) != n:
        raise ValueError(f"column '{name}' has length {len(out)}, expected {n}")
    return out


def empty_table() -> pd.DataFrame:
    """An observation table with no rows and every column."""
    return make_table(0)


def concat_tables(tables) -> pd.DataFrame:
    """Concatenate observation tables, keeping categorical columns categorical."""
    tables = [t for t in tables if t is not None]
    if not tables:
        return empty_table()
    for c in CATEGORICAL:
        if c == "rejected":
            continue
        cats = pd.api.types.union_categoricals([t[c].array for t in tables]).categories
        for t in tables:
            t[c] = t[c].cat.set_categories(cats)
    out = pd.concat(tables, ignore_index=True)
    out["rejected"] = pd.Categorical(out["rejected"], categories=list(REASONS))
    return out


def reject(table: pd.DataFrame, mask, reason: str) -> int:
    """Mark rows selected by boolean ``mask`` as rejected with ``reason``, in place.

    Rows already rejected keep their first reason.  Returns the number of rows newly rejected.
    """
    if reason not in REASONS:
        raise KeyError(f"unknown rejection reason '{reason}'")
    column = table["rejected"]
    categories = column.cat.categories
    if reason not in categories:
        column = column.cat.add_categories([reason])
        categories = column.cat.categories
    # work on the integer codes: setting a categorical through .loc is slow for millions of rows
    codes = column.cat.codes.to_numpy()
    mask = np.asarray(mask, dtype=bool) & (codes < 0)
    n = int(np.count_nonzero(mask))
    if n:
        codes = codes.copy()
        codes[mask] = categories.get_loc(reason)
        table["rejected"] = pd.Categorical.from_codes(codes, categories=categories)
    elif column is not table["rejected"]:
        table["rejected"] = column
    return n


def category_masks(table: pd.DataFrame, column: str = "quantity") -> dict:
    """``{label: boolean row mask}`` for the labels present in categorical ``column``.

    Works on the integer codes: ``table[column].astype(str)`` builds one string per row, which
    costs more than the test itself on a swath of millions of rows.
    """
    codes = table[column].cat.codes.to_numpy()
    categories = table[column].cat.categories
    present = np.flatnonzero(np.bincount(codes[codes >= 0], minlength=len(categories)))
    return {str(categories[c]): codes == c for c in present}


def kept(table: pd.DataFrame) -> np.ndarray:
    """Boolean array: rows not rejected."""
    return table["rejected"].cat.codes.to_numpy() < 0


def validate_table(table: pd.DataFrame) -> None:
    """Raise ``ValueError`` if ``table`` lacks a column or has a wrong dtype."""
    for name, (dtype, _, _) in COLUMNS.items():
        if name not in table.columns:
            raise ValueError(f"observation table lacks column '{name}'")
        actual = str(table[name].dtype)
        if dtype == "category":
            ok = isinstance(table[name].dtype, pd.CategoricalDtype)
        else:
            ok = actual == dtype
        if not ok:
            raise ValueError(f"observation table column '{name}' has dtype {actual}, expected {dtype}")
