"""The build's log: problems and warnings of one run, one line each.

Everything goes through the ``obsprep`` logger: problems (an unreadable file, a source that
delivered nothing, a warning about a file, a non-zero outcome) at WARNING, progress and the
outcome of a clean run at INFO.  :func:`file_log` copies the whole run into a log file beside
the outputs; the command line adds stderr at WARNING, so ``-q`` never hides a problem.  A
library caller who configured no logging still sees the warnings on stderr.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import logging
from pathlib import Path

#: the logger of the build and its stages
LOGGER = logging.getLogger("obsprep")

#: one line per record: UTC time, level, message
LINE_FORMAT = "%(asctime)s %(levelname)s %(message)s"


class _UtcFormatter(logging.Formatter):
    def formatTime(self, record, datefmt=None):  # noqa: N802 - logging's name
        return dt.datetime.fromtimestamp(record.created, dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


@contextlib.contextmanager
def file_log(path):
    """Copy the ``obsprep`` log (INFO and above) into ``path`` (overwritten) while the block
    runs; an exception leaving the block is logged first, so the file says how the run ended."""
    path = Path(path)
    handler = logging.FileHandler(path, mode="w", encoding="utf-8", delay=False)
    handler.setLevel(logging.INFO)
    handler.setFormatter(_UtcFormatter(LINE_FORMAT))
    # nobody configured logging (a library call): problems still reach stderr
    extra = [] if LOGGER.handlers or logging.getLogger().handlers else [stderr_handler()]
    for h in [handler, *extra]:
        LOGGER.addHandler(h)
    previous_level = LOGGER.level
    if LOGGER.getEffectiveLevel() > logging.INFO:
        LOGGER.setLevel(logging.INFO)
    try:
        yield path
    except BaseException as exc:
        # into the file only: the command line reports the error on stderr itself
        handler.handle(LOGGER.makeRecord(LOGGER.name, logging.ERROR, __file__, 0, "build failed: %s: %s",
                                         (type(exc).__name__, (str(exc).splitlines() or [""])[0]), None))
        raise
    finally:
        for h in [handler, *extra]:
            LOGGER.removeHandler(h)
        LOGGER.setLevel(previous_level)
        handler.close()


def stderr_handler() -> logging.Handler:
    """A handler printing WARNING and above to stderr, plain (for the command line)."""
    handler = logging.StreamHandler()
    handler.setLevel(logging.WARNING)
    handler.setFormatter(logging.Formatter("%(message)s"))
    return handler


__all__ = ["LOGGER", "file_log", "stderr_handler"]
