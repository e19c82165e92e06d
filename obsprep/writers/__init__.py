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


def write_outputs(cfg, superobs, ledger, grid, inputs, out_dir=None, version="", created=None) -> dict:
    """Write the super-observation netCDF, optional Parquet copy and the ledger (CSV + JSON)
    as one :class:`OutputSet`.

    Returns a dict of the paths written: ``netcdf``, ``parquet`` (when enabled), ``ledger_csv``,
    ``ledger_json`` and ``manifest``.
    """
    with OutputSet(cfg, out_dir) as output_set:
        return output_set.publish(superobs, ledger, grid, inputs, version=version, created=created)


__all__ = ["write_outputs", "atomic_path", "OutputSet"]
