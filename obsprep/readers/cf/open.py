"""Opening a netCDF file: the lazy open, and one-line reasons for files that cannot be read."""

from __future__ import annotations

import math
import os

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.readers.cf.classic import CLASSIC_MAGICS, check_classic_size
from obsprep.readers.cf.messages import one_line
from obsprep.readers.cf.overrides import apply_reader_profile

_NETCDF_MAGIC = (*CLASSIC_MAGICS, b"\x89HDF\r\n\x1a\n")

#: the highest compression ratio deflate can reach, 1032:1 ([Zlib], "Maximum Compression
#: Factor"): a deflated variable holds at most this many bytes of data per byte of the file
DEFLATE_MAX_RATIO = 1032
#: codecs of netCDF-4 with no such bound known here; their variables are not size-checked
_UNBOUNDED_CODECS = ("szip", "zstd", "bzip2", "blosc")
#: values above which a variable the file cannot hold is refused before anything is read
#: (2^24: 128 MiB as float64; smaller unwritten variables are cheap to read as fill)
IMPLAUSIBLE_VALUES = 1 << 24


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

    Before anything is allocated the declared sizes are checked against the file: a netCDF-3
    file must be as long as its header implies (:func:`check_classic_size`, so a file cut short
    is not read as fill or stale bytes); a netCDF-4 variable must fit in the file
    (:func:`check_declared_sizes`).

    Raises
    ------
    InputFileError
        The file is missing, empty, not netCDF, truncated, declares more data than it can
        hold, or cannot be read; the message is one line naming the file and the reason.
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise InputFileError(path, "file not found")
    if os.path.isdir(path):
        raise InputFileError(path, "is a directory, expected a netCDF file")
    size = os.path.getsize(path)
    if size == 0:
        raise InputFileError(path, "file is empty (0 bytes), expected a netCDF file")
    check_classic_size(path)
    check_declared_sizes(path, size)
    try:
        ds = xr.open_dataset(path, engine="netcdf4", mask_and_scale=not profile,
                             decode_times=False, decode_timedelta=False, decode_coords=False)
    except MemoryError as exc:
        raise out_of_memory(path) from exc
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
    except MemoryError as exc:
        ds.close()
        raise out_of_memory(path, ds) from exc
    except (OSError, RuntimeError, ValueError, IndexError) as exc:
        ds.close()
        raise unreadable_data(path, exc) from exc
    ds.close()  # the data are in memory; release the file handle
    return apply_reader_profile(ds, profile, path) if profile else ds


def unreadable_data(path, exc: BaseException) -> InputFileError:
    """The error for data the netCDF/HDF5 library fails to read (truncated or corrupt)."""
    return InputFileError(path, f"cannot read the data ({os.path.getsize(path)} bytes; "
                                f"truncated or corrupt?): {one_line(exc)}")


def check_declared_sizes(path, size: int) -> None:
    """Raise :class:`InputFileError` when a variable of the netCDF-4/HDF5 file ``path`` (of
    ``size`` bytes) declares far more data than the file can hold: a "dimension bomb", an
    11 KB file declaring a 400-million-element dimension.  Other formats pass unchecked (a
    netCDF-3 file is checked against its header, :func:`check_classic_size`).

    Read from the metadata with the netCDF library before xarray opens the file, since xarray
    reads a dimension's coordinate variable whole at open.  A variable of more than
    :data:`IMPLAUSIBLE_VALUES` values whose declared bytes (values x bytes per value) exceed
    the file size, or for a deflated variable :data:`DEFLATE_MAX_RATIO` times the file size,
    is refused: most of it cannot be in the file (HDF5 leaves unwritten storage unallocated,
    to be read as fill), and reading it would allocate memory for nothing.  Variables of the
    other codecs, whose ratio has no bound known here, and strings are not checked (a
    MemoryError while reading them is still this file's reason, :func:`out_of_memory`).
    """
    import netCDF4

    with open(path, "rb") as fh:
        if fh.read(8) != _NETCDF_MAGIC[-1]:
            return
    try:
        nc = netCDF4.Dataset(path)
    except (OSError, RuntimeError):
        return  # xarray's open, next, says why the file cannot be opened
    try:
        for name, var in nc.variables.items():
            values = math.prod(var.shape)
            if values <= IMPLAUSIBLE_VALUES or not isinstance(var.dtype, np.dtype) \
                    or var.dtype.kind not in "biufcS":
                continue
            filters = var.filters() or {}
            if any(filters.get(codec) for codec in _UNBOUNDED_CODECS):
                continue
            ratio = DEFLATE_MAX_RATIO if filters.get("zlib") else 1
            declared = values * var.dtype.itemsize
            if declared > size * ratio:
                shape = " x ".join(f"{d} = {n}" for d, n in zip(var.dimensions, var.shape))
                how = (f"even deflated at the maximum ratio {DEFLATE_MAX_RATIO}:1" if ratio > 1
                       else "uncompressed")
                raise InputFileError(
                    path, f"declares {values} values ({shape}; {declared} bytes) but the file "
                          f"has {size} bytes, too few to hold them {how}; the dimension sizes "
                          f"are implausible", variable=str(name))
    finally:
        nc.close()


def out_of_memory(path, ds: xr.Dataset | None = None) -> InputFileError:
    """The error for a file whose data do not fit in memory: one file's reason, never the end
    of the build; names the largest dimension when the dataset is known."""
    detail = ""
    if ds is not None and ds.sizes:
        dimension, length = max(ds.sizes.items(), key=lambda item: item[1])
        detail = f"; its largest dimension is '{dimension}' = {length}"
    return InputFileError(path, f"not enough memory to read and process the file "
                                f"({os.path.getsize(path)} bytes{detail})")
