"""Writing the audit report folder: CSV tables, a readable Markdown summary, the figures
(:mod:`.figures`) and the self-contained HTML report (:mod:`.html`); what the tables hold and
how numbers are printed is :mod:`.presentation`.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from obsprep.audit import figures
from obsprep.audit.html import report_html
from obsprep.audit.presentation import (
    CAPTIONS,
    SECTIONS,
    WRONG_FLAGS,
    factor_of,
    format_value,
    report_tables,
)
from obsprep.writers.atomic import atomic_path


def markdown_table(frame: pd.DataFrame, columns=None) -> str:
    """A Markdown table of ``columns`` (default all) of ``frame``, numbers by
    :func:`format_value`; "|" in text is escaped."""
    columns = [c for c in (frame.columns if columns is None else columns) if c in frame]
    if not columns:
        return "(no columns)"

    def cell(value):
        return format_value(value).replace("|", "\\|").replace("\n", " ")

    lines = ["| " + " | ".join(cell(c) for c in columns) + " |", "|" + "---|" * len(columns)]
    for _, row in frame.iterrows():  # report rows (sensors), not observations
        lines.append("| " + " | ".join(cell(row[c]) for c in columns) + " |")
    return "\n".join(lines)


def summary_markdown(result) -> str:
    """The text of ``summary.md``."""
    s = result.summary
    lines = [f"# obsprep error audit of {result.run.directory}", ""]
    lines += [f"Super-observation files: {', '.join(p.name for p in result.run.files)}.",
              f"Model: {result.model_description}.", "",
              "F is the factor by which the assigned error should be multiplied: F > 1 means "
              "the errors are too small, F < 1 too large.", ""]
    flagged = s[s["flag"].isin(WRONG_FLAGS)] if len(s) and "flag" in s else s.iloc[0:0]
    lines += ["## Flags", ""]
    if len(flagged) == 0:
        lines.append(f"No sensor is flagged too small or too large (tolerance: a factor "
                     f"{result.tolerance:g}).")
        lines.append("")
    for _, row in flagged.iterrows():
        f = factor_of(row)
        interval = f["text"][len(format_value(f["factor"])):]
        lines.append(f"- **{row['sensor']}** ({row['quantity']}): "
                     f"{str(row['flag']).replace('_', ' ')}; multiply the assigned error by "
                     f"F = **{format_value(f['factor'])}**{interval}. {row.get('reason', '')}.")
    undecided = s[s["flag"] == "inconclusive"] if len(s) and "flag" in s else s.iloc[0:0]
    for _, row in undecided.iterrows():
        lines.append(f"- {row['sensor']} ({row['quantity']}): "
                     f"{row.get('conclusion', 'inconclusive')}; F = {factor_of(row)['text']}.")
    for key, frame in report_tables(result).items():
        if frame is not None and len(frame):
            title, text = SECTIONS[key]
            lines += ["", f"## {title}", "", text, "", markdown_table(frame)]
            if key == "configuration" and getattr(result, "suggested_configuration", ""):
                lines += ["", "Configuration lines that would make the errors consistent "
                          "(estimated; check before use):", "", "```toml",
                          result.suggested_configuration, "```"]
    if result.figures:
        lines += ["", "## Figures", ""]
        for p in result.figures:
            lines += [f"![{p.stem}]({p.name})", "", CAPTIONS.get(p.stem, ""), ""]
    return "\n".join(lines) + "\n"


def write_report(result, out_dir, with_figures: bool = True) -> dict:
    """Write the report folder; returns name -> path of every file written."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written = {}
    tables = {"summary.csv": result.summary, "collocation.csv": result.collocation,
              "triple_collocation.csv": result.triple, "innovations.csv": result.innovations}
    for name, frame in tables.items():
        with atomic_path(out / name) as tmp:
            frame.to_csv(tmp, index=False)
        written[name] = out / name
    if with_figures:
        shape, grid, so = result.grid_shape, result.grid, result.run.superobs
        correlation = {sensor: result.run.correlation(sensor) for sensor in so["sensor"].unique()}
        made = [figures.factor_intervals(result.summary, out / "factors.png", result.tolerance)
                if len(result.summary) else None,
                figures.counts_map(so, out / "counts_map.png", shape, grid)]
        if result.table is not None:
            made.append(figures.innovation_map(result.table, out / "innovation_map.png", shape,
                                               grid))
            made.append(figures.normalised_innovation_histograms(
                result.table, out / "normalised_innovations.png"))
        made.append(figures.spread_vs_error(so, out / "spread_vs_error.png", correlation))
        result.figures = [p for p in made if p is not None]
        written.update({p.name: p for p in result.figures})
    with atomic_path(out / "summary.md") as tmp:
        Path(tmp).write_text(summary_markdown(result), encoding="utf-8")
    written["summary.md"] = out / "summary.md"
    with atomic_path(out / "report.html") as tmp:
        Path(tmp).write_text(report_html(result), encoding="utf-8")
    written["report.html"] = out / "report.html"
    return written
