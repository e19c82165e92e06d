"""Settings of the super-observation and output stages, each key declared once.

Each field carries its meaning, default and constraints in ``metadata``; :func:`from_table`
builds the frozen settings from a validated TOML table, so a default lives here only.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from types import MappingProxyType

from obsprep.settings.errors import DEFAULT_SPREAD_MIN_COUNT
from obsprep.superobs.errors import COMBINATION_RULES


def _key(default, meaning: str, **constraints):
    """A settings field: ``default``, its one-line ``meaning`` and JSON-schema ``constraints``."""
    meta = {"meaning": meaning, "constraints": constraints}
    if isinstance(default, dict):
        return field(default_factory=lambda: MappingProxyType({}), metadata=meta)
    return field(default=default, metadata=meta)


def from_table(cls, table: dict | None):
    """An instance of settings class ``cls`` from a validated TOML table (missing keys: defaults)."""
    table = dict(table or {})
    values = {}
    for f in fields(cls):
        if f.name in table:
            value = table[f.name]
            values[f.name] = MappingProxyType(dict(value)) if isinstance(value, dict) else value
    return cls(**values)


#: where an interval observation is placed in time (``superobs.interval_time``)
INTERVAL_PLACEMENTS = ("start", "middle", "end")


@dataclass(frozen=True)
class SuperobsSettings:
    """The ``[superobs]`` table: how raw observations become super-observations."""

    mode: str = _key("mean", "mean (equal weights), weighted (inverse variance) or thin (keep one)",
                     enum=["mean", "weighted", "thin"])
    profiles: str = _key("per_profile", "profiles averaged per profile or across profiles of a cell",
                         enum=["per_profile", "across_profiles"])
    merge_sensors: MappingProxyType = _key({}, "output sensor name -> source sensors written under it")
    merge_quantities: MappingProxyType = _key({}, "output quantity -> quantities averaged into it "
                                              "(e.g. SST types; same units, all surface or all "
                                              "profile quantities)")
    representation_error: MappingProxyType = _key({}, "quantity -> representation error constant, "
                                                  "canonical units", minimum=0)
    error_floor: MappingProxyType = _key({}, "quantity -> floor of the super-observation error, "
                                         "canonical units", minimum=0)
    representation_error_file: str | None = _key(None, "netCDF file of representation-error fields")
    representation_error_variables: MappingProxyType = _key({}, "quantity -> variable in that file")
    spread_combination: str = _key("instrument", "how instrument error and spread combine",
                                   enum=list(COMBINATION_RULES))
    spread_min_count: int = _key(DEFAULT_SPREAD_MIN_COUNT, "count from which spread_when_n_ge uses "
                                 "the spread", minimum=2)
    interval_time: str = _key("end", "where an interval observation (drift) is placed in time, "
                              "for its slot and time_offset: start, middle or end of the interval",
                              enum=list(INTERVAL_PLACEMENTS))


@dataclass(frozen=True)
class OutputSettings:
    """The ``[output]`` table: where and what the build writes."""

    directory: str = _key("out", "output directory, relative to the configuration file")
    name: str = _key("superobs_{date:%Y%m%d}.nc", "file name; {date} / {date:<strftime>} filled")
    parquet: bool = _key(False, "also write the super-observations as Parquet")
