"""Per-file warnings: a quirk of a file read in the most sensible way, recorded, never silent.

The CF layer meets quirks deep inside a decoding step (flag attributes of unequal length, a
flag variable without meanings, several candidates for one role, a file with no valid value)
where no observation table exists yet.  :func:`file_warning` records the one-line message in
the collector of the file being read (:func:`collecting_file_warnings`, opened by
:func:`obsprep.readers.read` around the reader); ``read`` then copies them to the table with
:func:`obsprep.model.table.add_warning`, and the build into the file's ledger entry.  Outside a
collector (a reader called directly) the message is issued as a Python warning instead.
"""

from __future__ import annotations

import contextlib
import contextvars
import os
import warnings

_COLLECTOR: contextvars.ContextVar[list | None] = contextvars.ContextVar(
    "obsprep_file_warnings", default=None)


class FileQuirkWarning(UserWarning):
    """A quirk of an input file, issued when no per-file collector is open."""


def file_warning(message: str, variable=None) -> None:
    """Record a one-line warning about the file being read (``variable``: the variable it is
    about, named first in the message)."""
    text = " ".join(str(message).split())
    if variable is not None:
        text = f"variable '{variable}': {text}"
    found = _COLLECTOR.get()
    if found is None:
        warnings.warn(text, FileQuirkWarning, stacklevel=2)
    elif text not in found:
        found.append(text)


@contextlib.contextmanager
def collecting_file_warnings():
    """Context manager yielding the list that collects :func:`file_warning` messages (in order
    of arrival, each once) while one file is read."""
    found: list[str] = []
    token = _COLLECTOR.set(found)
    try:
        yield found
    finally:
        _COLLECTOR.reset(token)


def short_path(path) -> str:
    """The file name of ``path`` (for messages that already sit in that file's ledger entry)."""
    return os.path.basename(os.fspath(path))
