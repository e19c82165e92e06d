"""Raw observation errors: the per-source error rule of the configuration.

Rule ``constant``: sigma = value (one number, or one per quantity).  Rule ``file``: sigma is the
uncertainty the reader took from the file (CF ``standard_error`` ancillary variable).  Then
sigma <- max(floor, factor * sigma).  Rows left without a finite positive error are rejected with
``missing_error``, so no observation enters a super-observation without an error.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .exceptions import ConfigError
from .table import reject


def assign_errors(table: pd.DataFrame, rule, source_key: str = "error") -> int:
    """Set ``error`` and ``error_origin`` of ``table`` in place following ``rule``.

    Parameters
    ----------
    table : observation table
    rule : obsprep.config.ErrorRule
    source_key : str
        Dotted config key of the rule, used in error messages.

    Returns
    -------
    int
        Number of rows newly rejected for a missing error.
    """
    n = len(table)
    if rule.rule == "constant":
        if isinstance(rule.value, dict):
            sigma = np.full(n, np.nan)
            quantity = table["quantity"].astype(str).to_numpy()
            for q, v in rule.value.items():
                sigma[quantity == q] = float(v)
            missing = set(np.unique(quantity[np.isnan(sigma)])) if n else set()
            if missing:
                raise ConfigError(f"{source_key}.value",
                                  f"no error value for quantities {sorted(missing)} present in the files")
        else:
            sigma = np.full(n, float(rule.value))
        origin = "constant"
    elif rule.rule == "file":
        sigma = table["error"].to_numpy(dtype=float, copy=True)
        origin = "file"
    else:  # the schema prevents this
        raise ConfigError(f"{source_key}.rule", f"unknown error rule '{rule.rule}'")
    sigma = sigma * rule.factor
    if rule.factor != 1.0:
        origin += "*factor"
    # A non-positive or missing error is invalid input; the floor must not disguise it.
    bad = ~(np.isfinite(sigma) & (sigma > 0))
    sigma = np.where(bad, np.nan, np.maximum(sigma, rule.floor))
    table["error"] = sigma
    table["error_origin"] = pd.Categorical(np.full(n, origin, dtype=object))
    return reject(table, bad, "missing_error")
