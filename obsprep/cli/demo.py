"""``obsprep demo``: write the invented Weddell Sea scenario, build it and print the summary."""

from __future__ import annotations

import click

from obsprep.cli.options import jobs_opt, library_errors, problems_to_stderr, quiet_opt
from obsprep.cli.summary import summary_lines


@click.command("demo")
@click.argument("directory", type=click.Path(file_okay=False))
@click.option("--seed", type=int, default=20261120, show_default=True, help="Random seed of the synthetic noise.")
@click.option("--scale", type=click.FloatRange(min=0.05, max=1.0), default=1.0, show_default=True,
              help="Shrink the data volumes (1 = full demo).")
@click.option("--misassign", metavar="SENSOR", default=None,
              help="Give SENSOR half its true error in the config, for trying `obsprep audit`.")
@jobs_opt
@quiet_opt
@library_errors
def demo_command(directory, seed, scale, misassign, jobs, quiet):
    """Write the demo scenario into DIRECTORY, run the build on it and print the summary.

    Example: obsprep demo demo-run, then the audit command it prints; or
    obsprep demo demo-wrong --misassign altimeter_b to see the audit catch a wrong error.
    """
    from obsprep.demo import write_demo
    from obsprep.run.build import build

    paths = write_demo(directory, seed=seed, scale=scale, misassign=misassign)
    if not quiet:
        click.echo(f"demo scenario written to {directory} (config: {paths['config']})")
    with problems_to_stderr():
        result = build(paths["config"], progress=not quiet, jobs=jobs)
    if not quiet:
        for line in summary_lines(result):
            click.echo(line)
    if not quiet:
        run_dir = result.outputs["netcdf"].parent
        click.echo("audit the errors with:")
        click.echo(f"  obsprep audit {run_dir} --ensemble {paths['ensemble']}")
    click.get_current_context().exit(result.outcome.exit_status)
