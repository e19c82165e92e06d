"""Writers: the super-observation file (CF netCDF), its optional Parquet copy, and the ledger.

Every file is written atomically (:mod:`obsprep.writers.atomic`).
"""

from __future__ import annotations

from obsprep.model.product import TABLE_COLUMNS
from obsprep.writers.atomic import atomic_path
from obsprep.writers.netcdf import superobs_dataset, write_netcdf


def write_outputs(cfg, superobs, ledger, grid, inputs, out_dir=None, version="", created=None) -> dict:
    """Write the super-observation netCDF, optional Parquet copy and the ledger (CSV + JSON).

    Returns a dict of the paths written: ``netcdf``, ``parquet`` (when enabled), ``ledger_csv``,
    ``ledger_json``.
    """
    path = cfg.output_path(out_dir)
    ds, encoding = superobs_dataset(superobs, cfg, grid, inputs, version, created)
    written = {}
    with atomic_path(path) as tmp:
        write_netcdf(ds, encoding, tmp)
    written["netcdf"] = path
    if cfg.output.parquet:
        pq = path.with_suffix(".parquet")
        with atomic_path(pq) as tmp:
            # the declared columns, in the declared order (an empty table has fewer)
            superobs[[c for c in TABLE_COLUMNS if c in superobs]].to_parquet(tmp, index=False)
        written["parquet"] = pq
    stem = path.with_suffix("")
    csv_path, json_path = stem.parent / f"{stem.name}_ledger.csv", stem.parent / f"{stem.name}_ledger.json"
    with atomic_path(csv_path) as tmp_csv, atomic_path(json_path) as tmp_json:
        ledger.write(tmp_csv, tmp_json)
    written["ledger_csv"], written["ledger_json"] = csv_path, json_path
    return written


__all__ = ["write_outputs", "atomic_path"]
