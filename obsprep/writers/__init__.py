"""Writers: the super-observation file (CF netCDF), its optional Parquet copy, and the ledger.

Every file is written atomically (:mod:`obsprep.writers.atomic`); the files of one build form
one output set (:mod:`obsprep.writers.outputs`), locked while it is written
(:mod:`obsprep.writers.lock`), checked finite before it is written
(:mod:`obsprep.writers.finite`) and published by a manifest written last
(:mod:`obsprep.writers.manifest`).
"""

from __future__ import annotations

from obsprep.writers.atomic import atomic_path
from obsprep.writers.outputs import OutputSet

__all__ = ["atomic_path", "OutputSet"]
