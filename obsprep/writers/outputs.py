"""The output set of one build: the super-observation netCDF, its optional Parquet copy and
the ledger (CSV + JSON), written together.

:class:`OutputSet` is opened before any input is read (so an unusable output directory is
found at once) and held for the whole build; :meth:`OutputSet.publish` writes every file.
"""

from __future__ import annotations

from pathlib import Path

from obsprep.model.product import TABLE_COLUMNS
from obsprep.writers.atomic import atomic_path
from obsprep.writers.netcdf import superobs_dataset, write_netcdf


class OutputSet:
    """The outputs of one build, under ``cfg.output_path(out_dir)``.

    Use as a context manager: entering prepares the output directory, leaving releases it.
    """

    def __init__(self, cfg, out_dir=None):
        self.cfg = cfg
        self.netcdf_path = Path(cfg.output_path(out_dir))
        self.directory = self.netcdf_path.parent
        self.stem = self.netcdf_path.with_suffix("").name

    def paths(self) -> dict:
        """{key: final path} of every file the set holds."""
        paths = {"netcdf": self.netcdf_path}
        if self.cfg.output.parquet:
            paths["parquet"] = self.netcdf_path.with_suffix(".parquet")
        paths["ledger_csv"] = self.directory / f"{self.stem}_ledger.csv"
        paths["ledger_json"] = self.directory / f"{self.stem}_ledger.json"
        return paths

    def __enter__(self) -> OutputSet:
        self.directory.mkdir(parents=True, exist_ok=True)
        return self

    def __exit__(self, *exc) -> None:
        return None

    def publish(self, superobs, ledger, grid, inputs, version="", created=None) -> dict:
        """Write every file of the set; return {key: path written}."""
        paths = self.paths()
        ds, encoding = superobs_dataset(superobs, self.cfg, grid, inputs, version, created)
        with atomic_path(paths["netcdf"]) as tmp:
            write_netcdf(ds, encoding, tmp)
        if "parquet" in paths:
            with atomic_path(paths["parquet"]) as tmp:
                # the declared columns, in the declared order (an empty table has fewer)
                superobs[[c for c in TABLE_COLUMNS if c in superobs]].to_parquet(tmp, index=False)
        with atomic_path(paths["ledger_csv"]) as tmp_csv, atomic_path(paths["ledger_json"]) as tmp_json:
            ledger.write(tmp_csv, tmp_json)
        return paths
