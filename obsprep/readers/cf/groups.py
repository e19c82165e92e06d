"""netCDF-4 groups: the groups of a file, and one group opened with its ancestors' variables.

CF 1.8 (section 2.7) lets a variable refer to variables (coordinates, dimensions) of its
parent groups, found by searching upward from the group that refers to them.  :func:`open_group`
makes that search once: the group's own variables, plus those of each ancestor, nearest
first, that the group does not redefine and whose dimensions agree with the group's.
"""

from __future__ import annotations

import os

import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.readers.cf.messages import one_line


def source_path(ds: xr.Dataset) -> str | None:
    """The file ``ds`` was opened from (xarray's ``encoding["source"]``), or None."""
    source = ds.encoding.get("source")
    return os.fspath(source) if source else None


def group_paths(path) -> list[str]:
    """Every group of the netCDF-4 file ``path`` as a path without the leading "/"
    ("data_01", "data_01/ku", ...), depth first in file order; [] for netCDF-3 files and
    files without groups."""
    import netCDF4

    try:
        nc = netCDF4.Dataset(os.fspath(path))
    except (OSError, RuntimeError):
        return []
    try:
        found: list[str] = []

        def walk(group, prefix):
            for name, child in group.groups.items():
                full = f"{prefix}{name}"
                found.append(full)
                walk(child, f"{full}/")

        walk(nc, "")
        return found
    finally:
        nc.close()


def open_group(path, group: str, load: bool = True) -> xr.Dataset:
    """Group ``group`` of ``path`` with CF packing and fill decoded (times numeric, as
    :func:`obsprep.readers.cf.open_dataset`) and the variables of its ancestor groups it does
    not redefine (CF 2.7 upward search), nearest ancestor first.  ``load=False`` keeps the
    data lazy (metadata only; closing the result closes every group opened)."""
    parts = [p for p in group.strip("/").split("/") if p]
    chain = ["/".join(parts[:k]) for k in range(len(parts), -1, -1)]  # the group, then upward
    merged = None
    opened = []
    try:
        for member in chain:
            try:
                ds = xr.open_dataset(path, group=member or None, engine="netcdf4",
                                     mask_and_scale=True, decode_times=False,
                                     decode_timedelta=False, decode_coords=False)
            except (OSError, RuntimeError, ValueError, KeyError, IndexError) as exc:
                raise InputFileError(path, f"cannot open group '{member or '/'}': "
                                           f"{one_line(exc)}") from exc
            opened.append(ds)
            if merged is None:
                merged = ds
                continue
            extra = {}
            for name, var in ds.variables.items():
                if name in merged.variables:
                    continue
                if all(merged.sizes.get(d, size) == size for d, size in var.sizes.items()):
                    extra[name] = var
            if extra:
                merged = merged.assign(extra)
        merged.attrs = {**opened[-1].attrs, **merged.attrs}  # global attributes of the root
        merged.encoding["source"] = os.fspath(path)
        merged.encoding["group"] = group
        if load:
            merged = merged.load()
        else:
            # the files' own closers, taken before the merged dataset gets its closer (it may
            # be the first group's dataset itself)
            closers = [getattr(ds, "_close", None) or ds.close for ds in opened]
            merged.set_close(lambda: [close() for close in closers])
        return merged
    finally:
        if load:
            for ds in opened:
                ds.close()
