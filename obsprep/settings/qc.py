"""Per-source quality-control settings: the ``[sources.qc]`` table of the configuration.

Every key is optional; :data:`QC_KEYS` lists them with their meaning and default, and
``schemas/config.schema.json`` mirrors them.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

from obsprep.exceptions import ConfigError

#: key -> meaning (the README configuration reference repeats these)
QC_KEYS: dict[str, str] = {
    "argo_tests": "Argo real-time tests (global range, pressure increasing, spike) on profile "
                  "quantities (default true)",
    "freezing_point_quantities": "temperature quantities checked against the TEOS-10 freezing "
                                 "point (default [\"sea_water_temperature\"])",
    "freezing_point_tolerance": "degC below the freezing point still accepted (default 0.1)",
    "freezing_point_salinity": "practical salinity used where no salinity was measured at the "
                               "same level (default 35)",
    "min_depth": "reject where the model bathymetry is shallower than this, m (default 0: off)",
    "coast_distance_km": "reject within this distance of the centre of a model land cell, km "
                         "(default 0: off)",
    "duplicates": "check profiles against the other files of the sources that enable it; the "
                  "worse copy is rejected as duplicate (default false)",
    "duplicate_time_seconds": "time tolerance of the duplicate check, s (default 60)",
    "duplicate_distance_km": "position tolerance of the duplicate check, km (default 1)",
}

TEMPERATURE_QUANTITIES = ("sea_water_temperature", "sea_surface_temperature")


@dataclass(frozen=True)
class QcSettings:
    """Validated ``[sources.qc]`` settings (see :data:`QC_KEYS`; units in the names)."""

    argo_tests: bool = True
    freezing_point_quantities: tuple = ("sea_water_temperature",)
    freezing_point_tolerance: float = 0.1
    freezing_point_salinity: float = 35.0
    min_depth: float = 0.0
    coast_distance_km: float = 0.0
    duplicates: bool = False
    duplicate_time_seconds: float = 60.0
    duplicate_distance_km: float = 1.0

    @classmethod
    def from_dict(cls, raw: dict | None, key: str = "qc", source=None) -> QcSettings:
        """Build from a config table; raise :class:`ConfigError` naming ``key.<name>``."""
        raw = dict(raw or {})
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(raw) - known)
        if unknown:
            raise ConfigError(f"{key}.{unknown[0]}", f"unknown key; known keys: "
                                                     f"{', '.join(sorted(known))}", source)
        values = {}
        for name, value in raw.items():
            default = getattr(cls, name)
            if isinstance(default, bool):
                if not isinstance(value, bool):
                    raise ConfigError(f"{key}.{name}", f"expected true or false, got {value!r}",
                                      source)
            elif isinstance(default, float):
                if isinstance(value, bool) or not isinstance(value, (int, float)) or value < 0:
                    raise ConfigError(f"{key}.{name}", f"expected a number >= 0, got {value!r}",
                                      source)
                value = float(value)
            elif isinstance(default, tuple):
                if isinstance(value, str) or not all(v in TEMPERATURE_QUANTITIES for v in value):
                    raise ConfigError(f"{key}.{name}", f"expected a list of "
                                                       f"{' and/or '.join(TEMPERATURE_QUANTITIES)}"
                                                       f", got {value!r}", source)
                value = tuple(value)
            values[name] = value
        return cls(**values)
