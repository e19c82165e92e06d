"""Quality control: each check rejects rows under its own reason code (obsprep.model.reasons).

One module per family: :mod:`.basic` (position, time, window, gross range), :mod:`.argo`
(Argo real-time profile tests), :mod:`.freezing` (TEOS-10 freezing point), :mod:`.grid_checks`
(too shallow, near the coast), :mod:`.duplicates` (copies across files).  Each declares its
checks (:class:`~.check.QcCheck`); :mod:`.registry` lists them in order and runs them
(:func:`table_checks`, :func:`grid_checks`) with the per-source
:class:`~obsprep.settings.qc.QcSettings`, which is built from the declarations.
"""

# the registry first: it imports the check modules in the order that fixes the reason order
from obsprep.qc.registry import CHECKS, grid_checks, table_checks  # isort: skip
from obsprep.qc.basic import basic_checks, gross_range_check
from obsprep.qc.duplicates import find_duplicates, reject_duplicates

__all__ = ["CHECKS", "basic_checks", "gross_range_check", "table_checks", "grid_checks",
           "find_duplicates", "reject_duplicates", "QcSettings", "QC_KEYS"]


def __getattr__(name):
    # settings.qc is built from the registry, so it is imported lazily here
    if name in ("QcSettings", "QC_KEYS"):
        from obsprep.settings import qc

        return getattr(qc, name)
    raise AttributeError(name)
