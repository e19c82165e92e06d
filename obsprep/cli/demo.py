"""``obsprep demo``: write the invented Weddell Sea scenario, build it and print the summary."""

from __future__ import annotations

import click

from .options import jobs_opt, library_errors, quiet_opt
from .summary import summary_lines


@click.command("demo")
@click.argument("directory", type=click.Path(file_okay=False))
@click.option("--seed", type=int, default=20261120, show_default=True, help="Random seed of the synthetic noise.")
@click.option("--scale", type=click.FloatRange(min=0.05, max=1.0), default=1.0, show_default=True,
              help="Shrink the data volumes (1 = full demo).")
@jobs_opt
@quiet_opt
@library_errors
def demo_command(directory, seed, scale, jobs, quiet):
    """Write the demo scenario into DIRECTORY, run the build on it and print the summary.

    Example: obsprep demo demo-run
    """
    from ..demo import write_demo
    from ..pipeline import build

    paths = write_demo(directory, seed=seed, scale=scale)
    if not quiet:
        click.echo(f"demo scenario written to {directory} (config: {paths['config']})")
    result = build(paths["config"], progress=not quiet, jobs=jobs)
    if not quiet:
        for line in summary_lines(result):
            click.echo(line)
