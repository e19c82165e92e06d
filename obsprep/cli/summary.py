"""The short summary table printed at the end of a build."""

from __future__ import annotations

from obsprep.run.ledger import NO_FILES, UNREADABLE, reason_totals
from obsprep.settings.stages import quantities_on_defaults

#: the summary's name of each error setting
_SETTING_NAMES = {"representation_error": "representation error", "error_floor": "error floor"}


def error_defaults_line(cfg, superobs) -> str:
    """One line naming the output quantities (with their sensors) whose representation error
    or error floor is the quantity's default rather than the configuration's."""
    present = list(dict.fromkeys(superobs["quantity"])) if len(superobs) else []
    on_defaults = quantities_on_defaults(cfg.superobs, present)
    parts = []
    for setting, quantities in on_defaults.items():
        if not quantities:
            continue
        named = []
        for q in quantities:
            sensors = ", ".join(dict.fromkeys(superobs.loc[superobs["quantity"] == q, "sensor"]))
            named.append(f"{q} ({sensors})")
        parts.append(f"{_SETTING_NAMES[setting]} of {', '.join(named)}")
    if not parts:
        return "error settings: all from the configuration"
    return "error settings from the defaults: " + "; ".join(parts)


def summary_lines(result) -> list[str]:
    """Per-sensor lines (files, unreadable, read, kept, super-observations, main rejection
    reasons), the quantities whose error settings are defaults, the files written, and last
    the line stating the run's outcome.  Problems (an
    unreadable file, a source without files, warnings) are logged to stderr as they are found,
    not repeated here."""
    superobs = result.superobs
    lines = [f"{'sensor':<18}{'files':>6}{'bad':>5}{'read':>12}{'kept':>12}{'superobs':>10}  rejected (main reasons)"]
    sensors = list(dict.fromkeys(e.sensor for e in result.ledger.entries))
    for sensor in sensors:
        entries = [e for e in result.ledger.entries if e.sensor == sensor]
        out_name = result.config.output_sensor(sensor)
        n_super = int((superobs["sensor"] == out_name).sum()) if len(superobs) else 0
        reasons = reason_totals(entries)
        main = ", ".join(f"{k} {v}" for k, v in list(reasons.items())[:3]) or "-"
        files = [e for e in entries if e.status != NO_FILES]
        lines.append(f"{sensor:<18}{len(files):>6}{sum(e.status == UNREADABLE for e in files):>5}"
                     f"{sum(e.read for e in entries):>12}{sum(e.kept for e in entries):>12}{n_super:>10}  {main}")
    if len(superobs):
        counts = superobs.groupby("quantity").size()
        lines.append("super-observations per quantity: " + ", ".join(f"{q} {n}" for q, n in counts.items()))
        lines.append(error_defaults_line(result.config, superobs))
    for key, path in result.outputs.items():
        lines.append(f"wrote {key}: {path}")
    if result.outcome is not None:
        lines.append(result.outcome.line())
    return lines
