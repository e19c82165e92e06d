"""The audit report as one self-contained HTML file (``report.html``).

Everything is inside the file: inline CSS, the figures as PNG ``data:`` URIs ([RFC2397], base64),
no JavaScript, no external resource, so it opens from disk in any browser and can be mailed.
The tables come in the order of :func:`obsprep.audit.presentation.report_tables`: the verdicts first,
the raw-noise check, the per-sensor table, the estimates to configure, the rejections,
collocations, triple collocation, innovations; then the figures with captions.  Tables are rendered from every column
of the audit's DataFrames (new columns appear unasked); numbers use
:func:`obsprep.audit.presentation.format_value`; every text is escaped (:func:`html.escape`).
Each table carries ``data-table="<name>"`` and each figure ``data-figure="<file stem>"`` so that
tests and scripts can find them.
"""

from __future__ import annotations

import base64
import html
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from obsprep.audit.presentation import (
    CAPTIONS,
    SECTIONS,
    WRONG_FLAGS,
    format_value,
    report_tables,
)

STYLE = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; margin: 1.5em auto;
       max-width: 1400px; padding: 0 1em; color: #1a1a1a; background: #fff; line-height: 1.4; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 1.8em;
     border-bottom: 1px solid #ccc; padding-bottom: 0.2em; }
p.note { color: #444; max-width: 80em; }
div.scroll { overflow-x: auto; margin: 0.5em 0 1em 0; }
table { border-collapse: collapse; font-size: 0.85em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.5em; vertical-align: top; }
th { background: #eef1f4; position: sticky; top: 0; text-align: left; }
td.number { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.missing { background: #fafafa; }
td.text { min-width: 20em; }
tr:nth-child(even) td { background-color: #fbfbfb; }
td.flag { font-weight: bold; white-space: nowrap; }
table[data-table="verdicts"] td:nth-child(4) { white-space: nowrap; }
td.flag-ok { color: #1b5e20; }
td.flag-too_small, td.flag-too_large { color: #b71c1c; background: #fdecea; }
td.flag-inconclusive { color: #8a5a00; background: #fff6e0; }
td.flag-no_evidence { color: #555; }
figure { margin: 1.5em 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { color: #333; font-size: 0.9em; max-width: 80em; }
pre { background: #f4f4f4; border: 1px solid #ddd; padding: 0.5em; overflow-x: auto; }
dl.meta dt { font-weight: bold; float: left; clear: left; width: 11em; }
dl.meta dd { margin-left: 12em; }
"""


def _escape(value) -> str:
    return html.escape(str(value), quote=True)


def _is_number(value) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and \
        not isinstance(value, (bool, np.bool_))


def html_table(frame: pd.DataFrame, name: str, columns=None) -> str:
    """An HTML table of ``columns`` (default all) of ``frame``; ``name`` goes into
    ``data-table``.  A ``flag`` column gets a class per flag value (coloured by the CSS)."""
    columns = [c for c in (frame.columns if columns is None else columns) if c in frame]
    head = "".join(f"<th scope=\"col\">{_escape(c)}</th>" for c in columns)
    body = []
    for _, row in frame.iterrows():  # report rows (sensors, pairs), not observations
        cells = []
        for column in columns:
            value = row[column]
            text = format_value(value)
            if column == "flag" and text:
                classes = f"flag flag-{_escape(text)}"
            elif not text:
                classes = "missing"
            elif _is_number(value):
                classes = "number"
            elif len(text) > 60:
                classes = "text"
            else:
                classes = ""
            attribute = f" class=\"{classes}\"" if classes else ""
            cells.append(f"<td{attribute}>{_escape(text)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (f"<div class=\"scroll\"><table data-table=\"{_escape(name)}\" "
            f"data-rows=\"{len(frame)}\">\n<thead><tr>{head}</tr></thead>\n<tbody>\n"
            + "\n".join(body) + "\n</tbody></table></div>")


def png_data_uri(path) -> str:
    """The PNG file at ``path`` as a ``data:image/png;base64,...`` URI [RFC2397]."""
    return "data:image/png;base64," + base64.b64encode(Path(path).read_bytes()).decode("ascii")


def _section(title, note, table) -> str:
    parts = [f"<h2>{_escape(title)}</h2>"]
    if note:
        parts.append(f"<p class=\"note\">{_escape(note)}</p>")
    parts.append(table)
    return "\n".join(parts)


def _table_or_absence(frame, name, why_absent, columns=None) -> str:
    if frame is None or len(frame) == 0:
        return f"<p class=\"note\" data-empty-table=\"{_escape(name)}\">{_escape(why_absent)}</p>"
    return html_table(frame, name, columns)


def report_html(result) -> str:
    """The text of ``report.html`` for an :class:`obsprep.audit.AuditResult`."""
    s = result.summary
    flags = s["flag"] if len(s) and "flag" in s else pd.Series(dtype=object)
    wrong = int(flags.isin(WRONG_FLAGS).sum())
    counts = ", ".join(f"{int(n)} {_escape(flag)}" for flag, n in flags.value_counts().items())
    files = ", ".join(p.name for p in result.run.files)
    created = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    title = f"obsprep error audit of {result.run.directory}"
    parts = [
        "<!DOCTYPE html>", "<html lang=\"en\">", "<head>", "<meta charset=\"utf-8\">",
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
        f"<title>{_escape(title)}</title>", f"<style>{STYLE}</style>", "</head>", "<body>",
        f"<h1>{_escape(title)}</h1>",
        "<dl class=\"meta\">",
        f"<dt>written</dt><dd>{_escape(created)}</dd>",
        f"<dt>super-observations</dt><dd>{_escape(files)}</dd>",
        f"<dt>model</dt><dd>{_escape(result.model_description)}</dd>",
        f"<dt>tolerance</dt><dd>a factor {_escape(format_value(float(result.tolerance)))}</dd>",
        f"<dt>verdicts</dt><dd>{counts or 'none'}; {wrong} flagged too small or too large</dd>",
        "</dl>",
        "<p class=\"note\">F is the factor by which the assigned error should be multiplied: "
        "F &gt; 1 means the assigned errors are too small, F &lt; 1 too large, F = 1 right.</p>",
    ]
    absent = {"verdicts": "No sensor in the run.",
              "noise": "No raw-noise check in the summary.",
              "summary": "No sensor in the run.",
              "configuration": "No estimate of correlation or representation error in the "
                               "summary.",
              "rejections": "No ledger of rejections in the run.",
              "collocation": "No two sensors of one quantity share a cell, layer and slot.",
              "triple": "No three sensors of one quantity overlap.",
              "innovations": "No model given (--ensemble or --background): no innovations."}
    for key, frame in report_tables(result).items():
        title_text, note = SECTIONS[key]
        parts.append(_section(title_text, note, _table_or_absence(frame, key, absent[key])))
        suggested = getattr(result, "suggested_configuration", "")
        if key == "configuration" and suggested:
            parts.append("<p class=\"note\">Configuration lines that would make the errors "
                         "consistent (estimated; check before use):</p>")
            parts.append(f"<pre data-configuration=\"suggested\">{_escape(suggested)}</pre>")
    parts.append("<h2>Figures</h2>")
    if not result.figures:
        parts.append("<p class=\"note\">No figures (written with --no-figures, or nothing to "
                     "draw).</p>")
    for path in result.figures:
        stem = Path(path).stem
        caption = CAPTIONS.get(stem, stem)
        parts.append(f"<figure data-figure=\"{_escape(stem)}\">"
                     f"<img src=\"{png_data_uri(path)}\" alt=\"{_escape(caption)}\">"
                     f"<figcaption>{_escape(caption)} ({_escape(Path(path).name)})</figcaption>"
                     "</figure>")
    parts += ["</body>", "</html>"]
    return "\n".join(parts) + "\n"
