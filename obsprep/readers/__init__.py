"""Observation readers: one module per product family, registered through
:func:`obsprep.readers.base.register_reader`.  :func:`read` is the public entry point."""

from __future__ import annotations

import os

import pandas as pd

from ..exceptions import InputFileError, NoReaderError
from .base import Reader, register_reader, registered_readers

# Importing the modules registers their readers.  Guessing asks readers by descending
# ``priority`` (the format-specific GHRSST GDS 2.0 and Argo readers first, since the CF-generic
# ones would also claim their files), then in this import order.
from . import ghrsst, argo  # noqa: E402,F401
from . import alongtrack, sst_swath, sst_grid, ice_concentration, ice_drift, profiles  # noqa: E402,F401

__all__ = ["read", "guess_kind", "available_kinds", "Reader", "register_reader"]


def available_kinds() -> list[str]:
    """Names of the registered reader kinds."""
    return list(registered_readers())


def guess_kind(path, ds=None) -> str:
    """Return the kind of the first reader whose ``guess_can_open`` accepts the file."""
    from .cf import open_dataset

    own = ds is None
    if own:
        ds = open_dataset(path, load=False)  # metadata only
    try:
        claims = [k for k, r in registered_readers().items() if r.guess_can_open(ds)]
    finally:
        if own:
            ds.close()
    if not claims:
        raise NoReaderError(
            path,
            "no reader recognises this file from its metadata (standard_name, featureType, "
            f"grid_mapping); known kinds: {', '.join(available_kinds())}; "
            "name one with kind=... or the source's 'kind' key",
        )
    return claims[0]


def read(path, kind=None, reader_profile=None, leave_out_rejected=False, **options) -> pd.DataFrame:
    """Read one observation file into the observation table.

    Parameters
    ----------
    path : str or path-like
        The file.
    kind : str, optional
        Reader kind (see :func:`available_kinds`); None or "auto" to choose from the metadata.
    reader_profile : dict, optional
        Overrides of variable names, attributes and fill values for a product that bends the
        conventions (:data:`obsprep.readers.cf.READER_PROFILE_KEYS`); its
        ``good_flag_meanings`` becomes the reader option of that name.
    leave_out_rejected : bool
        Readers that can (:func:`obsprep.readers.cf.leaving_out_rejected_rows`) leave the rows
        they reject out of the table and count them in ``attrs["rejected_not_in_table"]``
        ({reason: rows}); the build uses this, ``obsprep read`` and ``inspect`` do not.
    **options
        Reader options, e.g. ``sensor="alt_a"``.

    Returns
    -------
    pandas.DataFrame
        The observation table; ``file_id`` is ``path``.  ``attrs["kind"]`` is the reader kind,
        ``attrs["variables"]`` the file variables the reader used and their units.
    """
    from .cf import _one_line as cf_one_line
    from .cf import leaving_out_rejected_rows, open_dataset

    path = os.fspath(path)
    readers = registered_readers()
    if kind not in (None, "auto") and kind not in readers:
        raise NoReaderError(path, f"unknown reader kind '{kind}'; known kinds: {', '.join(readers)}")
    profile = dict(reader_profile or {})
    if profile.get("good_flag_meanings") is not None:
        if options.get("good_flag_meanings") not in (None, profile["good_flag_meanings"]):
            raise InputFileError(path, "good_flag_meanings is given both as a reader option "
                                       "and in the reader profile, with different values")
        options["good_flag_meanings"] = profile.pop("good_flag_meanings")
    profile.pop("good_flag_meanings", None)
    # lazy: a variable is read (once, then cached) when the reader first uses it, so the
    # many variables of a product that obsprep does not need are never read or decoded
    ds = open_dataset(path, profile=profile or None, load=False)
    try:
        if kind in (None, "auto"):
            kind = guess_kind(path, ds)
        with leaving_out_rejected_rows(leave_out_rejected):
            table = readers[kind].read_dataset(ds, path, **options)
    except InputFileError:
        raise
    except (OSError, RuntimeError) as exc:  # the netCDF/HDF5 library, reading the data
        raise InputFileError(path, f"cannot read the data ({os.path.getsize(path)} bytes; "
                                   f"truncated or corrupt?): {cf_one_line(exc)}") from exc
    except (KeyError, ValueError, TypeError, IndexError, OverflowError) as exc:
        raise InputFileError(path, f"reader '{kind}' failed: {exc}") from exc
    finally:
        ds.close()
    table.attrs["kind"] = kind
    table.attrs.setdefault("variables", {})
    return table
