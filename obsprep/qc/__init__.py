"""Quality control: each test rejects rows under its own reason code (obsprep.model.reasons).

One module per family: :mod:`.basic` (position, time, window, gross range), :mod:`.argo`
(Argo real-time profile tests), :mod:`.freezing` (TEOS-10 freezing point), :mod:`.grid_checks`
(too shallow, near the coast), :mod:`.duplicates` (copies across files); :mod:`.stage` runs
them in order with the per-source :class:`~.settings.QcSettings`.
"""

from obsprep.qc.basic import basic_checks, gross_range_check
from obsprep.qc.duplicates import find_duplicates, reject_duplicates
from obsprep.qc.grid_checks import grid_checks
from obsprep.qc.stage import table_checks
from obsprep.settings.qc import QC_KEYS, QcSettings

__all__ = ["basic_checks", "gross_range_check", "table_checks", "grid_checks",
           "find_duplicates", "reject_duplicates", "QcSettings", "QC_KEYS"]
