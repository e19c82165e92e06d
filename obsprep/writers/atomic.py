"""Atomic file writing: write to a temporary file in the target directory, fsync, then rename.

A run killed at any moment leaves either the previous file or the complete new one under the
final name, never a half-written file (``os.replace`` is atomic on POSIX within one filesystem).
The temporary of ``NAME`` is the hidden ``.NAME.<random>.partial`` beside it; a run killed
before the rename leaves it behind, and :func:`remove_stale_temporaries` (called by the next
build of the same outputs, under their lock) removes it.
"""

from __future__ import annotations

import contextlib
import glob
import os
import tempfile
from pathlib import Path

#: suffix of every temporary file written beside its final name
PARTIAL_SUFFIX = ".partial"


def temporary_path(final_path) -> Path:
    """Create an empty hidden temporary file beside ``final_path`` and return its path.

    The name is ``.<final name>.<random>.partial``; the file gets the permissions of an
    ordinary new file (``mkstemp`` creates it 0600).
    """
    final_path = Path(final_path)
    fd, tmp = tempfile.mkstemp(prefix=f".{final_path.name}.", suffix=PARTIAL_SUFFIX,
                               dir=final_path.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    return Path(tmp)


def fsync_file(path) -> None:
    """Flush ``path``'s data to disk (so a rename after it never exposes a partial file)."""
    with open(path, "rb+") as fh:
        os.fsync(fh.fileno())


def fsync_directory(directory) -> None:
    """Flush a directory's entries (renames, removals) to disk; a no-op where the platform
    cannot open a directory."""
    with contextlib.suppress(OSError):
        dir_fd = os.open(directory, os.O_RDONLY)
        try:
            os.fsync(dir_fd)
        finally:
            os.close(dir_fd)


def stale_temporaries(directory, names) -> list[Path]:
    """The temporaries (``.<name>.*.partial``) of the files ``names`` in ``directory``."""
    found = []
    for name in names:
        pattern = os.path.join(glob.escape(str(directory)), f".{glob.escape(name)}.*{PARTIAL_SUFFIX}")
        found.extend(Path(p) for p in sorted(glob.glob(pattern, include_hidden=True)))
    return found


def remove_stale_temporaries(directory, names) -> list[Path]:
    """Remove the temporaries of the files ``names`` in ``directory``; return those removed.

    Only call it while holding the lock of these files: the temporaries of a live writer
    look the same."""
    removed = []
    for path in stale_temporaries(directory, names):
        with contextlib.suppress(FileNotFoundError):
            path.unlink()
            removed.append(path)
    return removed


@contextlib.contextmanager
def atomic_path(final_path):
    """Yield a temporary path next to ``final_path``; on success rename it onto ``final_path``."""
    final_path = Path(final_path)
    final_path.parent.mkdir(parents=True, exist_ok=True)
    tmp = temporary_path(final_path)
    try:
        yield tmp
        fsync_file(tmp)
        os.replace(tmp, final_path)
        fsync_directory(final_path.parent)
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
