"""The quality-control checks of the build, in their order, and the two calls that run them.

The first check that rejects a row names it in the ledger (the reader's own rejections come
before all of these).  Order:

1. ``duplicate``: the file's losing copies from the cross-file pre-pass
   (:mod:`obsprep.qc.duplicates`);
2. ``basic``: ``missing_value``, ``quantity_not_selected``, ``bad_position``, ``bad_time``,
   ``outside_window`` (:mod:`obsprep.qc.basic`);
3. ``argo_global_range`` on profile quantities (``qc.argo_tests``, :mod:`obsprep.qc.argo`);
4. ``gross_range``: ``out_of_range``, the physical range narrowed by the source's
   ``valid_range``;
5. ``argo_pressure_increasing``, ``argo_spike`` (``qc.argo_tests``);
6. ``below_freezing_point`` (``qc.freezing_point_*``, :mod:`obsprep.qc.freezing`);

then, after the errors are assigned and the model grid has placed the rows (outside the grid,
land, bathymetry: :meth:`obsprep.geo.grid.ModelGrid.classify`), the checks with
``needs_grid``:

7. ``too_shallow`` (``qc.min_depth``), ``near_coast`` (``qc.coast_distance_km``)
   (:mod:`obsprep.qc.grid_checks`).

The build calls :func:`table_checks` after reading and :func:`grid_checks` after the grid
location; both walk :data:`CHECKS`.  A check without ``needs_grid`` listed after one with it
is refused at import, since it could not run in its listed place.

How to add a quality-control check
----------------------------------

1. In its own module ``obsprep/qc/<name>.py`` (or the module of its family), write the test
   (vectorised, returning a boolean mask, formula and source in its docstring) and declare::

       from obsprep.qc.check import QcCheck, QcSetting, declare_reasons

       def _apply(table, context, settings):          # context: obsprep.qc.check.QcContext
           return {"my_reason": reject(table, my_test(table, settings.my_limit), "my_reason")}

       MY_CHECK = QcCheck(
           name="my_check",
           reasons={"my_reason": "what a rejected value failed"},
           apply=_apply,
           settings=(QcSetting("my_limit", "non_negative_number", 0.0,
                               "what the limit means, units; 0 off"),),
           needs_grid=False,                  # True: runs after the model-grid location
           enabled=lambda settings: settings.my_limit > 0)
       declare_reasons(MY_CHECK)              # its codes join obsprep.model.reasons

2. Add one line to :data:`CHECKS` below at its place in the order (and, for a new module,
   import it here).  :class:`obsprep.settings.qc.QcSettings`, ``QC_KEYS`` (hence the
   configuration schema and reference) and the reason list follow from the declaration.
3. Test it in ``tests/qc/test_qc.py`` (or ``tests/qc/test_<name>.py``) against an outside reference.

New reason codes are appended to the ledger's reason order when their module is first
imported (``obsprep.qc`` imports this module, hence every check module, in the order of its imports).
"""

from __future__ import annotations

import pandas as pd

# The import order is the order their reason codes are registered, hence the ledger's.
from obsprep.qc import argo  # isort: split

from obsprep.qc import freezing  # isort: split

from obsprep.qc import grid_checks as _grid  # isort: split

from obsprep.qc import duplicates  # isort: split

from obsprep.qc import basic  # isort: split

from obsprep.qc.check import QcCheck, QcContext, QcSetting

#: every check in the order it runs (table checks first, then those that need the grid)
CHECKS: tuple[QcCheck, ...] = (
    duplicates.DUPLICATE_CHECK,
    basic.BASIC_CHECK,
    argo.GLOBAL_RANGE_CHECK,
    basic.GROSS_RANGE_CHECK,
    argo.PRESSURE_INCREASING_CHECK,
    argo.SPIKE_CHECK,
    freezing.BELOW_FREEZING_CHECK,
    _grid.TOO_SHALLOW_CHECK,
    _grid.NEAR_COAST_CHECK,
)


def _checked_order(checks) -> tuple[QcCheck, ...]:
    """``checks`` unchanged; ValueError if a table check follows a grid check or a name or
    setting key is declared twice."""
    seen_grid, names, keys = None, set(), set()
    for check in checks:
        if check.needs_grid:
            seen_grid = check.name
        elif seen_grid is not None:
            raise ValueError(f"QC check '{check.name}' needs no grid but is listed after the "
                             f"grid check '{seen_grid}'; table checks come first")
        if check.name in names:
            raise ValueError(f"QC check '{check.name}' listed twice")
        names.add(check.name)
        for setting in check.settings:
            if setting.key in keys:
                raise ValueError(f"QC setting '{setting.key}' declared twice")
            keys.add(setting.key)
    return tuple(checks)


CHECKS = _checked_order(CHECKS)


def qc_settings_declared() -> tuple[QcSetting, ...]:
    """Every ``[sources.qc]`` key, in check order."""
    return tuple(setting for check in CHECKS for setting in check.settings)


def _run(table: pd.DataFrame, context: QcContext, settings, needs_grid: bool) -> dict:
    counts = {}
    for check in CHECKS:
        if check.needs_grid == needs_grid and check.enabled(settings):
            counts.update(check.apply(table, context, settings))
    return counts


def table_checks(table: pd.DataFrame, window, *, quantities=None, valid_range=None,
                 settings, duplicate_groups=()) -> dict:
    """Apply the checks without ``needs_grid`` to one file's observation table in place, in
    :data:`CHECKS` order; return {reason: newly rejected count}.  ``settings``: the source's
    :class:`~obsprep.settings.qc.QcSettings` (built from this module's declarations, so
    passed in rather than made here)."""
    context = QcContext(window=window, quantities=quantities, valid_range=valid_range,
                        duplicate_groups=duplicate_groups)
    return _run(table, context, settings, needs_grid=False)


def grid_checks(table: pd.DataFrame, grid, i, j, settings) -> dict:
    """Apply the checks with ``needs_grid`` to the kept rows, in place, in :data:`CHECKS`
    order (``i``, ``j``: the model cell of every row, -1 where none).  Returns {reason: newly
    rejected count}."""
    return _run(table, QcContext(grid=grid, i=i, j=j), settings, needs_grid=True)
