"""Raw observation errors: the per-source error rule of the configuration.

The error (1-sigma, canonical units of the quantity) of every raw observation is built in four
steps, all vectorised over the observation table:

1. the base error, by ``rule``:

   - ``constant``: ``value`` (one number, or one per quantity);
   - ``file``: the uncertainty the reader took from the file (CF ``standard_error`` ancillary
     variable);
   - ``table``: a piecewise-linear function of the observed value (``of = "value"``, e.g.
     ice-concentration error by concentration) or of the depth (``of = "depth"``, e.g. profile
     errors through the thermocline), one table or one per quantity;

2. times ``factor``, 3. extra terms ``add_in_quadrature`` (numbers or tables as above), 4.
   kept within ``[floor, cap]``: the formula of :func:`raw_error_from_parts`.

The keys of a rule and their meaning are :data:`ERROR_RULE_KEYS`.

A piecewise-linear table with points x_0 < ... < x_m and errors e_0 .. e_m gives
e(x) = e_k + (e_{k+1} - e_k) (x - x_k) / (x_{k+1} - x_k) on [x_k, x_{k+1}], held constant
beyond the end points (``numpy.interp``).

Rows left without a base error (NaN: fill in the file, no table value) are rejected with
``missing_error``; rows whose base error (times the factor) is infinite, not positive or larger
than the quantity's whole physical range (the width of
:attr:`~obsprep.model.quantities.Quantity.valid_range`: no real uncertainty exceeds every
possible difference of two values), or whose raw error ends up so, with ``implausible_error``.
The floor, the cap and the extra terms must not disguise a missing or invalid provider error,
and an error of 1e300 must not become an infinite variance downstream.

The origin of each error, i.e. which rule set it, goes to the ``error_origin`` column: the base
label (``constant``, ``file``, ``table_of_value``, ``table_of_depth``) followed by ``*factor``
when the factor is not 1 and ``+quadrature`` when extra terms apply to the quantity.  Labels
depend only on the rule and the quantity (:func:`origin_label`), so the super-observation writer
can state them per super-observation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.exceptions import ConfigError
from obsprep.model.quantities import QUANTITIES, SUSPICIOUS_OUT_OF_RANGE_SHARE
from obsprep.model.reasons import register_reason
from obsprep.model.table import category_masks, reject, warn_of_large_shares

register_reason("implausible_error", "raw error infinite, not positive, or larger than the "
                "quantity's whole physical range", stage="errors")

BASE_RULES = ("constant", "file", "table")
TABLE_OF = ("value", "depth")

#: key of ``[sources.error]`` -> meaning (the settings check, schema and README read these)
ERROR_RULE_KEYS: dict[str, str] = {
    "rule": "`constant`, `file` (the file's `standard_error` variable) or `table`",
    "value": "constant error, a number or a table per quantity",
    "table": "rule `table`: `{ of = \"value\" | \"depth\", points = [...], errors = [...] }`, "
             "piecewise linear, constant beyond the ends; or one per quantity",
    "factor": "multiplies the error (default 1)",
    "add_in_quadrature": "extra terms after the factor: a number, a table (as above), a list of "
                         "them, or those per quantity",
    "floor": "minimum raw error (default 0)",
    "cap": "maximum raw error (applied last; default none)",
}
#: key of one piecewise-linear error table -> meaning
ERROR_TABLE_KEYS: dict[str, str] = {
    "of": "`value` (the observed value) or `depth` (m, positive down); default `value`",
    "points": "strictly increasing arguments of the table (canonical units, or m for depth)",
    "errors": "error (>= 0, canonical units) at each point",
}


def raw_error_from_parts(base, factor: float, quadrature_terms, floor: float,
                         cap: float | None) -> np.ndarray:
    """The raw error (1-sigma, canonical units) from its parts.

    .. math:: \\sigma = \\min\\left(cap, \\max\\left(floor,
              \\sqrt{(factor \\cdot base)^2 + \\sum_k term_k^2}\\right)\\right)

    Extra terms are independent of the base error, so variances add (common practice).
    ``base``: the base error per row; ``quadrature_terms``: ``(mask, term)`` pairs, each
    adding ``term**2`` to the variance of the rows of ``mask``, in the order given; None when
    the rule has no extra terms (then no square root is taken).
    ``cap`` None: no cap.  NaN stays NaN.
    """
    sigma = np.asarray(base, dtype=np.float64) * factor
    if quadrature_terms is not None:
        variance = sigma * sigma
        for mask, term in quadrature_terms:
            variance[mask] += term * term
        sigma = np.sqrt(variance)
    sigma = np.maximum(sigma, floor)
    if cap is not None:
        sigma = np.minimum(sigma, cap)
    return sigma


def is_table(spec) -> bool:
    """True when ``spec`` is one piecewise-linear table (a dict with ``of``/``points``/``errors``)."""
    return isinstance(spec, dict) and "points" in spec and "errors" in spec


def piecewise_linear_error(table: dict, values: np.ndarray, depth: np.ndarray) -> np.ndarray:
    """Evaluate one error table at the observations.

    Parameters
    ----------
    table : dict
        ``of`` ("value" or "depth"), ``points`` (strictly increasing; canonical units of the
        quantity, or m positive down for depth) and ``errors`` (>= 0, canonical units).
    values, depth : numpy.ndarray
        Observed values and depths (m) of the rows.

    Returns
    -------
    numpy.ndarray
        Error per row: linear interpolation between the points, constant beyond the end points
        (``numpy.interp``); NaN where the argument is NaN.
    """
    argument = values if table.get("of", "value") == "value" else depth
    points = np.asarray(table["points"], dtype=np.float64)
    errors = np.asarray(table["errors"], dtype=np.float64)
    return np.interp(np.asarray(argument, dtype=np.float64), points, errors)


def _for_quantity(spec, quantity: str):
    """The part of a setting that applies to ``quantity``: a per-quantity dict is looked up,
    anything else applies to every quantity.  None when the quantity has no entry."""
    if isinstance(spec, dict) and not is_table(spec):
        return spec.get(quantity)
    return spec


def _terms(spec) -> list:
    if spec is None:
        return []
    return list(spec) if isinstance(spec, list) else [spec]


def origin_label(rule, quantity: str) -> str:
    """Which rule sets the raw errors of ``quantity`` under ``rule`` (an ErrorRule).

    E.g. ``constant``, ``file*factor``, ``table_of_depth+quadrature``.
    """
    if rule.rule == "table":
        table = _for_quantity(rule.table, quantity)
        label = f"table_of_{table.get('of', 'value')}" if table is not None else "table"
    else:
        label = rule.rule
    if rule.factor != 1.0:
        label += "*factor"
    if _terms(_for_quantity(rule.add_in_quadrature, quantity)):
        label += "+quadrature"
    return label


def _require_per_quantity(spec, key, quantity_names, what):
    if isinstance(spec, dict) and not is_table(spec):
        missing = sorted(set(quantity_names) - set(spec))
        if missing:
            raise ConfigError(key, f"no {what} for quantities {missing} present in the files")


def largest_plausible_error(quantity: str) -> float:
    """The largest raw error (canonical units) ``quantity`` can have: the width of its
    physical range (infinite for a quantity without one or not declared)."""
    known = QUANTITIES.get(quantity)
    if known is None:
        return float("inf")
    low, high = known.valid_range
    return float(high - low)


def _warn_of_units(table: pd.DataFrame, masks: dict, missing, implausible, rule_name: str) -> None:
    """Warn when more than :data:`~obsprep.model.quantities.SUSPICIOUS_OUT_OF_RANGE_SHARE` of a
    quantity's raw errors (rows still kept, with an error) are implausible: the errors' units
    may be wrong, and the errors that pass may be just as wrong."""
    where = "the file's uncertainty" if rule_name == "file" else "the error rule"
    with_error = {q: mask & ~missing for q, mask in masks.items()}
    warn_of_large_shares(
        table, with_error, implausible, SUSPICIOUS_OUT_OF_RANGE_SHARE,
        lambda q: (f"more than {SUSPICIOUS_OUT_OF_RANGE_SHARE:.0%} of the raw errors of {q} are "
                   f"infinite, not positive or larger than its whole physical range: the units "
                   f"or scale of {where} may be wrong"))


def assign_errors(table: pd.DataFrame, rule, source_key: str = "error") -> int:
    """Set ``error`` and ``error_origin`` of ``table`` in place following ``rule``.

    Parameters
    ----------
    table : observation table
        Uses ``quantity``, ``value`` (canonical units), ``depth`` (m) and, for rule ``file``,
        the ``error`` the reader decoded.
    rule : obsprep.settings.config.ErrorRule
        ``rule``, ``value``, ``table``, ``factor``, ``add_in_quadrature``, ``floor``, ``cap``
        (see the module docstring for the formula).
    source_key : str
        Dotted config key of the rule, used in error messages.

    Returns
    -------
    int
        Number of rows newly rejected for a missing or an implausible error.
    """
    n = len(table)
    # masks from the categorical codes: a string per row would cost more than the rule itself
    masks = category_masks(table, "quantity") if n else {}  # a handful of quantities
    present = sorted(masks)
    values = table["value"].to_numpy(dtype=float)
    depth = table["depth"].to_numpy(dtype=float)

    if rule.rule == "constant":
        _require_per_quantity(rule.value, f"{source_key}.value", present, "error value")
        if isinstance(rule.value, dict):
            sigma = np.full(n, np.nan)
            for q, mask in masks.items():
                sigma[mask] = float(rule.value[q])
        else:
            sigma = np.full(n, float(rule.value))
    elif rule.rule == "file":
        sigma = table["error"].to_numpy(dtype=float, copy=True)
    elif rule.rule == "table":
        _require_per_quantity(rule.table, f"{source_key}.table", present, "error table")
        sigma = np.full(n, np.nan)
        for q, mask in masks.items():
            spec = _for_quantity(rule.table, q)
            sigma[mask] = piecewise_linear_error(spec, values[mask], depth[mask])
    else:  # the schema prevents this
        raise ConfigError(f"{source_key}.rule", f"unknown error rule '{rule.rule}'")

    # A missing, non-positive or impossible base error is invalid input; floor, cap and extra
    # terms must not disguise it.
    largest = np.full(n, np.inf)
    for q, mask in masks.items():
        largest[mask] = largest_plausible_error(q)
    with np.errstate(over="ignore", invalid="ignore"):
        scaled = sigma * rule.factor
        missing = np.isnan(scaled)
        implausible = ~missing & ~(np.isfinite(scaled) & (scaled > 0) & (scaled <= largest))
    extra = rule.add_in_quadrature
    terms = []
    if extra is not None:
        for q, mask in masks.items():
            for term in _terms(_for_quantity(extra, q)):  # a few terms per quantity
                terms.append((mask, piecewise_linear_error(term, values[mask], depth[mask])
                              if is_table(term) else np.full(int(mask.sum()), float(term))))
    with np.errstate(over="ignore", invalid="ignore"):
        sigma = raw_error_from_parts(sigma, rule.factor, terms if extra is not None else None,
                                     rule.floor, rule.cap)
        implausible |= ~missing & ~(np.isfinite(sigma) & (sigma <= largest))
    sigma = np.where(missing | implausible, np.nan, sigma)
    _warn_of_units(table, masks, missing, implausible, rule.rule)
    table["error"] = sigma
    labels = {q: origin_label(rule, q) for q in present}
    if len(set(labels.values())) <= 1:
        label = next(iter(labels.values())) if labels else origin_label(rule, "")
        table["error_origin"] = pd.Categorical.from_codes(np.zeros(n, dtype=np.int8),
                                                          categories=[label])
    else:
        categories = sorted(set(labels.values()))
        codes = np.zeros(n, dtype=np.int8)
        for q, mask in masks.items():
            codes[mask] = categories.index(labels[q])
        table["error_origin"] = pd.Categorical.from_codes(codes, categories=categories)
    return reject(table, missing, "missing_error") + reject(table, implausible, "implausible_error")
