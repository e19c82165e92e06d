"""Writing the audit report folder: CSV tables, a readable Markdown summary, figures."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from obsprep.writers.atomic import atomic_path


def _fmt(value, digits=3) -> str:
    if isinstance(value, (float, np.floating)):
        return "" if not np.isfinite(value) else f"{value:.{digits}g}"
    return str(value)


def markdown_table(frame: pd.DataFrame, columns) -> str:
    """A Markdown table of ``columns`` of ``frame`` (numbers with 3 significant digits)."""
    columns = [c for c in columns if c in frame]
    lines = ["| " + " | ".join(columns) + " |", "|" + "---|" * len(columns)]
    for _, row in frame.iterrows():  # report rows (sensors), not observations
        lines.append("| " + " | ".join(_fmt(row[c]) for c in columns) + " |")
    return "\n".join(lines)


def summary_markdown(result) -> str:
    """The text of ``summary.md``."""
    s = result.summary
    lines = [f"# obsprep error audit of {result.run.directory}", ""]
    lines += [f"Super-observation files: {', '.join(p.name for p in result.run.files)}.",
              f"Model: {result.model_description}.", ""]
    flagged = s[s["flag"].isin(["too_small", "too_large"])] if len(s) else s
    lines.append("## Flags")
    lines.append("")
    if len(flagged) == 0:
        lines.append("No sensor is flagged: the assigned errors are consistent with the data "
                     f"(tolerance: a factor {result.tolerance:g}).")
    for _, row in flagged.iterrows():
        lines.append(f"- **{row['sensor']}** ({row['quantity']}): {row['flag'].replace('_', ' ')}; "
                     f"suggested error scale factor **{row['suggested_factor']:.2f}** "
                     f"(± {row['suggested_factor_se']:.2g}). {row['reason']}.")
    lines += ["", "## Per sensor and quantity", ""]
    lines.append(markdown_table(s, ["sensor", "quantity", "files", "read", "kept", "superobs",
                                    "median_raw_error", "median_superobs_error", "spread_ratio",
                                    "innovation_ratio", "innovation_factor", "tc_ratio",
                                    "suggested_factor", "flag"]))
    lines += ["", "Rejected raw observations per reason (all quantities of a sensor):", ""]
    reasons = [c for c in s if c.startswith("rejected_")]
    if reasons:
        per_sensor = s.drop_duplicates("sensor")
        lines.append(markdown_table(per_sensor, ["sensor", "read", "kept", *reasons]))
    lines += ["", "Verdicts:", ""]
    for _, row in s.iterrows():
        lines.append(f"- {row['sensor']} / {row['quantity']}: {row['flag']}: {row['reason']}")
    if len(result.collocation):
        lines += ["", "## Collocated pairs", "",
                  "var(a - b) against sigma_a² + sigma_b² for super-observations of two sensors "
                  "in the same cell, layer and slot (ratio 1 when the two errors are right "
                  "together).", ""]
        lines.append(markdown_table(result.collocation, ["quantity", "sensor_a", "sensor_b", "n",
                                                         "mean_difference", "ratio", "ratio_se"]))
    if len(result.triple):
        lines += ["", "## Triple collocation", "",
                  "Error of each sensor from three collocated sensors (Stoffelen 1998), with its "
                  "standard error, against the assigned super-observation error.", ""]
        lines.append(markdown_table(result.triple, ["quantity", "sensor", "with", "n", "sigma",
                                                    "sigma_se", "assigned", "ratio", "ratio_se"]))
    if len(result.innovations):
        lines += ["", "## Innovations", "",
                  "d = y - H(mean); ratio = var(d) / (sigma_o² + sigma_ens²); factor = the "
                  "scale of sigma_o that makes them consistent; sensitivity = the share of the "
                  "innovation variance the observation error accounts for.", ""]
        lines.append(markdown_table(result.innovations, [
            "sensor", "quantity", "n", "mean", "std", "ratio", "factor", "factor_se",
            "sensitivity", "factor_upper", "median_time_gap_h"]))
    if result.figures:
        lines += ["", "## Figures", ""]
        lines += [f"![{p.stem}]({p.name})" for p in result.figures]
    return "\n".join(lines) + "\n"


def write_report(result, out_dir, with_figures: bool = True) -> dict:
    """Write the report folder; returns name -> path of every file written."""
    from obsprep.audit import figures

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
        made = [figures.counts_map(so, out / "counts_map.png", shape, grid)]
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
    return written
