"""One-line reasons: a library's exception (netCDF/HDF5, cftime, pint, PROJ) as the tail of
an :class:`~obsprep.exceptions.InputFileError` message."""

from __future__ import annotations


def one_line(exc: BaseException) -> str:
    """``exc`` as one line: its type and its message with whitespace collapsed."""
    text = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__
