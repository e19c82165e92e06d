"""An independent check of a published output set, for the tests: it reads the manifest as
plain JSON and the files with hashlib, netCDF4 and pyarrow, not through obsprep.

Reference: SHA-256 per FIPS 180-4 (Python's hashlib); the run id of each file where the README
says it is (netCDF global attribute ``run_id``, ledger JSON key ``run_id``, Parquet schema
metadata ``obsprep_run_id``).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import netCDF4
import pyarrow.parquet as pq


def file_run_id(path: Path) -> str | None:
    """The run id a file of a set carries (None for the CSV ledger, which carries none, or
    when the file is absent)."""
    path = Path(path)
    if not path.exists():
        return None
    if path.suffix == ".nc":
        with netCDF4.Dataset(path) as ds:
            return str(ds.getncattr("run_id")) if "run_id" in ds.ncattrs() else None
    if path.suffix == ".json":
        return json.loads(path.read_text()).get("run_id")
    if path.suffix == ".parquet":
        value = (pq.read_schema(path).metadata or {}).get(b"obsprep_run_id")
        return None if value is None else value.decode()
    return None


def published_run_id(directory: Path, stem: str) -> str | None:
    """The run id of the set published in ``directory`` under ``stem``, or None when there is
    no manifest.  Fails (AssertionError) when the manifest names a file that is missing, has
    another size or checksum, or carries another run id: a mixed or incomplete set."""
    manifest = Path(directory) / f"{stem}_manifest.json"
    if not manifest.exists():
        return None
    data = json.loads(manifest.read_text())
    roles = {f["role"] for f in data["files"]}
    assert {"netcdf", "ledger_csv", "ledger_json"} <= roles, roles
    for entry in data["files"]:
        path = Path(directory) / entry["name"]
        assert path.is_file(), f"{entry['name']} named by the manifest is missing"
        content = path.read_bytes()
        assert len(content) == entry["size_bytes"], entry["name"]
        assert hashlib.sha256(content).hexdigest() == entry["sha256"], entry["name"]
        if entry["role"] != "ledger_csv":
            assert file_run_id(path) == data["run_id"], entry["name"]
    return data["run_id"]


def set_files(stem: str, parquet: bool = True) -> list[str]:
    """The names of the files of a set (the manifest last)."""
    names = [f"{stem}.nc"] + ([f"{stem}.parquet"] if parquet else [])
    return names + [f"{stem}_ledger.csv", f"{stem}_ledger.json", f"{stem}_manifest.json"]
