"""The lock of one output set: a second build writing the same outputs fails at once.

The lock is an exclusive ``fcntl.flock`` on a hidden file beside the outputs, holding the
holder's pid, host, start time (UTC) and run id as one JSON line, so the refused build can say
who holds it.  The kernel releases a ``flock`` when its holder dies, however it dies (SIGKILL
included), so a killed build never leaves a lock that blocks the next night; the file it leaves
is only overwritten.  A holder that ends normally removes the file.  Because the file can be
removed and re-created, the holder checks after locking that the path still names the file it
locked (else it locked a removed file and tries again).  A process forked while the lock is
held (the build's worker processes) closes its inherited copy of the descriptor at once, so a
worker orphaned by a killed build never keeps the lock alive.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import errno
import fcntl
import json
import os
import socket
import time
from pathlib import Path

from obsprep.exceptions import OutputError, OutputLockedError

#: how long a refused build waits for the holder to finish writing its identity (seconds)
HOLDER_READ_SECONDS = 0.5

#: descriptors of the locks this process holds
_HELD: set[int] = set()


def _close_inherited_locks() -> None:
    """In a forked child: close the copies of the parent's lock descriptors.  Closing a copy
    leaves the parent's lock in place (flock(2): a lock is released when every descriptor of
    the open file is closed, or by an explicit unlock, which the child never does)."""
    for fd in list(_HELD):
        with contextlib.suppress(OSError):
            os.close(fd)
    _HELD.clear()


os.register_at_fork(after_in_child=_close_inherited_locks)


def _describe_holder(path: Path) -> str:
    """'pid P on host H since T (run R)' from the lock file, or why it cannot be said."""
    deadline = time.monotonic() + HOLDER_READ_SECONDS
    while True:
        try:
            holder = json.loads(path.read_text(encoding="utf-8"))
            return (f"pid {holder['pid']} on host {holder['host']} since {holder['since']} "
                    f"(run {holder['run_id']})")
        except (OSError, ValueError, KeyError, TypeError):
            # the holder may have locked the file an instant ago and not written it yet
            if time.monotonic() > deadline:
                return "a holder that has not written its identity"
            time.sleep(0.02)


class OutputLock:
    """An exclusive lock on ``path`` (``with OutputLock(path, run_id): ...``); ``what`` names
    what it protects in the refusal.

    Raises :class:`~obsprep.exceptions.OutputLockedError` at once, without waiting, when another
    process holds it.
    """

    def __init__(self, path, run_id: str, what: str = ""):
        self.path = Path(path)
        self.run_id = run_id
        self.what = what or f"the files locked by {self.path}"
        self._fd: int | None = None

    def acquire(self) -> None:
        """Take the lock and write the holder's identity into the lock file."""
        while True:
            try:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            except OSError as exc:
                raise OutputError(f"cannot create the lock file {self.path}: {exc.strerror}") from exc
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                os.close(fd)
                if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise OutputLockedError(
                        f"{self.what} is being written by another build: "
                        f"{_describe_holder(self.path)}; lock file {self.path}") from None
                raise OutputError(f"cannot lock {self.path}: {exc.strerror}") from exc
            try:
                same = os.path.samestat(os.fstat(fd), os.stat(self.path))
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)  # the holder before us removed the file we locked: lock the new one
        self._fd = fd
        _HELD.add(fd)
        since = dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        identity = json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "since": since,
                               "run_id": self.run_id})
        os.ftruncate(fd, 0)
        os.pwrite(fd, (identity + "\n").encode("utf-8"), 0)

    def release(self) -> None:
        """Remove the lock file and release the lock (removing first, while still holding it,
        so no other build can be holding the file removed)."""
        if self._fd not in _HELD:  # never taken, released, or a forked child's closed copy
            self._fd = None
            return
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()
        _HELD.discard(self._fd)
        os.close(self._fd)  # closing the last descriptor releases the flock
        self._fd = None

    def __enter__(self) -> OutputLock:
        self.acquire()
        return self

    def __exit__(self, *exc) -> None:
        self.release()
