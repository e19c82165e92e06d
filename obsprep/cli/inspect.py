"""``obsprep inspect``: what a reader makes of a file, for setting up a new product."""

from __future__ import annotations

import click
import pandas as pd

from obsprep.cli.options import library_errors
from obsprep.model.table import WARNINGS


def file_warnings(table) -> list[str]:
    """The file's warnings as the build's ledger entry would carry them from reading and the
    physical-range check (:func:`obsprep.qc.basic.gross_range_check`, whose rejections are
    not shown here: inspect shows the reader's verdicts), without changing ``table``."""
    from obsprep.qc.basic import gross_range_check

    probe = pd.DataFrame({c: table[c] for c in ("value", "quantity", "rejected")})
    probe.attrs = {}
    gross_range_check(probe)
    return list(dict.fromkeys(list(table.attrs.get(WARNINGS, []))
                              + list(probe.attrs.get(WARNINGS, []))))


def describe_table(path, table) -> list[str]:
    """Lines describing one read file: kind, variables and units, quantities, time range,
    counts kept and rejected per reason (reader verdicts only; the build adds its checks), and
    the file's warnings (:func:`file_warnings`)."""
    lines = [f"{path}", f"  kind: {table.attrs.get('kind', '?')}"]
    variables = table.attrs.get("variables", {})
    if variables:
        lines.append("  variables: " + ", ".join(
            f"{name} [{units}]" if units else name for name, units in variables.items()))
    counts = table.groupby("quantity", observed=True).size()
    lines.append("  quantities: " + (", ".join(f"{q} {n}" for q, n in counts.items()) or "-"))
    time = table["time"].dropna()
    if len(time):
        span = f"{time.min():%Y-%m-%dT%H:%M:%S} .. {time.max():%Y-%m-%dT%H:%M:%S} UTC"
    else:
        span = "no valid time"
    lines.append(f"  time: {span}")
    rejected = table["rejected"].value_counts()
    rejected = rejected[rejected > 0]
    lines.append(f"  rows: {len(table)}, valid {int(table['rejected'].isna().sum())}, rejected "
                 + (", ".join(f"{r} {n}" for r, n in rejected.items()) if len(rejected) else "0"))
    lines.extend(f"  warning: {message}" for message in file_warnings(table))
    return lines


def describe_unclaimed(path, profile=None) -> list[str]:
    """Lines for a file no reader claims: its candidate variables, a ``[sources.reader]``
    profile guessed from them (TOML, unindented so it can be copied), and what the readers make
    of the file with that profile (added to ``profile``, the source's own, if any)."""
    import tomllib

    from obsprep import read
    from obsprep.exceptions import InputFileError
    from obsprep.readers.cf import open_dataset
    from obsprep.readers.onboarding import candidate_variables, profile_snippet

    ds = open_dataset(path, profile=profile or None, load=False)
    try:
        candidates = candidate_variables(ds)
        snippet = profile_snippet(ds, path)
    finally:
        ds.close()
    lines = [f"{path}", "  no reader claims this file; candidate variables "
                        "(name [units] (dimensions) standard_name: long_name):"]
    for c in candidates:
        lines.append(f"    {c.name} [{c.units or '-'}] ({', '.join(c.dimensions)}) "
                     f"{c.standard_name or '-'}: {c.long_name or '-'}"
                     + (f" (flag_meanings: {c.flag_meanings})" if c.flag_meanings else ""))
    lines.append("  a reader profile to start from (under the source's [[sources]] entry):")
    lines.extend(snippet.splitlines())
    guessed = tomllib.loads(snippet)["sources"]["reader"]
    merged = dict(profile or {})
    merged["variables"] = {**dict(merged.get("variables") or {}), **guessed["variables"]}
    try:
        table = read(path, reader_profile=merged)
    except InputFileError as exc:
        lines.append(f"  with this profile: {exc.reason}")
    else:
        lines.append("  with this profile:")
        lines.extend("  " + line for line in describe_table(path, table)[1:])
    return lines


def source_reading(config, source_name, kind):
    """(kind, reader options, reader profile) for reading files as source ``source_name`` of
    the build configuration ``config`` (both None: ``kind`` or auto, no options)."""
    if (config is None) != (source_name is None):
        raise click.UsageError("--config and --source go together")
    if config is None:
        return kind or "auto", {}, None
    from obsprep.settings.config import load_config

    sources = {s.sensor: s for s in load_config(config).sources}
    if source_name not in sources:
        raise click.BadParameter(f"no source '{source_name}' in {config}; sources: "
                                 f"{', '.join(sources)}", param_hint="--source")
    source = sources[source_name]
    return kind or source.kind, dict(source.options), source.reader or None


config_opt = click.option("--config", "config", type=click.Path(exists=True, dir_okay=False),
                          default=None, help="Build configuration whose source (--source) gives "
                                             "kind, reader options and reader profile.")
source_opt = click.option("--source", "source_name", metavar="SENSOR", default=None,
                          help="Source (sensor name) of --config to read the files as.")


def describe_readers() -> list[str]:
    """Lines listing the registered reader kinds in guessing order, with their description and
    their options (name: meaning), read from the readers' own declarations."""
    from obsprep.readers import registered_readers

    lines = []
    for kind, reader in registered_readers().items():
        lines.append(f"{kind}: {reader.description}")
        lines.extend(f"  option {name}: {meaning}" for name, meaning in reader.options.items())
    return lines


@click.command("inspect")
@click.argument("files", nargs=-1, type=click.Path(dir_okay=False))
@click.option("--kind", default=None, help="Reader kind (default: auto, or the source's).")
@click.option("--kinds", "list_kinds", is_flag=True,
              help="List the reader kinds (in the order auto asks them) and their options.")
@config_opt
@source_opt
@library_errors
def inspect_command(files, kind, list_kinds, config, source_name):
    """Show what obsprep reads from observation FILES: the reader kind, the variables used and
    their units, the time range, the rows kept or rejected by the reader, per reason, and the
    file's warnings.  For a file no reader claims: its candidate variables and a reader
    profile ([sources.reader]) guessed from them, to start from.

    A file that cannot be read gets one line naming the file and the problem; the others are
    still shown (exit status 1 if any failed).

    Example: obsprep inspect 20261119-DEMO-L2P_GHRSST-SSTskin.nc
    or, with a source's reader options and profile: obsprep inspect FILE --config nightly.toml
    --source sst_l3
    """
    from obsprep import read
    from obsprep.exceptions import InputFileError, NoReaderError, NotObservationsError

    if list_kinds:
        for line in describe_readers():
            click.echo(line)
        return
    if not files:
        raise click.UsageError("give one or more FILES (or --kinds)")
    kind, options, profile = source_reading(config, source_name, kind)
    failed = 0
    for path in files:
        try:
            table = read(path, kind=kind, reader_profile=profile, **options)
        except InputFileError as exc:
            failed += 1
            click.echo(f"error: {exc}", err=True)
            if isinstance(exc, NoReaderError) and not isinstance(exc, NotObservationsError) \
                    and kind in (None, "auto"):
                for line in describe_unclaimed(path, profile):
                    click.echo(line)
            continue
        for line in describe_table(path, table):
            click.echo(line)
    if failed:
        raise click.ClickException(f"{failed} of {len(files)} file(s) could not be read")
