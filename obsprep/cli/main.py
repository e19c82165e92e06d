"""The ``obsprep`` command group."""

from __future__ import annotations

import click

from obsprep import __version__
from obsprep.cli.audit import audit_command
from obsprep.cli.build import build_command
from obsprep.cli.demo import demo_command
from obsprep.cli.inspect import inspect_command
from obsprep.cli.read import read_command


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="obsprep")
def cli():
    """obsprep: ocean and sea-ice observations to model-grid super-observations."""


cli.add_command(build_command)
cli.add_command(read_command)
cli.add_command(demo_command)
cli.add_command(inspect_command)
cli.add_command(audit_command)


def main():  # pragma: no cover - console entry point
    cli()


if __name__ == "__main__":  # pragma: no cover - ``python -m obsprep.cli.main``
    main()
