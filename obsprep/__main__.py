"""``python -m obsprep`` runs the command line."""

from .cli.main import cli

cli()
