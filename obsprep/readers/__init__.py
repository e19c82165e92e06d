"""Observation readers: one module per product family, registered through
:func:`obsprep.readers.registry.register_reader`.  :func:`read` is the public entry point."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd

from obsprep.exceptions import InputFileError, NoReaderError
from obsprep.readers.registry import Reader, accepted_options, register_reader, registered_readers


# Every module of obsprep.readers.products registers its reader on import; they are found on
# disk, so a new product is one new module (no list to keep).  Guessing asks readers by
# descending ``priority`` (format-specific readers such as GHRSST GDS 2.0 and Argo first, since
# the CF-generic ones would also claim their files), then by module name.
def _import_products() -> None:
    import importlib
    import pkgutil

    from obsprep.readers import products

    for module in sorted(m.name for m in pkgutil.iter_modules(products.__path__)):
        importlib.import_module(f"{products.__name__}.{module}")


_import_products()

__all__ = ["read", "read_parts", "guess_kind", "available_kinds", "Reader", "register_reader"]


def available_kinds() -> list[str]:
    """Names of the registered reader kinds."""
    return list(registered_readers())


def guess_kind(path, ds=None) -> str:
    """Return the kind of the first reader whose ``guess_can_open`` accepts the file.

    Model output is claimed by none (:func:`obsprep.readers.model_output.refuse_model_output`
    raises :class:`~obsprep.exceptions.NotObservationsError`)."""
    from obsprep.readers.cf import open_dataset
    from obsprep.readers.model_output import refuse_model_output

    own = ds is None
    if own:
        ds = open_dataset(path, load=False)  # metadata only
    try:
        refuse_model_output(ds, path)
        claims = [k for k, r in registered_readers().items() if r.guess_can_open(ds)]
    finally:
        if own:
            ds.close()
    if not claims:
        raise NoReaderError(
            path,
            "no reader recognises this file from its metadata (standard_name, featureType, "
            f"grid_mapping); known kinds: {', '.join(available_kinds())}; "
            "name one with kind=... or the source's 'kind' key, or give a reader profile "
            "(obsprep inspect FILE proposes one)",
        )
    return claims[0]


def read_parts(path, kind=None, reader_profile=None, max_values=None) -> list:
    """How to read ``path`` in parts of at most about ``max_values`` values per variable.

    Returns a list of ``row_slice`` arguments for :func:`read` (``[None]``: read the file
    whole), from the file's metadata only.  Files are cut only along the reader's
    :meth:`~obsprep.readers.registry.Reader.slice_dimension`, and at multiples of the variables'
    storage chunks along it, so no compressed chunk is decompressed twice.
    """
    from obsprep.readers.cf import open_dataset

    if max_values is None:
        return [None]
    profile = {k: v for k, v in dict(reader_profile or {}).items() if k != "good_flag_meanings"}
    ds = open_dataset(path, profile=profile or None, load=False)
    try:
        if kind in (None, "auto"):
            kind = guess_kind(path, ds)
        reader = registered_readers().get(kind)
        try:
            dimension = reader.slice_dimension(ds) if reader is not None else None
        except InputFileError:
            dimension = None  # read whole: the reader itself will say what is wrong
        if dimension is None or dimension not in ds.sizes:
            return [None]
        sliced = [v for v in ds.data_vars.values() if dimension in v.dims]
        n_rows = ds.sizes[dimension]
        per_row = max((v.size // n_rows for v in sliced), default=1) or 1
        chunk = 1
        for v in sliced:
            sizes = v.encoding.get("chunksizes")
            if sizes:
                chunk = max(chunk, int(sizes[v.dims.index(dimension)]))
        rows = max(chunk, (max(1, int(max_values) // per_row) // chunk) * chunk)
        if rows >= n_rows:
            return [None]
        return [slice(start, min(start + rows, n_rows)) for start in range(0, n_rows, rows)]
    finally:
        ds.close()


def read(path, kind=None, *, reader_profile=None, leave_out_rejected=False, row_slice=None,
         **options) -> pd.DataFrame:
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
        Readers that can (``leave_out_rejected`` of :func:`obsprep.readers.cf.observation_table`)
        leave the rows
        they reject out of the table and count them in ``attrs["rejected_not_in_table"]``
        ({reason: rows}); the build uses this, ``obsprep read`` and ``inspect`` do not.
    row_slice : slice, optional
        Read only this part of the reader's slice dimension (see :func:`read_parts`); the
        ``row`` column still numbers the values of the whole file.
    **options
        Reader options, e.g. ``sensor="alt_a"``, parsed into the reader's ``Options``; an
        unknown option raises ``TypeError``, an ill-typed one ``ValueError``.  With kind auto,
        an option no registered reader declares is unknown, and the reader chosen receives the
        options it declares.

    Returns
    -------
    pandas.DataFrame
        The observation table; ``file_id`` is ``path``.  ``attrs["kind"]`` is the reader kind,
        ``attrs["variables"]`` the file variables the reader used and their units.
    """
    from obsprep.model.table import add_warning
    from obsprep.readers.cf import (
        collecting_file_warnings,
        declared_options,
        open_dataset,
        out_of_memory,
        reader_options,
        unreadable_data,
    )
    from obsprep.readers.model_output import refuse_model_output

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
    auto = kind in (None, "auto")
    if auto:
        accepted = accepted_options("auto")
        unknown = sorted(set(options) - set(accepted))
        if unknown:
            raise TypeError(f"unknown option(s) {', '.join(repr(u) for u in unknown)}; no "
                            f"reader accepts them; accepted options: {', '.join(accepted)}")
    else:
        parsed = reader_options(readers[kind], options)
    # lazy: a variable is read (once, then cached) when the reader first uses it, so the
    # many variables of a product that obsprep does not need are never read or decoded
    ds = open_dataset(path, profile=profile or None, load=False)
    whole = ds
    try:
        if auto:
            kind = guess_kind(path, ds)  # refuses model output
            parsed = reader_options(readers[kind], declared_options(readers[kind], options))
        else:
            refuse_model_output(ds, path)  # whatever kind is named
        if row_slice is not None:
            dimension = readers[kind].slice_dimension(ds)
            if dimension is None:
                raise InputFileError(path, f"reader '{kind}' cannot read a file in parts")
            ds = ds.isel({dimension: row_slice})
        with collecting_file_warnings() as quirks:  # the CF layer's per-file warnings
            table = readers[kind].read_dataset(ds, path, options=parsed,
                                               leave_out_rejected=bool(leave_out_rejected),
                                               reading_part=row_slice is not None)
        for message in quirks:
            add_warning(table, message)
        if row_slice is not None:
            _rows_of_whole_file(table, whole, ds, dimension, row_slice.start or 0, path)
    except InputFileError:
        raise
    except MemoryError as exc:  # one file too big for memory is that file's reason
        raise out_of_memory(path, whole) from exc
    except (OSError, RuntimeError) as exc:  # the netCDF/HDF5 library, reading the data
        raise unreadable_data(path, exc) from exc
    finally:
        ds.close()
    table.attrs["kind"] = kind
    table.attrs.setdefault("variables", {})
    return table


def _rows_of_whole_file(table, whole, part, dimension, start, path) -> None:
    """Map ``table["row"]`` (flat indices into the part's variable) to the whole file's."""
    from obsprep.readers.cf import ROW_VARIABLE

    name = table.attrs.get(ROW_VARIABLE)
    if name is None or name not in part.variables:
        raise InputFileError(path, "the reader did not say which variable its rows number; "
                                   "cannot read the file in parts")
    variable = whole[name]
    if dimension not in variable.dims or len(table) == 0:
        return
    index = list(np.unravel_index(table["row"].to_numpy(), part[name].shape))
    axis = variable.dims.index(dimension)
    index[axis] = index[axis] + start
    table["row"] = np.ravel_multi_index(tuple(index), variable.shape).astype(np.int64)
