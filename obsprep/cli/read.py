"""``obsprep read``: observation files to the observation table (Parquet or CSV)."""

from __future__ import annotations

from pathlib import Path

import click

from obsprep.cli.inspect import config_opt, source_opt, source_reading
from obsprep.cli.options import library_errors


@click.command("read")
@click.argument("files", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("--kind", default=None, help="Reader kind (default: auto, or the source's).")
@click.option("--sensor", default="", help="Sensor name written in the sensor column.")
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False),
              help="Output table, .parquet or .csv.")
@config_opt
@source_opt
@library_errors
def read_command(files, kind, sensor, output, config, source_name):
    """Read observation FILES into one observation table.

    Example: obsprep read alt_a_20261119.nc -o table.parquet
    (with --config nightly.toml --source NAME: as that source reads them)
    """
    from obsprep import read
    from obsprep.model.table import concat_tables
    from obsprep.writers import atomic_path

    suffix = Path(output).suffix.lower()
    if suffix not in (".parquet", ".csv"):
        raise click.BadParameter(f"expected a .parquet or .csv file name, got '{output}'", param_hint="--output")
    kind, options, profile = source_reading(config, source_name, kind)
    options["sensor"] = sensor or source_name or ""
    tables = [read(f, kind=kind, reader_profile=profile, **options) for f in files]
    table = concat_tables(tables)
    with atomic_path(output) as tmp:
        if suffix == ".parquet":
            table.to_parquet(tmp, index=False)
        else:
            table.to_csv(tmp, index=False)
    n_kept = int(table["rejected"].isna().sum())
    click.echo(f"{len(table)} observations from {len(files)} file(s), {n_kept} not rejected by the reader -> {output}")
