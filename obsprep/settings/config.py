"""Build configuration: TOML read, validated against ``schemas/config.schema.json``, resolved.

A bad configuration raises :class:`~obsprep.exceptions.ConfigError` whose message names the
offending key as a dotted path (``sources[2].error.rule``) and says what is wrong, with a
suggestion when a key looks like a typo of a known one.
"""

from __future__ import annotations

import copy
import datetime as dt
import difflib
import glob
import json
import os
import re
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import jsonschema
import numpy as np

from obsprep.exceptions import ConfigError
from obsprep.model.quantities import QUANTITIES
from obsprep.settings import placeholders
from obsprep.settings.qc import QcSettings
from obsprep.settings.stages import OutputSettings, SuperobsSettings, from_table


def load_schema(name: str = "config") -> dict:
    """Return the JSON schema ``schemas/<name>.schema.json`` shipped with the package."""
    text = resources.files("obsprep").joinpath("schemas", f"{name}.schema.json").read_text()
    return json.loads(text)


def _dotted(path) -> str:
    out = ""
    for part in path:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out


def _schema_at(schema: dict, path) -> dict:
    node = schema
    for part in path:
        if isinstance(part, int):
            node = node.get("items", {})
        else:
            node = node.get("properties", {}).get(part, {})
    return node


def validate_config_dict(raw: dict, source: str | None = None) -> None:
    """Validate a parsed configuration against the schema; raise ConfigError on the first problem."""
    schema = load_schema("config")
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(raw), key=lambda e: (list(map(str, e.absolute_path)), e.validator))
    if not errors:
        return
    err = errors[0]
    path = list(err.absolute_path)
    if err.validator == "additionalProperties":
        known = list(_schema_at(schema, path).get("properties", {}))
        extra = [k for k in err.instance if k not in known]
        key = _dotted(path + [extra[0]])
        hint = difflib.get_close_matches(extra[0], known, n=1)
        msg = "unknown key" + (f"; did you mean '{hint[0]}'?" if hint else f"; known keys: {', '.join(known)}")
        raise ConfigError(key, msg, source)
    if err.validator == "required":
        missing = re.findall(r"'([^']+)' is a required property", err.message)
        key = _dotted(path + missing[:1])
        raise ConfigError(key, "required key is missing", source)
    raise ConfigError(_dotted(path), err.message, source)


@dataclass
class ErrorRule:
    """How the raw error of one source is set (see :func:`obsprep.errors.rules.assign_errors`)."""

    rule: str
    value: float | dict | None = None
    factor: float = 1.0
    floor: float = 0.0
    table: dict | None = None
    add_in_quadrature: float | list | dict | None = None
    cap: float | None = None


@dataclass
class Source:
    """One observation source of the configuration."""

    sensor: str
    paths: list[str]
    kind: str = "auto"
    quantities: list[str] | None = None
    correlation: float = 0.0
    #: the within-group correlation falls off as exp(-d / correlation_length_km) when set
    correlation_length_km: float | None = None
    correlation_across_groups: float = 0.0
    valid_range: dict = field(default_factory=dict)
    error: ErrorRule = None
    options: dict = field(default_factory=dict)
    index: int = 0
    #: reader profile (``[sources.reader]``, see obsprep.readers.cf.READER_PROFILE_KEYS)
    reader: dict = field(default_factory=dict)
    #: quality-control settings (``[sources.qc]``, obsprep.qc.QcSettings)
    qc: object = None
    #: a required source that delivers nothing makes the build's outcome ``source_missing``
    required: bool = True

    def find_files(self, base_dir: Path, days) -> tuple[list[str], list[str]]:
        """The files of the source for the given UTC days (sorted per pattern, de-duplicated,
        absolute) and the expanded glob patterns that matched no file.

        A path without wildcards is listed whether or not it exists, so that a missing file is
        reported unreadable ("file not found") rather than dropped.
        """
        found, unmatched = [], []
        for pattern in self.paths:
            expanded = {placeholders.expand_path(pattern, day) for day in days}
            for pat in sorted(expanded):
                full = pat if os.path.isabs(pat) else str(base_dir / pat)
                matches = sorted(glob.glob(full))
                if not matches and not glob.has_magic(full):
                    matches = [full]  # listed as unreadable in the ledger, not silently dropped
                if not matches:
                    unmatched.append(full)
                found.extend(matches)
        seen, out = set(), []
        for f in found:
            f = os.path.normpath(f)
            if f not in seen:
                seen.add(f)
                out.append(f)
        return out, unmatched


#: longest assimilation window, and farthest its start or end from the analysis time, hours
#: (366 days): bounds the days whose files are listed and the slots a build allocates
MAX_WINDOW_HOURS = 366 * 24.0
#: most time slots in a window (a slot per minute of a 69-day window)
MAX_TIME_SLOTS = 100_000


@dataclass
class Window:
    """Assimilation window: analysis time, start/end (UTC datetime64[ns]) and slot length (s)."""

    analysis_time: np.datetime64
    start: np.datetime64
    end: np.datetime64
    slot_seconds: float

    @property
    def n_slots(self) -> int:
        span = (self.end - self.start) / np.timedelta64(1, "s")
        return max(1, int(np.ceil(span / self.slot_seconds - 1e-9)))

    def days(self) -> list[dt.datetime]:
        """UTC calendar days (as datetimes at 00:00) overlapping [start, end)."""
        first = self.start.astype("datetime64[D]")
        last = (self.end - np.timedelta64(1, "ns")).astype("datetime64[D]")
        days = np.arange(first, last + np.timedelta64(1, "D"), np.timedelta64(1, "D"))
        return [dt.datetime.fromisoformat(str(d)) for d in days]


@dataclass
class Config:
    """A validated, resolved build configuration."""

    raw: dict
    path: Path | None
    base_dir: Path
    date: dt.date
    window: Window
    grid: dict
    sources: list[Source]
    superobs: SuperobsSettings
    output: OutputSettings
    #: {(source index, file): group labels rejected as ``duplicate``}, set by the build's
    #: cross-file pre-pass (:func:`obsprep.qc.find_duplicates`) before the per-file work
    duplicate_groups: dict = field(default_factory=dict)

    def output_sensor(self, sensor: str) -> str:
        """The sensor name a source's super-observations are written under (after merging)."""
        for merged, members in self.superobs.merge_sensors.items():
            if sensor in members:
                return merged
        return sensor

    def output_quantity(self, quantity: str) -> str:
        """The quantity a raw value of ``quantity`` is averaged and written under (after
        ``superobs.merge_quantities``)."""
        for merged, members in self.superobs.merge_quantities.items():
            if quantity in members:
                return merged
        return quantity

    def output_path(self, out_dir=None) -> Path:
        directory = Path(out_dir) if out_dir else self.base_dir / self.output.directory
        name = placeholders.expand_path(self.output.name,
                                        dt.datetime.combine(self.date, dt.time()))
        return directory / name


def _parse_date(text: str, key: str, source) -> dt.date:
    try:
        return dt.date.fromisoformat(text)
    except (TypeError, ValueError):
        raise ConfigError(key, f"expected a date YYYY-MM-DD, got '{text}'", source) from None


#: analysis times accepted: datetime64[ns] spans 1677-09-21 .. 2262-04-11 and wraps around
#: silently beyond, so the window (up to MAX_WINDOW_HOURS either side) must fit inside
_ANALYSIS_RANGE = (np.datetime64("1679-01-01", "s"), np.datetime64("2261-01-01", "s"))


def _analysis_time(text: str, src) -> np.datetime64:
    """The analysis time (datetime64[ns]) of the ISO 8601 UTC ``text``; ConfigError naming
    ``window.analysis_time`` unless it parses and lies within :data:`_ANALYSIS_RANGE`."""
    try:
        seconds = np.datetime64(text.rstrip("Z").replace("+00:00", ""), "s")
    except ValueError:
        raise ConfigError("window.analysis_time", f"expected ISO 8601 UTC time, got '{text}'", src) from None
    earliest, latest = _ANALYSIS_RANGE
    if np.isnat(seconds) or not earliest <= seconds <= latest:
        raise ConfigError("window.analysis_time", f"expected a time between {earliest} and "
                          f"{latest}, got '{text}'", src)
    return np.datetime64(text.rstrip("Z").replace("+00:00", ""), "ns")


def _check_window_bounds(start_h, end_h, slot_h, src) -> None:
    """ConfigError naming the window key unless the window stays within
    :data:`MAX_WINDOW_HOURS` of the analysis time and is no longer than that (checked before
    the hours become nanoseconds, which would overflow)."""
    for name, value in (("start_hours", start_h), ("end_hours", end_h)):
        if abs(value) > MAX_WINDOW_HOURS:
            raise ConfigError(f"window.{name}", f"{value} h is more than {MAX_WINDOW_HOURS:g} h "
                              f"({MAX_WINDOW_HOURS / 24:g} days) from the analysis time", src)
    if end_h - start_h > MAX_WINDOW_HOURS:
        raise ConfigError("window.end_hours", f"a window of {end_h - start_h:g} h is longer than "
                          f"{MAX_WINDOW_HOURS:g} h ({MAX_WINDOW_HOURS / 24:g} days)", src)


def load_config(config, date: str | dt.date | None = None) -> Config:
    """Read, validate and resolve a build configuration.

    Parameters
    ----------
    config : str, path-like or dict
        Path of a TOML file, or an already parsed dict (relative paths then resolve against the
        current directory).
    date : str or datetime.date, optional
        Run date (YYYY-MM-DD); defaults to ``window.date`` of the config, else today (UTC).
    """
    if isinstance(config, dict):
        raw, path, base_dir, src = copy.deepcopy(config), None, Path.cwd(), None
    else:
        path = Path(config)
        src = str(path)
        try:
            with open(path, "rb") as fh:
                raw = tomllib.load(fh)
        except FileNotFoundError:
            raise ConfigError(None, "configuration file not found", src) from None
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(None, f"not valid TOML: {exc}", src) from None
        base_dir = path.resolve().parent
    validate_config_dict(raw, src)

    win = raw["window"]
    if date is None:
        date = win.get("date") or dt.datetime.now(dt.UTC).date().isoformat()
    run_date = date if isinstance(date, dt.date) else _parse_date(date, "--date", src)
    placeholders.check_time_text(win["analysis_time"], "window.analysis_time", src)
    text = placeholders.expand_time(win["analysis_time"], run_date)
    analysis = _analysis_time(text, src)
    start_h, end_h = float(win.get("start_hours", -24.0)), float(win.get("end_hours", 0.0))
    slot_h = float(win.get("slot_hours", 24.0))
    for name, value in (("start_hours", start_h), ("end_hours", end_h), ("slot_hours", slot_h)):
        if not np.isfinite(value):
            raise ConfigError(f"window.{name}", f"expected a finite number of hours, got {value}", src)
    if slot_h <= 0:
        raise ConfigError("window.slot_hours", f"expected a number of hours > 0, got {slot_h}", src)
    if end_h <= start_h:
        raise ConfigError("window.end_hours", f"must be after start_hours ({start_h}), got {end_h}", src)
    _check_window_bounds(start_h, end_h, slot_h, src)
    to_ns = lambda h: np.timedelta64(int(round(h * 3600e9)), "ns")  # noqa: E731
    window = Window(analysis, analysis + to_ns(start_h), analysis + to_ns(end_h),
                    slot_h * 3600.0)
    if window.n_slots > MAX_TIME_SLOTS:
        raise ConfigError("window.slot_hours", f"slots of {slot_h:g} h cut the {end_h - start_h:g} h "
                          f"window into {window.n_slots} slots, more than {MAX_TIME_SLOTS}", src)

    sources, seen = [], set()
    for n, s in enumerate(raw["sources"]):
        key = f"sources[{n}]"
        if s["sensor"] in seen:
            raise ConfigError(f"{key}.sensor", f"sensor name '{s['sensor']}' is used twice", src)
        seen.add(s["sensor"])
        for q in list(s.get("quantities", [])) + list(s.get("valid_range", {})):
            if q not in QUANTITIES:
                raise ConfigError(f"{key}.quantities", f"unknown quantity '{q}'; known: {', '.join(QUANTITIES)}", src)
        err = s["error"]
        if err["rule"] == "constant" and "value" not in err:
            raise ConfigError(f"{key}.error.value", "rule 'constant' needs a value", src)
        if isinstance(err.get("value"), dict):
            for q in err["value"]:
                if q not in QUANTITIES:
                    raise ConfigError(f"{key}.error.value.{q}", f"unknown quantity; known: {', '.join(QUANTITIES)}", src)
        reader = s.get("reader", {})
        if "good_flag_meanings" in reader and "good_flag_meanings" in s.get("options", {}) \
                and reader["good_flag_meanings"] != s["options"]["good_flag_meanings"]:
            raise ConfigError(f"{key}.reader.good_flag_meanings", "also given, differently, as "
                              f"{key}.options.good_flag_meanings; keep one", src)
        for i, pattern in enumerate(s["paths"]):
            placeholders.check_path_pattern(pattern, f"{key}.paths[{i}]", src)
        from obsprep.settings.errors import check_error_rule

        check_error_rule(err, f"{key}.error", src)
        sources.append(Source(
            sensor=s["sensor"], paths=list(s["paths"]), kind=s.get("kind", "auto"),
            quantities=s.get("quantities"), correlation=float(s.get("correlation", 0.0)),
            correlation_length_km=(float(s["correlation_length_km"])
                                   if "correlation_length_km" in s else None),
            correlation_across_groups=float(s.get("correlation_across_groups", 0.0)),
            valid_range=dict(s.get("valid_range", {})),
            error=ErrorRule(err["rule"], err.get("value"), float(err.get("factor", 1.0)), float(err.get("floor", 0.0)),
                            table=err.get("table"), add_in_quadrature=err.get("add_in_quadrature"),
                            cap=float(err["cap"]) if "cap" in err else None),
            options=dict(s.get("options", {})), index=n,
            reader=dict(s.get("reader", {})),
            qc=QcSettings.from_dict(s.get("qc"), f"{key}.qc", src),
            required=bool(s.get("required", True)),
        ))
    from obsprep.readers import available_kinds

    for s in sources:
        if s.kind != "auto" and s.kind not in available_kinds():
            raise ConfigError(f"sources[{s.index}].kind",
                              f"unknown reader kind '{s.kind}'; known: auto, {', '.join(available_kinds())}", src)
        from obsprep.readers.registry import validate_options

        validate_options(s.kind, s.options, f"sources[{s.index}].options", src)

    output = from_table(OutputSettings, raw.get("output"))
    placeholders.check_file_name(output.name, "output.name", src,
                                 dt.datetime.combine(run_date, dt.time()))
    superobs = dict(raw.get("superobs", {}))
    for merged, members in superobs.get("merge_sensors", {}).items():
        for m in members:
            if m not in seen:
                raise ConfigError(f"superobs.merge_sensors.{merged}", f"'{m}' is not a source sensor", src)
    check_merge_quantities(superobs.get("merge_quantities", {}), src)
    for table in ("representation_error", "error_floor"):
        for q in superobs.get(table, {}):
            if q not in QUANTITIES:
                raise ConfigError(f"superobs.{table}.{q}", f"unknown quantity; known: {', '.join(QUANTITIES)}", src)
    from obsprep.settings.errors import check_superobs_error_settings

    check_superobs_error_settings(superobs, src)
    from obsprep.settings.grid import check_grid_table

    check_grid_table(raw["grid"], src)  # sizes bounded here, before any array is made
    config = Config(raw=raw, path=path, base_dir=base_dir, date=run_date, window=window,
                  grid=dict(raw["grid"]), sources=sources,
                  superobs=from_table(SuperobsSettings, superobs), output=output)
    sensor_across_correlations(config)  # sources merged into one sensor must agree
    return config


def check_merge_quantities(table: dict, src) -> None:
    """``superobs.merge_quantities``: known quantities of the same canonical units, all surface
    or all profile quantities, no vector component, each member in one list only and no output
    quantity merged again."""
    seen: dict = {}
    for merged, members in table.items():
        key = f"superobs.merge_quantities.{merged}"
        for q in [merged, *members]:
            if q not in QUANTITIES:
                raise ConfigError(key, f"unknown quantity '{q}'; known: {', '.join(QUANTITIES)}", src)
        target = QUANTITIES[merged]
        for m in members:
            q = QUANTITIES[m]
            if q.vector or target.vector:
                raise ConfigError(key, f"'{m}': vector components are not merged", src)
            if (q.units, q.surface) != (target.units, target.surface):
                raise ConfigError(key, f"'{m}' ({q.units}, {'surface' if q.surface else 'profile'}) "
                                       f"cannot be averaged into '{merged}' ({target.units}, "
                                       f"{'surface' if target.surface else 'profile'})", src)
            if m in seen and seen[m] != merged:
                raise ConfigError(key, f"'{m}' is also merged into '{seen[m]}'", src)
            seen[m] = merged
    for merged in table:
        if merged in seen and seen[merged] != merged:
            raise ConfigError(f"superobs.merge_quantities.{merged}",
                              f"'{merged}' is itself merged into '{seen[merged]}'", src)


def output_sensors(cfg: Config) -> list[str]:
    """Sorted output sensor names (after merging); their index is the sensor key."""
    return sorted({cfg.output_sensor(s.sensor) for s in cfg.sources})


def sensor_across_correlations(cfg: Config) -> dict:
    """Error correlation across error groups per output sensor (``correlation_across_groups``);
    sources merged into one sensor must agree.  The within-group correlation is each source's
    own: it is applied per file, where every error group belongs to one source."""
    return agreed_per_output_sensor(cfg, "correlation_across_groups")


def agreed_per_output_sensor(cfg: Config, setting: str) -> dict:
    """The value of source ``setting`` per output sensor; sources merged into one sensor must
    agree (else a ConfigError naming ``sources[i].<setting>``)."""
    out: dict = {}
    for s in cfg.sources:
        name = cfg.output_sensor(s.sensor)
        value = getattr(s, setting)
        if out.setdefault(name, value) != value:
            raise ConfigError(f"sources[{s.index}].{setting}",
                              f"sources merged into '{name}' have different values "
                              f"({out[name]} and {value})")
    return out
