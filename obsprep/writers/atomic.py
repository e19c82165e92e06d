"""Atomic file writing: write to a temporary file in the target directory, fsync, then rename.

A run killed at any moment leaves either the previous file or the complete new one under the
final name, never a half-written file (``os.replace`` is atomic on POSIX within one filesystem).
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


@contextlib.contextmanager
def atomic_path(final_path):
    """Yield a temporary path next to ``final_path``; on success rename it onto ``final_path``."""
    final_path = Path(final_path)
    final_path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{final_path.name}.", suffix=".partial", dir=final_path.parent)
    os.close(fd)
    # mkstemp creates the file 0600; give the result the permissions of an ordinary new file
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        yield Path(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, final_path)
        with contextlib.suppress(OSError):
            dir_fd = os.open(final_path.parent, os.O_RDONLY)
            os.fsync(dir_fd)
            os.close(dir_fd)
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
