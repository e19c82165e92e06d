"""Checks of the error settings of a configuration that the JSON schema cannot express.

Raw error rules (``sources[].error``): tables with strictly increasing points and as many
errors as points, known quantities in per-quantity settings, ``cap >= floor``, a table for rule
``table``.  Super-observation error settings (``superobs``): a field file and its variables
together, no quantity given both a constant and a field representation error.  Every problem
raises :class:`~obsprep.exceptions.ConfigError` naming the dotted key.

The keys of a rule and of an error table, with their meaning, are declared once with the rule
itself (:data:`obsprep.errors.rules.ERROR_RULE_KEYS`, :data:`~obsprep.errors.rules.ERROR_TABLE_KEYS`)
and re-exported here for the settings loader and its schema.
"""

from __future__ import annotations

import numpy as np

from obsprep.errors.rules import ERROR_RULE_KEYS, ERROR_TABLE_KEYS, is_table
from obsprep.exceptions import ConfigError
from obsprep.model.quantities import QUANTITIES

DEFAULT_SPREAD_MIN_COUNT = 5

__all__ = ["ERROR_RULE_KEYS", "ERROR_TABLE_KEYS", "check_error_rule", "check_table",
           "check_superobs_error_settings", "DEFAULT_SPREAD_MIN_COUNT"]


def _check_quantity(q, key, src):
    if q not in QUANTITIES:
        raise ConfigError(key, f"unknown quantity '{q}'; known: {', '.join(QUANTITIES)}", src)


def check_table(table, key, src=None) -> None:
    """A piecewise-linear error table: ``of`` value/depth, points strictly increasing, one
    error (>= 0) per point."""
    points = np.asarray(table.get("points", []), dtype=float)
    errors = np.asarray(table.get("errors", []), dtype=float)
    if points.size != errors.size:
        raise ConfigError(f"{key}.errors", f"expected one error per point ({points.size}), "
                                           f"got {errors.size}", src)
    if points.size == 0:
        raise ConfigError(f"{key}.points", "expected at least one point", src)
    if np.any(np.diff(points) <= 0):
        raise ConfigError(f"{key}.points", f"expected strictly increasing points, got "
                                           f"{points.tolist()}", src)
    if np.any(~np.isfinite(errors)) or np.any(errors < 0):
        raise ConfigError(f"{key}.errors", f"expected finite errors >= 0, got {errors.tolist()}",
                          src)


def _check_terms(spec, key, src):
    terms = spec if isinstance(spec, list) else [spec]
    for n, term in enumerate(terms):
        where = f"{key}[{n}]" if isinstance(spec, list) else key
        if is_table(term):
            check_table(term, where, src)


def check_error_rule(err: dict, key: str, src=None) -> None:
    """Check one ``sources[].error`` table beyond the schema (see the module docstring)."""
    if err["rule"] == "table":
        if "table" not in err:
            raise ConfigError(f"{key}.table", "rule 'table' needs a table", src)
        table = err["table"]
        if is_table(table):
            check_table(table, f"{key}.table", src)
        else:
            for q, sub in table.items():
                _check_quantity(q, f"{key}.table.{q}", src)
                check_table(sub, f"{key}.table.{q}", src)
    extra = err.get("add_in_quadrature")
    if isinstance(extra, dict) and not is_table(extra):
        for q, sub in extra.items():
            _check_quantity(q, f"{key}.add_in_quadrature.{q}", src)
            _check_terms(sub, f"{key}.add_in_quadrature.{q}", src)
    elif extra is not None:
        _check_terms(extra, f"{key}.add_in_quadrature", src)
    if "cap" in err and float(err["cap"]) < float(err.get("floor", 0.0)):
        raise ConfigError(f"{key}.cap", f"must not be below the floor ({err.get('floor')}), "
                                        f"got {err['cap']}", src)


def check_superobs_error_settings(superobs: dict, src=None) -> None:
    """Check the super-observation error settings of ``superobs`` beyond the schema."""
    has_file = "representation_error_file" in superobs
    variables = superobs.get("representation_error_variables", {})
    if has_file != bool(variables):
        missing = "representation_error_variables" if has_file else "representation_error_file"
        raise ConfigError(f"superobs.{missing}",
                          "a representation-error field needs both a file and its variables", src)
    constant = superobs.get("representation_error", {})
    for q in variables:
        _check_quantity(q, f"superobs.representation_error_variables.{q}", src)
        if q in constant:
            raise ConfigError(f"superobs.representation_error_variables.{q}",
                              "this quantity also has a constant representation_error; "
                              "give one or the other", src)
