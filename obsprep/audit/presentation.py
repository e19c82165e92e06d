"""What the audit report shows, shared by the Markdown summary (:mod:`.report`), the HTML
report (:mod:`.html`) and the figures (:mod:`.figures`): the tables in their order, the number
format, the factor with its interval, the section texts and figure captions.

One convention everywhere: the factor F is the number by which the assigned error should be
multiplied (F > 1: errors too small; F < 1: errors too large).  Numbers are printed with
significant digits, never with a fixed number of decimals, so that F = 0.003 is never "0.00".
Tables are made from every column their DataFrame has, so new columns appear unasked.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

#: significant digits of every number in the reports
SIGNIFICANT_DIGITS = 3
#: summary columns shown in the verdict table rather than in the per-sensor table
VERDICT_TEXT_COLUMNS = ("conclusion", "reason")
#: summary columns by the table they are shown in (by name prefix): question (i), the raw-noise
#: check; the estimated correlation and representation error; the ledger's rejections
NOISE_PREFIX, ESTIMATE_PREFIX, REJECTED_PREFIX = "noise_", "estimate", "rejected_"
#: header of the factor in the verdict table
FACTOR_HEADER = "F (95 % interval): multiply the assigned error by F"
#: flags meaning "the assigned error is wrong"
WRONG_FLAGS = ("too_small", "too_large")


def format_value(value, digits: int = SIGNIFICANT_DIGITS) -> str:
    """A table cell as text: whole numbers as integers, other numbers with ``digits``
    significant digits (so 0.00298 stays "0.00298", 335.4 is "335"), missing as ""."""
    if value is None or (isinstance(value, (float, np.floating)) and not np.isfinite(value)):
        return ""
    if isinstance(value, (bool, np.bool_)):
        return str(bool(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if value == 0.0:
            return "0"
        if value.is_integer() and abs(value) < 1e15:
            return str(int(value))
        # the decimal exponent after rounding to ``digits`` (9.996 -> 10.0, exponent 1)
        magnitude = math.floor(math.log10(abs(float(f"{value:.{digits - 1}e}"))))
        if magnitude >= digits - 1:              # 335.42 -> "335", 29864.3 -> "29864"
            return f"{value:.0f}"
        if magnitude < -4:
            return f"{value:.{digits - 1}e}"
        return f"{value:.{max(digits - 1 - magnitude, 0)}f}"
    try:
        if pd.isna(value):
            return ""
    except (TypeError, ValueError):  # an array-like cell: shown as it is
        pass
    return str(value)


def _number(row, name) -> float:
    value = row.get(name, np.nan)
    try:
        return float(value)
    except (TypeError, ValueError):
        return np.nan


def factor_of(row) -> dict:
    """The factor F of one summary row, with its interval or standard error where given.

    Reads ``factor``, ``factor_low``, ``factor_high`` (the new verdict) or, before them,
    ``suggested_factor`` and ``suggested_factor_se``.  Returns ``factor``, ``low``, ``high``,
    ``se`` (NaN where absent) and ``text``: e.g. "0.00298 (0.0025 to 0.0035)" or "2.17 ± 0.017".
    """
    factor = _number(row, "factor")
    if not np.isfinite(factor):
        factor = _number(row, "suggested_factor")
    low, high = _number(row, "factor_low"), _number(row, "factor_high")
    se = _number(row, "factor_se")
    if not np.isfinite(se):
        se = _number(row, "suggested_factor_se")
    if not np.isfinite(factor):
        text = ""
    elif np.isfinite(low) and np.isfinite(high):
        text = f"{format_value(factor)} ({format_value(low)} to {format_value(high)})"
    elif np.isfinite(se):
        text = f"{format_value(factor)} ± {format_value(se, 2)}"
    else:
        text = format_value(factor)
    return {"factor": factor, "low": low, "high": high, "se": se, "text": text}


def verdict_table(summary: pd.DataFrame) -> pd.DataFrame:
    """One row per sensor and quantity: sensor, quantity, flag, F (with its interval), the
    conclusion where the summary has one, and the reason."""
    rows = []
    for _, row in summary.iterrows():  # report rows (sensors), not observations
        entry = {"sensor": row.get("sensor", ""), "quantity": row.get("quantity", ""),
                 "flag": row.get("flag", ""),
                 FACTOR_HEADER: factor_of(row)["text"]}
        for name in VERDICT_TEXT_COLUMNS:
            if name in summary:
                entry[name] = row.get(name, "")
        rows.append(entry)
    return pd.DataFrame(rows)


def sensor_columns(summary: pd.DataFrame) -> list:
    """Columns of the per-sensor table: every column not shown in another table (the verdict
    texts, the raw-noise check, the estimates to configure, the rejection counts)."""
    return [c for c in summary if c not in VERDICT_TEXT_COLUMNS
            and not str(c).startswith((NOISE_PREFIX, ESTIMATE_PREFIX, REJECTED_PREFIX))]


def prefixed_table(summary: pd.DataFrame, prefix: str) -> pd.DataFrame:
    """Sensor, quantity and the summary columns starting with ``prefix`` (empty when none)."""
    columns = [c for c in summary if str(c).startswith(prefix)]
    if not columns or "sensor" not in summary:
        return pd.DataFrame()
    return summary[[c for c in ("sensor", "quantity") if c in summary] + columns]


def rejection_table(summary: pd.DataFrame) -> pd.DataFrame:
    """Per sensor: read, kept and the rejections per reason (columns with any rejection)."""
    reasons = [c for c in summary if str(c).startswith(REJECTED_PREFIX)]
    if not reasons or "sensor" not in summary:
        return pd.DataFrame()
    per_sensor = summary.drop_duplicates("sensor")
    used = [c for c in reasons if pd.to_numeric(per_sensor[c], errors="coerce").fillna(0).gt(0)
            .any()]
    return per_sensor[[c for c in ("sensor", "read", "kept") if c in summary] + used]


#: what each table of the report is, shared by the Markdown and the HTML report
SECTIONS = {
    "verdicts": ("Verdicts: is the super-observation error right?",
                 "One row per sensor and quantity: the factor F by which the assigned "
                 "super-observation error should be multiplied, with its 95 % interval, from "
                 "the innovations and collocations that can see it."),
    "noise": ("Raw noise against the spread inside cells",
              "A one-sided check of the uncorrelated part of the raw error: sub-cell variability "
              "only adds to the spread, so a ratio clearly below 1 says the raw noise is "
              "overstated, above 1 that it is understated or the truth varies inside cells. It "
              "does not decide the verdict."),
    "configuration": ("Estimated correlation and representation error",
                      "From how the innovation variance changes with the number of raw values "
                      "per super-observation, with standard errors."),
    "summary": ("Per sensor and quantity",
                "Counts, errors and the combined estimate (column names as in summary.csv)."),
    "rejections": ("Rejected raw observations",
                   "Per sensor (all its quantities), the reasons with any rejection."),
    "collocation": ("Collocated pairs",
                    "var(a - b) against sigma_a² + sigma_b² for super-observations of two "
                    "sensors in the same cell, layer and slot (ratio 1 when the two errors are "
                    "right together)."),
    "triple": ("Triple collocation",
               "Error of each sensor from three collocated sensors [Stoffelen1998], with its "
               "standard error, against the assigned super-observation error."),
    "innovations": ("Innovations",
                    "d = y - H(mean); ratio = var(d) / (sigma_o² + sigma_ens²); factor = the F "
                    "by which sigma_o should be multiplied to make them consistent; "
                    "sensitivity = the share of the innovation variance the observation error "
                    "accounts for."),
}

#: captions of the figures, by file stem
CAPTIONS = {
    "factors": "The factor F by which each assigned super-observation error should be "
               "multiplied, with its 95 % interval, coloured by the verdict; grey band: within "
               "the tolerance.",
    "counts_map": "Super-observations per model grid cell, one panel per sensor (all slots and "
                  "layers). Dark grey: land from the grid's sea mask; light grey: sea without "
                  "data.",
    "innovation_map": "Mean innovation (observation minus model) per cell, one panel per sensor "
                      "and quantity, in the quantity's units; colours centred on zero, light "
                      "grey where there is no data.",
    "normalised_innovations": "Normalised innovations d / sqrt(sigma_o² + sigma_ens²) against "
                              "the standard normal density: wider than N(0, 1) means errors "
                              "too small, narrower too large.",
    "spread_vs_error": "Within-cell spread of the raw values against their assigned error: "
                       "rms spread per bin of assigned error with its standard error, the 1:1 "
                       "line and the fitted factor. The spread sees only the uncorrelated part "
                       "of the raw error (and grows with sub-cell variability).",
}


def report_tables(result) -> dict:
    """The report's tables in their order (name -> DataFrame, possibly empty); the per-sensor
    table holds only :func:`sensor_columns`."""
    s = result.summary
    return {"verdicts": verdict_table(s) if len(s) else s,
            "noise": prefixed_table(s, NOISE_PREFIX),
            "summary": s[sensor_columns(s)] if len(s) else s,
            "configuration": prefixed_table(s, ESTIMATE_PREFIX),
            "rejections": rejection_table(s),
            "collocation": result.collocation, "triple": result.triple,
            "innovations": result.innovations}
