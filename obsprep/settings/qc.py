"""Per-source quality-control settings: the ``[sources.qc]`` table of the configuration.

Every key is optional and declared once, by the check that reads it
(:class:`obsprep.qc.check.QcSetting` in the check's module); :class:`QcSettings` and
:data:`QC_KEYS` are built from those declarations in :data:`obsprep.qc.registry.CHECKS` order.
"""

from __future__ import annotations

import json
from dataclasses import make_dataclass

from obsprep.exceptions import ConfigError
from obsprep.qc.registry import qc_settings_declared

_DECLARED = qc_settings_declared()


def _default_text(setting) -> str:
    """The default as the configuration writes it (TOML)."""
    if setting.kind == "boolean":
        return "true" if setting.default else "false"
    if setting.kind == "choices":
        return json.dumps(list(setting.default))
    return f"{setting.default:g}"


#: key -> meaning with its default (the README configuration reference and schema read these)
QC_KEYS: dict[str, str] = {s.key: f"{s.meaning} (default {_default_text(s)})" for s in _DECLARED}


def _check_value(setting, value, name: str, source):
    """``value`` converted to the stored type; ConfigError naming ``name`` if it is not of the
    setting's kind."""
    if setting.kind == "boolean":
        if not isinstance(value, bool):
            raise ConfigError(name, f"expected true or false, got {value!r}", source)
        return value
    if setting.kind == "non_negative_number":
        if isinstance(value, bool) or not isinstance(value, (int, float)) or value < 0:
            raise ConfigError(name, f"expected a number >= 0, got {value!r}", source)
        return float(value)
    if isinstance(value, str) or not all(v in setting.choices for v in value):
        raise ConfigError(name, f"expected a list of {' and/or '.join(setting.choices)}, got "
                                f"{value!r}", source)
    return tuple(value)


def _from_dict(cls, raw: dict | None, key: str = "qc", source=None):
    """Build from a config table; raise :class:`ConfigError` naming ``key.<name>``."""
    raw = dict(raw or {})
    declared = {s.key: s for s in _DECLARED}
    unknown = sorted(set(raw) - set(declared))
    if unknown:
        raise ConfigError(f"{key}.{unknown[0]}", f"unknown key; known keys: "
                                                 f"{', '.join(sorted(declared))}", source)
    return cls(**{name: _check_value(declared[name], value, f"{key}.{name}", source)
                  for name, value in raw.items()})


QcSettings = make_dataclass(
    "QcSettings", [(s.key, type(s.default), s.default) for s in _DECLARED], frozen=True,
    namespace={"from_dict": classmethod(_from_dict), "__module__": __name__,
               "__doc__": "Validated ``[sources.qc]`` settings (see :data:`QC_KEYS`; units in "
                          "the meanings)."})


def qc_json_schema() -> dict:
    """The JSON schema of ``[sources.qc]`` from the declarations: type, default, constraints
    and description of every key (for the configuration schema)."""
    properties = {}
    for s in _DECLARED:
        if s.kind == "boolean":
            prop = {"type": "boolean", "default": s.default}
        elif s.kind == "non_negative_number":
            prop = {"type": "number", "minimum": 0, "default": s.default}
        else:
            prop = {"type": "array", "items": {"enum": list(s.choices)},
                    "default": list(s.default)}
        prop["description"] = s.meaning[:1].upper() + s.meaning[1:] + "."
        properties[s.key] = prop
    return {"type": "object", "description": "Quality-control settings of this source.",
            "additionalProperties": False, "properties": properties}
