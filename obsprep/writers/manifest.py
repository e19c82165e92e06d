"""The manifest of an output set: ``<stem>_manifest.json``, written last, naming every file of
the set with its size and SHA-256 and the run id.

A set of outputs is published only when its manifest is present and every file it names has
the size and checksum it records; the netCDF file (global attribute ``run_id``), the ledger
JSON (key ``run_id``) and the Parquet copy (schema metadata ``obsprep_run_id``) carry the same
run id, so a set mixed from two runs is visible even by hand.  :func:`verify_output_set` is
the check (``obsprep audit`` runs it before reading anything).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass, field
from pathlib import Path

from obsprep.exceptions import OutputSetError

#: ``format`` value of a manifest (its version, should the layout change)
MANIFEST_FORMAT = "obsprep output set 1"
#: name of the manifest of the set whose netCDF file is ``<stem>.nc``
MANIFEST_SUFFIX = "_manifest.json"
#: key of the run id in the Parquet schema metadata
PARQUET_RUN_ID_KEY = b"obsprep_run_id"
#: bytes read at a time when hashing
_CHUNK = 1 << 22


def manifest_path(directory, stem: str) -> Path:
    """The manifest of the output set ``stem`` in ``directory``."""
    return Path(directory) / f"{stem}{MANIFEST_SUFFIX}"


def sha256_of(path) -> str:
    """Hex SHA-256 of a file's bytes (FIPS 180-4, through :mod:`hashlib`)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


@dataclass(frozen=True)
class ManifestFile:
    """One file of a set: ``name`` (beside the manifest), ``role`` (``netcdf``, ``parquet``,
    ``ledger_csv``, ``ledger_json``), size in bytes and hex SHA-256."""

    name: str
    role: str
    size_bytes: int
    sha256: str


@dataclass(frozen=True)
class Manifest:
    """What a manifest records."""

    run_id: str
    created: str  # UTC, ISO 8601
    software_version: str
    files: tuple[ManifestFile, ...] = field(default_factory=tuple)

    def to_json(self) -> str:
        """The manifest file's text."""
        data = {"format": MANIFEST_FORMAT, "run_id": self.run_id, "created": self.created,
                "software_version": self.software_version,
                "files": [asdict(f) for f in self.files]}
        return json.dumps(data, indent=1) + "\n"

    def by_role(self, role: str) -> ManifestFile | None:
        """The file of ``role``, or None when the set has none."""
        return next((f for f in self.files if f.role == role), None)


def describe_file(path, role: str) -> ManifestFile:
    """The manifest entry of a written file, under the name it will be published as
    (``path`` may be its temporary; pass the final name through :func:`dataclasses.replace`)."""
    path = Path(path)
    return ManifestFile(name=path.name, role=role, size_bytes=path.stat().st_size,
                        sha256=sha256_of(path))


def read_manifest(path) -> Manifest:
    """Read a manifest file; :class:`~obsprep.exceptions.OutputSetError` when it is not one."""
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        if data.get("format") != MANIFEST_FORMAT:
            raise ValueError(f"format {data.get('format')!r}, expected {MANIFEST_FORMAT!r}")
        files = tuple(ManifestFile(name=str(f["name"]), role=str(f["role"]),
                                   size_bytes=int(f["size_bytes"]), sha256=str(f["sha256"]))
                      for f in data["files"])
        return Manifest(run_id=str(data["run_id"]), created=str(data["created"]),
                        software_version=str(data.get("software_version", "")), files=files)
    except (OSError, ValueError, KeyError, TypeError, AttributeError) as exc:
        raise OutputSetError(f"{path}: not a readable output-set manifest ({exc})") from None


def netcdf_run_id(path) -> str | None:
    """The ``run_id`` global attribute of a netCDF file (None when absent)."""
    import netCDF4

    with netCDF4.Dataset(path) as ds:
        return str(ds.getncattr("run_id")) if "run_id" in ds.ncattrs() else None


def ledger_json_run_id(path) -> str | None:
    """The ``run_id`` of a ledger JSON file (None when absent)."""
    value = json.loads(Path(path).read_text(encoding="utf-8")).get("run_id")
    return None if value is None else str(value)


def parquet_run_id(path) -> str | None:
    """The run id in a Parquet file's schema metadata (None when absent)."""
    import pyarrow.parquet as pq

    metadata = pq.read_schema(path).metadata or {}
    value = metadata.get(PARQUET_RUN_ID_KEY)
    return None if value is None else value.decode("utf-8")


#: how to read the run id a file carries, per role (the CSV ledger carries none: its
#: checksum in the manifest ties it to the set)
RUN_ID_READERS = {"netcdf": netcdf_run_id, "ledger_json": ledger_json_run_id,
                  "parquet": parquet_run_id}


def verify_output_set(path) -> Manifest:
    """Check that the manifest at ``path`` describes a complete, unmixed set beside it.

    Every file named must exist with the recorded size and SHA-256, and the run id each file
    carries (netCDF, ledger JSON, Parquet) must be the manifest's.  Raises
    :class:`~obsprep.exceptions.OutputSetError` with one line naming the first file that is
    not; returns the manifest.
    """
    path = Path(path)
    manifest = read_manifest(path)
    if manifest.by_role("netcdf") is None:
        raise OutputSetError(f"{path}: the manifest names no netCDF file")
    for entry in manifest.files:
        file = path.parent / entry.name
        where = f"output set {path}: {entry.name}"
        if Path(entry.name).name != entry.name:
            raise OutputSetError(f"{where}: not a file name beside the manifest")
        if not file.is_file():
            raise OutputSetError(f"{where} is missing (incomplete set)")
        size = file.stat().st_size
        if size != entry.size_bytes:
            raise OutputSetError(f"{where} has {size} bytes, the manifest says {entry.size_bytes} "
                                 f"(mixed or incomplete set)")
        if sha256_of(file) != entry.sha256:
            raise OutputSetError(f"{where}: SHA-256 differs from the manifest's (mixed or "
                                 f"altered set)")
        reader = RUN_ID_READERS.get(entry.role)
        if reader is not None:
            try:
                run_id = reader(file)
            except Exception as exc:  # noqa: BLE001 - any failure to read it is the same verdict
                raise OutputSetError(f"{where}: cannot read its run id ({exc})") from None
            if run_id != manifest.run_id:
                raise OutputSetError(f"{where} belongs to run {run_id}, the manifest to run "
                                     f"{manifest.run_id} (mixed set)")
    return manifest
