"""Opening a netCDF file: the lazy open, and one-line reasons for files that cannot be read."""

from __future__ import annotations

import os

import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.readers.cf.messages import one_line
from obsprep.readers.cf.overrides import apply_reader_profile

_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")


def open_dataset(path, profile: dict | None = None, load: bool = True) -> xr.Dataset:
    """Open a netCDF file with CF packing and fill decoded, times left as numbers.

    ``profile`` is a reader profile (:func:`apply_reader_profile`): attribute and fill-value
    overrides are applied to the raw variables before the CF decoding, variable roles after.
    ``load=False`` keeps the variables lazy and the file open (the caller closes the dataset);
    for reading a few metadata variables of a large file.

    ``scale_factor``/``add_offset`` are applied and ``_FillValue``/``missing_value`` become NaN
    (``mask_and_scale=True``); times and durations stay numeric (``decode_times=False``) so
    :func:`decode_time` can handle every calendar; attributes such as ``coordinates`` and
    ``grid_mapping`` stay on the variables.  The data are loaded into memory, so a truncated
    file fails here rather than half-way through a reader.

    Raises
    ------
    InputFileError
        The file is missing, empty, not netCDF, or cannot be read (e.g. truncated); the
        message is one line naming the file and the reason.
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise InputFileError(path, "file not found")
    if os.path.isdir(path):
        raise InputFileError(path, "is a directory, expected a netCDF file")
    size = os.path.getsize(path)
    if size == 0:
        raise InputFileError(path, "file is empty (0 bytes), expected a netCDF file")
    try:
        ds = xr.open_dataset(path, engine="netcdf4", mask_and_scale=not profile,
                             decode_times=False, decode_timedelta=False, decode_coords=False)
    except (OSError, RuntimeError, ValueError, KeyError, IndexError) as exc:
        with open(path, "rb") as fh:
            head = fh.read(8)
        if not head.startswith(_NETCDF_MAGIC):
            raise InputFileError(
                path, f"not a netCDF file (starts with {head[:4]!r}, expected netCDF-3 'CDF' "
                      f"or netCDF-4/HDF5 signature)") from exc
        raise InputFileError(path, f"cannot open netCDF file ({size} bytes; truncated or "
                                   f"corrupt?): {one_line(exc)}") from exc
    if not load:
        return apply_reader_profile(ds, profile, path) if profile else ds
    try:
        ds.load()
    except (OSError, RuntimeError, ValueError, IndexError) as exc:
        ds.close()
        raise unreadable_data(path, exc) from exc
    ds.close()  # the data are in memory; release the file handle
    return apply_reader_profile(ds, profile, path) if profile else ds


def unreadable_data(path, exc: BaseException) -> InputFileError:
    """The error for data the netCDF/HDF5 library fails to read (truncated or corrupt)."""
    return InputFileError(path, f"cannot read the data ({os.path.getsize(path)} bytes; "
                                f"truncated or corrupt?): {one_line(exc)}")
