"""``obsprep build``: the nightly super-observation build."""

from __future__ import annotations

import click

from .options import date_opt, jobs_opt, library_errors, out_opt, quiet_opt, strict_opt
from .summary import summary_lines


@click.command("build")
@click.argument("config", type=click.Path(exists=True, dir_okay=False))
@date_opt
@out_opt
@strict_opt
@jobs_opt
@quiet_opt
@library_errors
def build_command(config, date, out, strict, jobs, quiet):
    """Build the super-observation file of one night from CONFIG (TOML).

    Example: obsprep build nightly.toml --date 2026-11-20 --out /data/superobs
    """
    from ..pipeline import build

    result = build(config, date=date, out=out, strict=strict, progress=not quiet, jobs=jobs)
    if not quiet:
        for line in summary_lines(result):
            click.echo(line)
