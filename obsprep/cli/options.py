"""Options shared by several subcommands, defined once, and the error edge."""

from __future__ import annotations

import functools

import click

from obsprep.exceptions import ConfigError, ObsprepError

date_opt = click.option("--date", "date", metavar="YYYY-MM-DD", default=None,
                        help="Run date (replaces {date} in the config); default: window.date of the config.")
out_opt = click.option("--out", "out", type=click.Path(file_okay=False), default=None,
                       help="Output directory (default: output.directory of the config).")
strict_opt = click.option("--strict", is_flag=True, help="Stop at the first unreadable file.")
quiet_opt = click.option("--quiet", "-q", is_flag=True, help="No progress bar and no summary.")
jobs_opt = click.option("--jobs", "-j", type=click.IntRange(min=1), default=1, show_default=True,
                        help="Local processes for the per-file work.")
scheduler_opt = click.option("--scheduler", "scheduler", metavar="ADDRESS", default=None,
                             help="Run the per-file work on the Dask cluster whose scheduler is "
                                  "at ADDRESS (e.g. tcp://10.0.0.5:8786); needs obsprep[dask].")


def library_errors(func):
    """Turn library errors into one clear line: config errors exit 2 (bad usage), others 1."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except ConfigError as exc:
            raise click.UsageError(str(exc)) from exc
        except ObsprepError as exc:
            raise click.ClickException(str(exc)) from exc
        except OSError as exc:
            raise click.ClickException(f"{exc.filename or ''}: {exc.strerror or exc}") from exc

    return wrapper
