"""``obsprep build``: the nightly super-observation build."""

from __future__ import annotations

import click

from obsprep.cli.options import (
    date_opt,
    jobs_opt,
    library_errors,
    out_opt,
    problems_to_stderr,
    quiet_opt,
    scheduler_opt,
    strict_opt,
)
from obsprep.cli.summary import summary_lines


@click.command("build")
@click.argument("config", type=click.Path(exists=True, dir_okay=False))
@date_opt
@out_opt
@strict_opt
@jobs_opt
@scheduler_opt
@quiet_opt
@library_errors
def build_command(config, date, out, strict, jobs, scheduler, quiet):
    """Build the super-observation file of one night from CONFIG (TOML).

    Example: obsprep build nightly.toml --date 2026-11-20 --out /data/superobs

    Exit status: 0 every required source delivered and the outputs were written; 3 written,
    but input files were unreadable; 4 written, but a required source delivered nothing or the
    output is empty; 1 failed; 2 bad usage or configuration; 5 no Dask worker.  Problems go to
    stderr (also with -q) and to the build log beside the outputs.

    With --jobs N the files are processed by N local processes; with --scheduler ADDRESS on an
    existing Dask cluster (the files must be readable there under the same paths).  The output
    is bit-for-bit the same either way.
    """
    from obsprep.run.build import build

    with problems_to_stderr():
        result = build(config, date=date, out=out, strict=strict, progress=not quiet, jobs=jobs,
                       scheduler=scheduler)
    if not quiet:
        for line in summary_lines(result):
            click.echo(line)
    click.get_current_context().exit(result.outcome.exit_status)
