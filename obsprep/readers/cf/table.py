"""The raw-to-table step: decoded data variables, fill, flags and reader rejections, row numbers, and the rows left out for the build."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from obsprep.model.quantities import Quantity
from obsprep.model.reasons import REASONS
from obsprep.model.table import make_table
from obsprep.readers.cf.find import find_flag_variables, find_uncertainty_variable
from obsprep.readers.cf.flags import (
    flag_meaning_masks,
    good_flag_mask,
    has_flag_attributes,
    is_filter_meaning,
    rejected_by_meanings,
    usable_flag_variable,
)
from obsprep.readers.cf.options import DEFAULT_GOOD_FLAG_MEANINGS, SourceOptions
from obsprep.readers.cf.positions import broadcast_to_variable
from obsprep.readers.cf.quirks import file_warning
from obsprep.readers.cf.units import values_in_units
from obsprep.readers.cf.valid import outside_valid_range, stored_values


def labels_as_strings(values) -> np.ndarray:
    """Identifier values (bytes, str, integers, integer-valued floats) as a str array;
    fill (NaN) becomes ""."""
    values = np.asarray(values)
    if values.dtype.kind == "S":
        return np.char.strip(np.char.decode(values, "utf-8", errors="replace"))
    if values.dtype.kind == "U":
        return np.char.strip(values)
    if values.dtype.kind in "iu":
        return values.astype(str)
    if values.dtype.kind == "f":
        finite = np.isfinite(values)
        out = np.where(finite, np.where(finite, values, 0).astype(np.int64).astype(str), "")
        whole = finite & (values == np.round(np.where(finite, values, 0)))
        return np.where(finite & ~whole, values.astype(str), out)
    return np.array([str(v).strip() for v in values.ravel()], dtype=str).reshape(values.shape)


def platform_attribute(ds: xr.Dataset, opts: SourceOptions) -> str:
    """Platform from the option, else the ``platform`` global attribute, else ""."""
    if opts.platform is not None:
        return opts.platform
    return str(ds.attrs.get("platform", "")).strip()


@dataclass(frozen=True)
class DecodedVariable:
    """One data variable decoded to canonical units, with its file error and provider flags.

    ``values`` and ``error`` are float64 arrays of the variable's shape, in the quantity's
    canonical units; ``error`` is None without a standard_error ancillary variable; ``good``
    is a boolean array (None without flag variables).
    """

    quantity: Quantity
    variable: str
    values: np.ndarray
    error: np.ndarray | None = None
    good: np.ndarray | None = None

    def replace(self, **changes) -> DecodedVariable:
        """A copy with some fields changed."""
        return dataclasses.replace(self, **changes)


def decode_data_variable(ds: xr.Dataset, name: str, quantity: Quantity, path,
                         good_flag_meanings=DEFAULT_GOOD_FLAG_MEANINGS,
                         reject_flag_meanings=None) -> DecodedVariable:
    """Decode data variable ``name`` as ``quantity``.

    - values in canonical units; values outside the variable's ``valid_min``/``valid_max``/
      ``valid_range`` are missing (NaN; CF 2.5.1), as are those of the error;
    - flags carried in the data variable itself (``flag_values``/``flag_masks`` with
      ``flag_meanings`` on it, CF 3.5): a flag value outside the valid range (or, without a
      valid range, any flag value not naming a filter) is not an observation: its row is not
      good (``provider_flag``), its value left as stored;
    - the uncertainty (:func:`~obsprep.readers.cf.find.find_uncertainty_variable`: the
      ``standard_error`` ancillary variable, else an unnamed ancillary variable in the data's
      units), converted as a difference, units defaulting to the data's;
    - the combined "good" mask of every flag ancillary variable: by ``good_flag_meanings``
      (:func:`~obsprep.readers.cf.flags.good_flag_mask`), or, when ``reject_flag_meanings`` is
      given, good unless a set meaning matches one of them
      (:func:`~obsprep.readers.cf.flags.rejected_by_meanings`).  A flag variable that cannot be
      read as CF flags is not used, with a per-file warning.
    """
    var = ds[name]
    values = values_in_units(var, quantity.units, path, quantity=quantity)
    outside = outside_valid_range(var)
    bad = None
    if has_flag_attributes(var) and usable_flag_variable(var, path):
        in_data = _flags_in_data(var, path)
        if in_data is not None:
            bad = in_data
            outside = None if outside is None else outside & ~in_data
    if outside is not None and outside.any():
        values = np.where(outside, np.nan, values)
    error = None
    error_name = find_uncertainty_variable(ds, name, path)
    if error_name is not None:
        error_var = ds[error_name]
        sigma = values_in_units(error_var, quantity.units, path, quantity=quantity,
                                difference=True, default_units=var.attrs.get("units"))
        invalid = outside_valid_range(error_var)
        if invalid is not None and invalid.any():
            sigma = np.where(invalid, np.nan, sigma)
        error = np.array(broadcast_to_variable(sigma, error_var.dims, var, path=path))
    for flag_name in find_flag_variables(ds, name):
        flag = ds[flag_name]
        if not usable_flag_variable(flag, path):
            continue
        if reject_flag_meanings is not None:
            flag_bad = rejected_by_meanings(flag, reject_flag_meanings, path)
        else:
            flag_bad = ~good_flag_mask(flag, good_flag_meanings, path)
        mask = broadcast_to_variable(flag_bad, flag.dims, var, path=path)
        bad = np.array(mask) if bad is None else bad | mask
    good = None if bad is None else ~bad
    return DecodedVariable(quantity, name, values, error, good)


def _flags_in_data(var: xr.DataArray, path) -> np.ndarray | None:
    """True where a value of data variable ``var`` is one of its own flag values rather than
    an observation (see :func:`decode_data_variable`); None when it carries none."""
    raw = stored_values(var)
    masks = flag_meaning_masks(var, path, raw=raw)
    if not masks:
        return None
    outside = outside_valid_range(var)
    flagged = np.zeros(raw.shape, dtype=bool)
    for meaning, is_set in masks.items():
        if outside is None:
            if not is_filter_meaning(meaning):
                flagged |= is_set
        else:
            flagged |= is_set & outside
    return flagged


def require_values(path, decoded: list[DecodedVariable], *, reading_part: bool) -> None:
    """Record a per-file warning when the data variables hold values but every one is fill
    or invalid: the file is read (every row counted under its reason, zero kept), since an
    empty file (a cloud-covered grid, a float whose values were all rejected) is not a broken
    one.  Not for a part of a file (``reading_part``): rows of fill at the edge of a swath or
    the polar rows of a global grid are ordinary."""
    if reading_part:
        return
    total = sum(d.values.size for d in decoded)
    if total and not any(np.isfinite(d.values).any() for d in decoded):
        names = ", ".join(d.variable for d in decoded)
        file_warning(f"all {total} values of {names} are fill or outside the valid range; "
                     f"the file is read with nothing kept")


#: table attribute: {reason: rows} the reader rejected and left out of the table
NOT_IN_TABLE = "rejected_not_in_table"


#: table attribute: the variable whose flat index the ``row`` column is
ROW_VARIABLE = "row_variable"


def observation_table(path, opts: SourceOptions, decoded: DecodedVariable, *, lon, lat, time,
                      time_end=None, depth=None, group="", platform="", row=None, keep=None,
                      missing=None, rejections=(),
                      leave_out_rejected=False) -> pd.DataFrame:
    """The observation table for one decoded variable.

    Every array argument is broadcast to the variable's shape and flattened in source order.
    ``row`` defaults to the flat index of the value in the source variable; ``keep`` (boolean)
    drops entries that are not observations at all (profile padding); ``missing`` (boolean)
    marks extra rows as ``missing_value`` (e.g. the vertical coordinate is fill).

    Rows with a NaN value are rejected ``missing_value``; rows whose provider flag is not good,
    ``provider_flag``; then each ``(mask, reason)`` of ``rejections`` (masks of the variable's
    shape), the first reason of a row winning.  ``file_id`` is ``path``, ``sensor`` the option,
    ``error`` the file's standard_error where finite (``error_origin`` "file", else "unset").

    ``leave_out_rejected=True`` (for the nightly build, which only counts those rows: on a
    cloudy swath they are most rows) counts the rejected rows in ``table.attrs[NOT_IN_TABLE]``
    and leaves them out; only for a reader that changes no rows afterwards.  ``obsprep read``
    and ``inspect`` keep every row with its reason.
    """
    shape = decoded.values.shape

    def flat(a, dtype=None):
        a = np.asarray(a, dtype=dtype)
        # an array of the full shape is flattened as it is (a view, no copy); others broadcast
        a = a.ravel() if a.shape == shape else np.broadcast_to(a, shape).ravel()
        return a if keep_flat is None else a[keep_flat]

    keep_flat = None if keep is None else np.broadcast_to(keep, shape).ravel()
    values = flat(decoded.values)
    # reason of each row, the first that applies (-1 kept), as codes into REASONS
    reasons = list(REASONS)
    code = np.full(values.size, -1, dtype=np.int8)
    missing_rows = ~np.isfinite(values)
    if missing is not None:
        missing_rows |= flat(missing, bool)
    ordered = [(missing_rows, "missing_value")]
    if decoded.good is not None:
        ordered.append((~flat(decoded.good, bool), "provider_flag"))
    ordered += [(flat(mask, bool), reason) for mask, reason in rejections]
    for mask, reason in ordered:  # loop over the few reasons, not the rows
        code[mask & (code < 0)] = reasons.index(reason)
    leave_out = bool(leave_out_rejected)
    select = None
    not_in_table = {}
    if leave_out:
        counts = np.bincount(code + 1, minlength=len(reasons) + 1)
        not_in_table = {reasons[k - 1]: int(c) for k, c in enumerate(counts) if k and c}
        if not_in_table:
            select = np.flatnonzero(code < 0)  # indices: one scan, then cheap gathers
            values, code = values[select], code[select]

    def column(a, dtype=None):
        a = flat(a, dtype)
        return a if select is None else a.take(select)

    rows_number_the_variable = row is None and keep_flat is None
    if rows_number_the_variable:
        # the flat index in the source variable: for a selection, the selection itself
        row_column = np.arange(values.size) if select is None else select
    else:
        row_column = column(np.arange(decoded.values.size).reshape(shape) if row is None else row,
                            np.int64)

    error = column(decoded.error) if decoded.error is not None else np.full(values.size, np.nan)
    has_error = np.isfinite(error)
    columns = dict(
        quantity=decoded.quantity.name,
        value=values,
        error=error,
        error_origin=pd.Categorical.from_codes(has_error.astype(np.int8), ["unset", "file"]),
        lon=column(lon, np.float64),
        lat=column(lat, np.float64),
        time=column(time, "datetime64[ns]"),
        sensor=opts.sensor,
        file_id=str(path),
        row=row_column.astype(np.int64, copy=False),
        rejected=pd.Categorical.from_codes(code, categories=reasons),
    )
    if depth is not None:
        columns["depth"] = column(depth, np.float64)
    if time_end is not None:
        columns["time_end"] = column(time_end, "datetime64[ns]")
    for name, label in (("group", group), ("platform", platform)):
        columns[name] = str(label) if np.ndim(label) == 0 else column(label)
    table = make_table(n=values.size, **columns)
    if leave_out:
        table.attrs[NOT_IN_TABLE] = not_in_table
    if rows_number_the_variable:
        table.attrs[ROW_VARIABLE] = decoded.variable
    return table


def variable_units(ds: xr.Dataset, names) -> dict[str, str]:
    """``{variable: units attribute}`` of the named variables present in ``ds`` ("" without
    units), for reporting which variables a reader used (``table.attrs["variables"]``)."""
    return {str(n): str(ds[n].attrs.get("units", "")) for n in names
            if n is not None and n in ds.variables}
