"""Settings of the super-observation and output stages, each key declared once.

Each field carries its meaning, default and constraints in ``metadata``; :func:`from_table`
builds the frozen settings from a validated TOML table, so a default lives here only.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from types import MappingProxyType

from obsprep.model.quantities import QUANTITIES
from obsprep.settings.errors import DEFAULT_SPREAD_MIN_COUNT
from obsprep.superobs.errors import COMBINATION_RULES
from obsprep.superobs.layers import LAYER_VALUES
from obsprep.superobs.representation import REPRESENTATION_MODELS

#: where a super-observation error setting of a quantity comes from
FROM_CONFIGURATION = "configuration"
FROM_CONFIGURED_FIELD = "configuration_field"
FROM_DEFAULT = "default"


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
                                                  "canonical units (default: the quantity's "
                                                  "default_representation_error)", minimum=0)
    error_floor: MappingProxyType = _key({}, "quantity -> floor of the super-observation error, "
                                         "canonical units, > 0 (default: the quantity's "
                                         "default_error_floor)", exclusiveMinimum=0)
    representation_error_file: str | None = _key(None, "netCDF file of representation-error fields")
    representation_error_variables: MappingProxyType = _key({}, "quantity -> variable in that file")
    spread_combination: str = _key("instrument", "how instrument error and spread combine",
                                   enum=list(COMBINATION_RULES))
    spread_min_count: int = _key(DEFAULT_SPREAD_MIN_COUNT, "count from which spread_when_n_ge uses "
                                 "the spread", minimum=2)
    spread_prior_dof: float = _key(4.0, "prior degrees of freedom of the instrument error in the "
                                   "small-sample shrinkage of spread_when_n_ge",
                                   exclusiveMinimum=0)
    representation_model: str = _key("constant", "constant: representation_error as given; "
                                     "sampling: it is the sub-cell standard deviation, reduced "
                                     "by the sampling of the cell",
                                     enum=list(REPRESENTATION_MODELS))
    footprint_km2: MappingProxyType = _key({}, "quantity -> area of one raw value's footprint, "
                                           "km2 (sampling model; default 0: point values)",
                                           minimum=0)
    layer_value: str = _key("fit", "sub-surface value: fit (quadratic in depth at the "
                            "super-observation's depth) or mean (layer mean, curvature offset "
                            "added to the representation error)", enum=list(LAYER_VALUES))
    interval_time: str = _key("end", "where an interval observation (drift) is placed in time, "
                              "for its slot and time_offset: start, middle or end of the interval",
                              enum=list(INTERVAL_PLACEMENTS))

    def representation_error_for(self, quantity: str) -> tuple[float | None, str]:
        """The constant representation error of output ``quantity`` (canonical units) and where
        it comes from: the configured constant, the configured field (value None: looked up per
        cell) or the quantity's default."""
        if quantity in self.representation_error_variables:
            return None, FROM_CONFIGURED_FIELD
        if quantity in self.representation_error:
            return float(self.representation_error[quantity]), FROM_CONFIGURATION
        return QUANTITIES[quantity].default_representation_error, FROM_DEFAULT

    def error_floor_for(self, quantity: str) -> tuple[float, str]:
        """The floor of the super-observation error of output ``quantity`` (canonical units,
        > 0) and where it comes from: the configuration or the quantity's default."""
        if quantity in self.error_floor:
            return float(self.error_floor[quantity]), FROM_CONFIGURATION
        return QUANTITIES[quantity].default_error_floor, FROM_DEFAULT

    def error_settings(self, quantity: str) -> dict:
        """Representation error and floor of output ``quantity`` with their units and origin:
        ``{"representation_error": {"value", "units", "from"}, "error_floor": {...}}``
        (value None for a representation-error field)."""
        units = QUANTITIES[quantity].units
        representation, representation_from = self.representation_error_for(quantity)
        floor, floor_from = self.error_floor_for(quantity)
        return {"representation_error": {"value": representation, "units": units,
                                         "from": representation_from},
                "error_floor": {"value": floor, "units": units, "from": floor_from}}


def error_settings_of(settings: SuperobsSettings, quantities) -> dict:
    """:meth:`SuperobsSettings.error_settings` of each output quantity of ``quantities``, in
    the order given: what the output file records of where its errors' settings came from."""
    return {q: settings.error_settings(q) for q in quantities}


def quantities_on_defaults(settings: SuperobsSettings, quantities) -> dict:
    """Per error setting (``"representation_error"``, ``"error_floor"``) the quantities of
    ``quantities`` whose value is the quantity's default, not the configuration's."""
    recorded = error_settings_of(settings, quantities)
    return {setting: [q for q, by_setting in recorded.items()
                      if by_setting[setting]["from"] == FROM_DEFAULT]
            for setting in ("representation_error", "error_floor")}


@dataclass(frozen=True)
class OutputSettings:
    """The ``[output]`` table: where and what the build writes."""

    directory: str = _key("out", "output directory, relative to the configuration file")
    name: str = _key("superobs_{date:%Y%m%d}.nc", "file name; {date} / {date:<strftime>} filled")
    parquet: bool = _key(False, "also write the super-observations as Parquet")
