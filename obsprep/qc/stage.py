"""The quality-control stage of one file: every table check in its order, per source settings.

Order (the first test that rejects a row names it in the ledger; the reader's own rejections
come before all of these):

1. ``duplicate``: the file's losing copies from the cross-file pre-pass
   (:mod:`obsprep.qc.duplicates`);
2. ``missing_value``, ``quantity_not_selected``, ``bad_position``, ``bad_time``,
   ``outside_window`` (:func:`obsprep.qc.basic.basic_checks`);
3. ``argo_global_range`` on profile quantities (``qc.argo_tests``);
4. ``out_of_range``: the physical range, narrowed by the source's ``valid_range``;
5. ``argo_pressure_not_increasing``, ``argo_spike`` (``qc.argo_tests``);
6. ``below_freezing_point`` (``qc.freezing_point_*``).

The model-grid checks (outside the grid, land, bathymetry, then ``too_shallow`` and
``near_coast``) run after the errors are assigned, in the pipeline's grid step.
"""

from __future__ import annotations

import pandas as pd

from obsprep.model.table import reject
from obsprep.qc.argo import argo_real_time_tests
from obsprep.qc.basic import basic_checks, gross_range_check
from obsprep.qc.duplicates import reject_duplicates
from obsprep.qc.freezing import below_freezing_test
from obsprep.settings.qc import QcSettings


def table_checks(table: pd.DataFrame, window, *, quantities=None, valid_range=None,
                 settings: QcSettings | None = None, duplicate_groups=()) -> dict:
    """Apply the table checks to one file's observation table in place; return
    {reason: newly rejected count}."""
    settings = settings or QcSettings()
    counts = {"duplicate": reject_duplicates(table, duplicate_groups)}
    counts.update(basic_checks(table, window, quantities=quantities, valid_range=valid_range,
                               range_check=False))
    if settings.argo_tests:
        counts.update(argo_real_time_tests(table, range_only=True))
    counts["out_of_range"] = gross_range_check(table, valid_range)
    if settings.argo_tests:
        counts.update(argo_real_time_tests(table, skip_range=True))
    if settings.freezing_point_quantities:
        counts["below_freezing_point"] = reject(
            table, below_freezing_test(table, settings.freezing_point_quantities,
                                       settings.freezing_point_tolerance,
                                       settings.freezing_point_salinity),
            "below_freezing_point")
    return counts
