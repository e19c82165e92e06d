"""``python -m obsprep`` runs the command line."""

from obsprep.cli.main import cli

cli()
