"""The last check before anything is written: nothing non-finite reaches the output.

Every float column of the super-observation table (values, errors and their parts, positions,
time offsets) must be finite and every time column a time, on the rows where the declared
variable applies (:mod:`obsprep.model.product`); a statistic declared ``undefined_as_nan``
(a spread of one value) may be NaN but never infinite; a variable declared ``positive`` (the
total error) must be greater than zero.  A table that fails is not written: the run fails.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.exceptions import NonFiniteOutputError
from obsprep.model.product import OUTPUT_VARIABLES
from obsprep.model.quantities import QUANTITIES

#: problems named in the one-line message (the rest are counted)
MESSAGE_PROBLEMS = 6


def _applies(declared, quantity_names: pd.Series) -> np.ndarray:
    """Rows (by their quantity name) for which the declared variable is defined."""
    applies = {name: name in QUANTITIES and declared.applies_to(QUANTITIES[name])
               for name in quantity_names.unique()}
    return quantity_names.map(applies).to_numpy(dtype=bool)


def _bad_rows(declared, column: pd.Series) -> tuple[np.ndarray, str]:
    """Rows of a column that must not be written, and what is wrong with them."""
    if declared.dtype.startswith("datetime64"):
        return pd.isna(column).to_numpy(), "no valid time (NaT)"
    values = column.to_numpy(dtype=np.float64)
    if declared.undefined_as_nan:
        bad, what = np.isinf(values), "infinite"
    else:
        bad, what = ~np.isfinite(values), "not finite (NaN or infinite)"
    if declared.positive:
        with np.errstate(invalid="ignore"):
            bad = bad | ~(values > 0)
        what += " or not positive"
    return bad, what


def check_finite(superobs: pd.DataFrame) -> None:
    """Refuse a super-observation table with a value, error, position or time that is not
    finite, or a total error that is not positive.

    Raises :class:`~obsprep.exceptions.NonFiniteOutputError`, one line naming each column and
    quantity concerned with its number of rows.
    """
    if len(superobs) == 0:
        return
    quantity_names = superobs["quantity"].astype(str)
    problems = []
    for declared in OUTPUT_VARIABLES:
        if declared.column not in superobs or not (declared.dtype == "float64"
                                                    or declared.dtype.startswith("datetime64")):
            continue
        bad, what = _bad_rows(declared, superobs[declared.column])
        if declared.only_for is not None and bad.any():
            bad = bad & _applies(declared, quantity_names)
        if not bad.any():
            continue
        names, counts = np.unique(quantity_names.to_numpy()[bad], return_counts=True)
        problems += [f"{declared.column} of {count} {name} row{'s' if count > 1 else ''} {what}"
                     for name, count in zip(names, counts)]
    if problems:
        shown = "; ".join(problems[:MESSAGE_PROBLEMS])
        more = f"; and {len(problems) - MESSAGE_PROBLEMS} more" if len(problems) > MESSAGE_PROBLEMS else ""
        raise NonFiniteOutputError(f"super-observations not written: {shown}{more} "
                                   f"(of {len(superobs)} super-observations)")
