"""One exception hierarchy for obsprep.

Every error a user can cause derives from :class:`ObsprepError` and also from the matching
builtin, so callers can catch either.  Messages name the file, the variable, what was expected
and what was found, so the command line can print them as one line.
"""

from __future__ import annotations


class ObsprepError(Exception):
    """Base class of all obsprep errors."""


class InputFileError(ObsprepError, ValueError):
    """An observation or grid file cannot be used.

    Parameters
    ----------
    path : str
        The file.
    message : str
        What was expected and what was found.
    variable : str, optional
        The variable concerned, when there is one.
    """

    def __init__(self, path, message, variable=None):
        self.path = str(path)
        self.variable = variable
        self.reason = message
        where = f"{self.path}"
        if variable:
            where += f", variable '{variable}'"
        super().__init__(f"{where}: {message}")


class NoReaderError(InputFileError):
    """No registered reader claims the file."""


class NotObservationsError(NoReaderError):
    """The file is model output (an ensemble, a forecast, a model grid), not observations."""


class ConfigError(ObsprepError, ValueError):
    """The configuration is invalid; ``key`` is the dotted path of the offending key."""

    def __init__(self, key, message, path=None):
        self.key = key
        self.path = path
        prefix = f"{path}: " if path else ""
        where = f"key '{key}'" if key else "configuration"
        super().__init__(f"{prefix}{where}: {message}")


class GridError(ObsprepError, ValueError):
    """The model grid definition is invalid."""


class ClusterError(ObsprepError, RuntimeError):
    """The Dask cluster cannot run the build: no worker joined, every worker was lost, or the
    scheduler went away.  Not a problem of the input or the configuration; the run has no
    outputs."""


class LedgerError(ObsprepError, RuntimeError):
    """The accounting of raw observations does not balance (a bug, never a user error)."""


class OutputError(ObsprepError, RuntimeError):
    """The outputs of a build cannot be written (an unusable output directory, a value that
    must not reach a file)."""


class OutputLockedError(OutputError):
    """Another build holds the lock of the same output set; the message says who and since when."""


class NonFiniteOutputError(OutputError):
    """A super-observation value, error, position or time is not finite (or an error not
    positive): the run fails rather than write it."""


class OutputSetError(ObsprepError, ValueError):
    """A run directory read back is not one complete published output set: no manifest, a file
    missing, a checksum or a run id that differs from the manifest."""
