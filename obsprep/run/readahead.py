"""Reading one part ahead: the next part of the input is read in a background thread while the
current one is processed.

The netCDF/HDF5 library releases the interpreter lock while it reads and decompresses, and
numpy while it decodes large arrays, so on a machine with a spare core the read of the next
part costs little wall time.  Memory stays bounded: at most one part is read ahead (the one
being processed and the next one are held, never more).  Results do not change: parts are
still read, and handed out, in their order; only the time of the reading moves.

Only the one background thread calls the netCDF library while parts are read ahead (the
library is not thread-safe); the consumer must not read files itself meanwhile.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

_END = object()


def read_ahead(items: Iterable) -> Iterator:
    """The items of ``items`` in order, the next one computed in a background thread while the
    caller works on the current one (at most one item ahead).

    An exception raised while computing an item is raised here, to the caller, when that item
    is asked for; nothing after it is computed.  The first item is computed in the caller's
    thread (there is nothing to overlap it with).
    """
    iterator = iter(items)
    # the first item is waited for anyway: computed here (a file of one part is then read in
    # the caller's thread, as without reading ahead)
    item = next(iterator, _END)
    if item is _END:
        return
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="obsprep-read-ahead") as pool:
        pending = pool.submit(next, iterator, _END)
        yield item
        item = None
        while True:
            item = pending.result()
            if item is _END:
                return
            pending = pool.submit(next, iterator, _END)
            yield item
            item = None  # the caller is done with it: do not hold it while the next one is read


@dataclass(frozen=True)
class _Failed:
    """A file whose reading raised ``error`` (after the parts already handed out)."""

    error: BaseException


class FilesReadAhead:
    """The parts of a list of files, read one part ahead across file boundaries.

    ``read(task)`` gives the parts of one task's file (an iterator; an exception it raises
    concerns that file only).  ``lock``, when given, is held while each part is read (the
    lock that keeps other threads of the process out of the netCDF library meanwhile).
    :meth:`parts_of` hands out the parts of each task in turn; call it for the tasks in the
    order given, each once.
    """

    def __init__(self, read: Callable[[object], Iterable], tasks: Iterable, lock=None):
        self._lock = contextlib.nullcontext() if lock is None else lock
        self._stream = read_ahead(self._all_parts(read, list(tasks)))

    def _all_parts(self, read, tasks):
        for task in tasks:
            try:
                parts = iter(read(task))
                while True:
                    with self._lock:  # held while the netCDF library reads this part
                        part = next(parts, _END)
                    if part is _END:
                        break
                    yield task, part
            except Exception as exc:  # noqa: BLE001 - this file's failure, raised to its consumer
                yield task, _Failed(exc)
                continue
            yield task, _END

    def parts_of(self, task) -> Iterator:
        """The parts of ``task``'s file, in order; its reading's exception is raised after the
        parts that were read.  Whatever of the file its consumer leaves unread is skipped
        when the next task's parts are asked for."""
        for owner, part in self._stream:
            if owner is not task:
                continue  # left by an earlier consumer that stopped early
            if part is _END:
                return
            if isinstance(part, _Failed):
                raise part.error
            yield part

    def close(self) -> None:
        """Stop reading ahead (waits for a part being read)."""
        self._stream.close()


__all__ = ["read_ahead", "FilesReadAhead"]
