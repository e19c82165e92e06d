"""``obsprep audit``: check the assigned errors of a build against the data and a model."""

from __future__ import annotations

import click

from obsprep.cli.options import library_errors


@click.command("audit")
@click.argument("run_dir", type=click.Path(exists=True, file_okay=False))
@click.option("--ensemble", "ensemble", multiple=True, metavar="FILE",
              help="Ensemble on the model grid: member files (repeat the option, or a quoted "
                   "glob) or one file with a member dimension.")
@click.option("--background", metavar="FILE", default=None,
              help="A single model state instead of an ensemble (innovation statistics only).")
@click.option("--analysis", metavar="FILE", default=None,
              help="An analysis state, for the analysis-residual estimate of the observation "
                   "error (a diagnostic, biased toward the assigned errors, unless "
                   "--analysis-factors says the analysis used updated errors).")
@click.option("--analysis-factors", metavar="CSV", default=None,
              type=click.Path(exists=True, dir_okay=False),
              help="The summary.csv of the audit whose factors the analysis was made with "
                   "(columns sensor, factor): the analysis-residual estimate then decides.")
@click.option("--out", type=click.Path(file_okay=False), default=None,
              help="Report folder (default RUN_DIR/audit).")
@click.option("--tolerance", type=click.FloatRange(min=1.0, min_open=True), default=1.5,
              show_default=True, help="Flag errors off by more than this factor.")
@click.option("--config", type=click.Path(exists=True, dir_okay=False), default=None,
              help="The build configuration, to find the grid files if the output does not.")
@click.option("--no-figures", is_flag=True, help="Skip the PNG figures.")
@library_errors
def audit_command(run_dir, ensemble, background, analysis, analysis_factors, out, tolerance, config,
                  no_figures):
    """Audit the observation errors of the build output in RUN_DIR and write a report.

    Every output set in RUN_DIR is verified against its manifest first: a mixed or incomplete
    set, or a run without super-observations, is refused with one line.

    Example: obsprep audit demo-run/out --ensemble demo-run/ensemble/ensemble_20261120.nc
    """
    from obsprep.audit import audit

    if ensemble and background:
        raise click.UsageError("give --ensemble or --background, not both")
    if analysis_factors and not analysis:
        raise click.UsageError("--analysis-factors describes the analysis: give --analysis too")
    result = audit(run_dir, ensemble=list(ensemble), background=background, analysis=analysis,
                   out=out, tolerance=tolerance, config=config, figures=not no_figures,
                   analysis_factors=_factors_from(analysis_factors) if analysis_factors else None)
    summary = result.summary
    click.echo(f"{'sensor':<18}{'quantity':<26}{'superobs':>9}{'F':>7}{'95 % interval':>16}  verdict")
    for _, row in summary.iterrows():  # one line per sensor and quantity
        factor, low, high = row["factor"], row["factor_low"], row["factor_high"]
        text = f"{factor:7.3g}" if factor == factor else f"{'-':>7}"
        interval = f"{low:.3g} to {high:.3g}" if low == low and high == high else "-"
        click.echo(f"{row['sensor']:<18}{row['quantity']:<26}{row['superobs']:>9}{text}"
                   f"{interval:>16}  {row['conclusion']}")
    for _, row in result.flagged.iterrows():
        click.echo(f"FLAG {row['sensor']} ({row['quantity']}): {row['reason']}")
    if result.suggested_configuration:
        click.echo("configuration that would make the errors consistent (estimated; check it):")
        click.echo(result.suggested_configuration)
    click.echo(f"report: {result.outputs['summary.md'].parent}")


def _factors_from(path) -> dict:
    """Output sensor -> factor F from an earlier audit's summary.csv (the first row per sensor)."""
    import pandas as pd

    from obsprep.exceptions import InputFileError

    table = pd.read_csv(path)
    if not {"sensor", "factor"} <= set(table.columns):
        raise InputFileError(path, f"expected the columns sensor and factor of an audit summary, "
                                   f"found {', '.join(map(str, table.columns))}")
    table = table[table["factor"].notna()].drop_duplicates("sensor")
    return dict(zip(table["sensor"].astype(str), table["factor"].astype(float)))
