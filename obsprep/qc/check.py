"""What a quality-control check declares: its name, reason codes, settings, grid need, function.

A check module builds one :class:`QcCheck` per check and registers its reasons with
:func:`declare_reasons` at import; :mod:`obsprep.qc.registry` lists the checks in their order.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import pandas as pd

from obsprep.model.reasons import register_reason


@dataclass(frozen=True)
class QcSetting:
    """One key of ``[sources.qc]``.

    ``kind`` is the constraint the loader checks: ``"boolean"``, ``"non_negative_number"``
    (int or float >= 0, stored as float) or ``"choices"`` (a list of strings out of
    ``choices``, stored as a tuple).  ``meaning`` is the text of the configuration reference,
    units included; the default is appended by :data:`obsprep.settings.qc.QC_KEYS`.
    """

    key: str
    kind: str
    default: object
    meaning: str
    choices: tuple = ()

    def __post_init__(self):
        if self.kind not in ("boolean", "non_negative_number", "choices"):
            raise ValueError(f"QC setting '{self.key}': unknown kind '{self.kind}'")


@dataclass(frozen=True)
class QcContext:
    """What the build knows about one file when it runs the checks.

    ``window``: the assimilation window; ``quantities``: the source's selected quantities (or
    None); ``valid_range``: the source's {quantity: [min, max]} (canonical units);
    ``duplicate_groups``: the file's losing profile copies; ``grid`` and ``i``, ``j`` (the
    cell of every row, -1 where none) only for the checks with ``needs_grid``.
    """

    window: object = None
    quantities: object = None
    valid_range: object = None
    duplicate_groups: object = ()
    grid: object = None
    i: object = None
    j: object = None


@dataclass(frozen=True)
class QcCheck:
    """One quality-control check.

    ``apply(table, context, settings)`` rejects rows in place and returns {reason: newly
    rejected count}; it runs only where ``enabled(settings)`` is true.  ``reasons``: the
    codes it rejects under, {code: description}; ``settings``: the ``[sources.qc]`` keys it
    reads (a key shared by several checks is declared by the first of them only);
    ``needs_grid``: it runs after the model-grid location (and after the errors are assigned).
    """

    name: str
    reasons: dict
    apply: Callable[[pd.DataFrame, QcContext, object], dict]
    settings: tuple = ()
    needs_grid: bool = False
    enabled: Callable[[object], bool] = field(default=lambda settings: True)


def declare_reasons(*checks: QcCheck) -> None:
    """Register the reason codes of ``checks`` in :data:`obsprep.model.reasons.REASONS`, in the
    order given (the ledger lists reasons in registration order)."""
    for check in checks:
        for code, description in check.reasons.items():
            register_reason(code, description)
