"""Options shared by several subcommands, defined once, and the error edge."""

from __future__ import annotations

import contextlib
import functools

import click

from obsprep.exceptions import ClusterError, ConfigError, ObsprepError
from obsprep.run.outcome import EXIT_STATUS

date_opt = click.option("--date", "date", metavar="YYYY-MM-DD", default=None,
                        help="Run date (replaces {date} in the config); default: window.date of the config.")
out_opt = click.option("--out", "out", type=click.Path(file_okay=False), default=None,
                       help="Output directory (default: output.directory of the config).")
strict_opt = click.option("--strict", is_flag=True, help="Stop at the first unreadable file.")
quiet_opt = click.option("--quiet", "-q", is_flag=True,
                         help="No progress bar and no summary (problems still go to stderr).")
jobs_opt = click.option("--jobs", "-j", type=click.IntRange(min=1), default=1, show_default=True,
                        help="Local processes for the per-file work.")
scheduler_opt = click.option("--scheduler", "scheduler", metavar="ADDRESS", default=None,
                             help="Run the per-file work on the Dask cluster whose scheduler is "
                                  "at ADDRESS (e.g. tcp://10.0.0.5:8786); needs obsprep[dask].")


@contextlib.contextmanager
def problems_to_stderr():
    """Print the ``obsprep`` log's problems (WARNING and above) on stderr while the block runs."""
    from obsprep.run.log import LOGGER, stderr_handler

    handler = stderr_handler()
    LOGGER.addHandler(handler)
    try:
        yield
    finally:
        LOGGER.removeHandler(handler)


def library_errors(func):
    """Turn errors into one clear line on stderr: configuration errors exit 2 (bad usage), a
    Dask cluster without workers 5, other obsprep errors and operating-system errors 1.  Anything else is a fault of obsprep
    itself, not of the input: it exits 1 with a line saying so, and the traceback goes to a
    log file named in that line (:func:`report_internal_error`)."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except ConfigError as exc:
            raise click.UsageError(str(exc)) from exc
        except ClusterError as exc:
            error = click.ClickException(str(exc))
            error.exit_code = EXIT_STATUS["cluster_unavailable"]
            raise error from exc
        except ObsprepError as exc:
            raise click.ClickException(str(exc)) from exc
        except OSError as exc:
            raise click.ClickException(f"{exc.filename or ''}: {exc.strerror or exc}") from exc
        except (click.exceptions.ClickException, click.exceptions.Exit, click.exceptions.Abort):
            raise
        except Exception as exc:  # noqa: BLE001 - the edge where internal errors are reported
            raise click.ClickException(report_internal_error(exc)) from exc

    return wrapper


def report_internal_error(exc: BaseException) -> str:
    """Write the traceback of ``exc`` to a new log file; return the one-line message naming it.

    The file goes to the system's temporary directory (``TMPDIR``), since an internal error
    may happen before the output directory is known."""
    import tempfile
    import traceback

    from obsprep import __version__

    handle, path = tempfile.mkstemp(prefix="obsprep-internal-error-", suffix=".log")
    with open(handle, "w", encoding="utf-8") as log:
        log.write(f"obsprep {__version__}: internal error\n")
        log.write("".join(traceback.format_exception(exc)))
    first_line = (str(exc).splitlines() or [""])[0]
    return (f"internal error (a fault of obsprep, not of the input): {type(exc).__name__}: "
            f"{first_line} (traceback in {path})")
