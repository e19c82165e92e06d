"""Valid ranges (CF 2.5.1): values outside ``valid_min``/``valid_max``/``valid_range`` are
missing, and the stored values of a packed variable, for flags carried in the data variable."""

from __future__ import annotations

import numpy as np
import xarray as xr

from obsprep.readers.cf.quirks import file_warning


def _packing(da: xr.DataArray) -> tuple[float, float, np.dtype | None]:
    """(scale_factor, add_offset, stored dtype or None) of a variable xarray unpacked."""
    scale = da.encoding.get("scale_factor", da.attrs.get("scale_factor"))
    offset = da.encoding.get("add_offset", da.attrs.get("add_offset"))
    if scale is None and offset is None:
        return 1.0, 0.0, None
    stored = da.encoding.get("dtype")
    return (1.0 if scale is None else float(np.asarray(scale).ravel()[0]),
            0.0 if offset is None else float(np.asarray(offset).ravel()[0]),
            None if stored is None else np.dtype(stored))


def stored_values(da: xr.DataArray) -> np.ndarray:
    """The values as stored in the file (packing undone, float64; fill stays NaN): for
    comparing with attributes given in stored units (flag values, a packed valid range).
    Integer stored values are rounded back to integers."""
    scale, offset, stored = _packing(da)
    values = np.asarray(da.values, dtype=np.float64)
    if stored is None:
        return values
    raw = (values - offset) / scale
    return np.round(raw) if stored.kind in "iu" else raw


def valid_bounds(da: xr.DataArray) -> tuple[float, float] | None:
    """(lowest, highest) valid stored value from ``valid_range``, else ``valid_min``/
    ``valid_max`` (missing ends are infinite); None without them.  NUG/CF: the attributes of
    a packed variable are in stored units when they have the stored type."""
    try:
        return _valid_bounds(da)
    except (ValueError, TypeError):
        file_warning("valid_range/valid_min/valid_max are not numbers; not used",
                     variable=da.name)
        return None


def _valid_bounds(da: xr.DataArray) -> tuple[float, float] | None:
    attrs = da.attrs
    if "valid_range" in attrs:
        bounds = np.atleast_1d(np.asarray(attrs["valid_range"], dtype=np.float64))
        if bounds.size != 2:
            file_warning(f"valid_range has {bounds.size} entries, expected 2; not used",
                         variable=da.name)
            return None
        low, high = float(bounds[0]), float(bounds[1])
    elif "valid_min" in attrs or "valid_max" in attrs:
        low = float(np.asarray(attrs.get("valid_min", -np.inf), dtype=np.float64).ravel()[0])
        high = float(np.asarray(attrs.get("valid_max", np.inf), dtype=np.float64).ravel()[0])
    else:
        return None
    if not low <= high:
        file_warning(f"valid range {low} .. {high} is empty; not used", variable=da.name)
        return None
    return low, high


def _bounds_are_stored(da: xr.DataArray) -> bool:
    """True when the valid-range attributes of a packed variable are in stored units: of the
    stored (integer) type rather than the unpacked (float) type of scale_factor (NUG)."""
    _, _, stored = _packing(da)
    if stored is None:
        return False
    attr = next(da.attrs[a] for a in ("valid_range", "valid_min", "valid_max") if a in da.attrs)
    kind = np.asarray(attr).dtype.kind
    return kind in "iu" or (stored.kind == "f" and kind == "f")


def unpacked_valid_bounds(da: xr.DataArray) -> tuple[float, float] | None:
    """:func:`valid_bounds` in the variable's unpacked units (scale_factor and add_offset
    applied when the attributes are in stored units), or None."""
    bounds = valid_bounds(da)
    if bounds is None or not _bounds_are_stored(da):
        return bounds
    scale, offset, _ = _packing(da)
    ends = sorted(b * scale + offset for b in bounds)
    return ends[0], ends[1]


def outside_valid_range(da: xr.DataArray) -> np.ndarray | None:
    """Boolean array, True where a value of ``da`` is outside its valid range (CF 2.5.1: such
    values are missing; NaN is never outside); None without valid-range attributes.

    For integer packing the comparison is made on the unpacked values against the unpacked
    bounds widened by half a packing step: exact (stored values are whole numbers) and one
    comparison per value, with no copy of a large swath back to stored units."""
    bounds = valid_bounds(da)
    if bounds is None:
        return None
    low, high = bounds
    scale, offset, stored = _packing(da)
    if _bounds_are_stored(da):
        if stored.kind not in "iu":
            values = stored_values(da)
            with np.errstate(invalid="ignore"):
                return (values < low) | (values > high)
        low, high = sorted((low * scale + offset, high * scale + offset))
    values = np.asarray(da.values)
    if values.dtype.kind != "f":
        values = values.astype(np.float64)
    if stored is not None and stored.kind in "iu":
        # half a packing step of margin: a bound equal to a packed value is inside whatever
        # the float rounding of the unpacking
        margin = abs(scale) / 2
        low, high = low - margin, high + margin
    with np.errstate(invalid="ignore"):
        return (values < low) | (values > high)
