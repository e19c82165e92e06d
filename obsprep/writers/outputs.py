"""The output set of one build: the super-observation netCDF, its optional Parquet copy and
the ledger (CSV + JSON), published together or not at all.

:class:`OutputSet` is entered before any input is read and held for the whole build:

1. the output directory is created and proven writable (a probe file written and removed),
   so an unusable directory fails the run at once, naming it;
2. the set's lock (``.<stem>.lock``, :mod:`obsprep.writers.lock`) is taken, so a second build
   of the same outputs fails at once, saying who holds it;
3. temporaries left by killed runs of this set (``.<name>.*.partial``) are removed and listed
   in :attr:`OutputSet.removed_stale`.

:meth:`OutputSet.publish` then follows one protocol, so that the files under their final names
form a published set only when the manifest says so:

1. the table is checked (:func:`obsprep.writers.finite.check_finite`): nothing non-finite is
   written, and the previous set stays as it was;
2. every file, the manifest included, is written in full to its temporary and fsynced; the
   netCDF file, the ledger JSON and the Parquet copy carry the run id;
3. the previous manifest is removed (from here the directory holds no published set), then
   each file is renamed into place, and a file of the set this run does not write (a Parquet
   copy now switched off) is removed;
4. the manifest ``<stem>_manifest.json`` (:mod:`obsprep.writers.manifest`: each file's name,
   size and SHA-256, and the run id) is renamed into place last.

A kill at any moment leaves either the previous set with its valid manifest, or files without
a manifest (not a published set: ``obsprep audit`` refuses them), or the new set with its
manifest; never a manifest naming files of another run.  The build log and the lock file are
not part of the set and are never removed as stale.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import os
import uuid
from pathlib import Path

from obsprep.exceptions import OutputError
from obsprep.model.product import TABLE_COLUMNS
from obsprep.writers.atomic import fsync_directory, fsync_file, remove_stale_temporaries, temporary_path
from obsprep.writers.finite import check_finite
from obsprep.writers.lock import OutputLock
from obsprep.writers.manifest import PARQUET_RUN_ID_KEY, Manifest, describe_file, manifest_path
from obsprep.writers.netcdf import superobs_dataset, write_netcdf


def new_run_id(now: dt.datetime | None = None) -> str:
    """A run id: the UTC start time and 12 random hex digits (``20261120T031500Z-1a2b3c4d5e6f``)."""
    now = now or dt.datetime.now(dt.UTC)
    return f"{now:%Y%m%dT%H%M%SZ}-{uuid.uuid4().hex[:12]}"


def _utc_text(moment: dt.datetime) -> str:
    return moment.astimezone(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


class OutputSet:
    """The outputs of one build, under ``cfg.output_path(out_dir)``.

    Use as a context manager: entering checks the output directory, takes the lock and removes
    stale temporaries (see the module docstring); leaving releases the lock.

    Attributes
    ----------
    run_id : str
        The id written into every file of the set and its manifest.
    removed_stale : list of Path
        Temporaries of killed runs removed on entering, for the caller to report.
    """

    def __init__(self, cfg, out_dir=None):
        self.cfg = cfg
        self.netcdf_path = Path(cfg.output_path(out_dir))
        self.directory = self.netcdf_path.parent
        self.stem = self.netcdf_path.with_suffix("").name
        self.manifest_path = manifest_path(self.directory, self.stem)
        self.lock_path = self.directory / f".{self.stem}.lock"
        self.run_id = new_run_id()
        self.removed_stale: list[Path] = []
        self._lock: OutputLock | None = None

    def _all_paths(self) -> dict:
        """{role: final path} of every file the set can hold, whatever this run writes."""
        return {"netcdf": self.netcdf_path,
                "parquet": self.netcdf_path.with_suffix(".parquet"),
                "ledger_csv": self.directory / f"{self.stem}_ledger.csv",
                "ledger_json": self.directory / f"{self.stem}_ledger.json"}

    def paths(self) -> dict:
        """{role: final path} of every file this run writes (without the manifest)."""
        paths = self._all_paths()
        if not self.cfg.output.parquet:
            del paths["parquet"]
        return paths

    def _check_directory(self) -> None:
        """Create the output directory and prove it writable (OutputError naming it if not)."""
        try:
            self.directory.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"output directory {self.directory}: cannot be created "
                              f"({exc.strerror or exc})") from None
        try:
            probe = temporary_path(self.netcdf_path)
            try:
                probe.write_bytes(b"obsprep: output directory write check\n")
            finally:
                with contextlib.suppress(FileNotFoundError):
                    probe.unlink()
        except OSError as exc:
            raise OutputError(f"output directory {self.directory}: not writable "
                              f"({exc.strerror or exc})") from None

    def __enter__(self) -> OutputSet:
        self._check_directory()
        lock = OutputLock(self.lock_path, self.run_id,
                          what=f"output set {self.stem} in {self.directory}")
        lock.acquire()
        try:
            names = [p.name for p in self._all_paths().values()] + [self.manifest_path.name]
            self.removed_stale = remove_stale_temporaries(self.directory, names)
        except OSError as exc:
            lock.release()
            raise OutputError(f"output directory {self.directory}: cannot remove stale "
                              f"temporaries ({exc.strerror or exc})") from None
        self._lock = lock
        return self

    def __exit__(self, *exc) -> None:
        if self._lock is not None:
            self._lock.release()
            self._lock = None

    def _write_temporaries(self, superobs, ledger, grid, inputs, version, created) -> dict:
        """Every file of the set written in full to its temporary and fsynced: {role: temporary}.
        Temporaries are recorded in the returned dict as soon as they exist, so the caller can
        remove them whatever fails."""
        staged: dict = {}
        paths = self.paths()
        ds, encoding = superobs_dataset(superobs, self.cfg, grid, inputs, version, created,
                                        run_id=self.run_id)
        writing = paths["netcdf"]
        try:
            staged["netcdf"] = temporary_path(paths["netcdf"])
            write_netcdf(ds, encoding, staged["netcdf"])
            if "parquet" in paths:
                writing = paths["parquet"]
                staged["parquet"] = temporary_path(paths["parquet"])
                _write_parquet(superobs, staged["parquet"], self.run_id)
            writing = paths["ledger_csv"]
            staged["ledger_csv"] = temporary_path(paths["ledger_csv"])
            staged["ledger_json"] = temporary_path(paths["ledger_json"])
            ledger.write(staged["ledger_csv"], staged["ledger_json"], run_id=self.run_id)
            for role, tmp in staged.items():
                writing = paths[role]
                fsync_file(tmp)
        except OSError as exc:  # a full disk, a lost mount: say which file, and that nothing changed
            _remove_all(staged.values())
            raise OutputError(f"output set {self.stem} in {self.directory}: writing {writing.name} "
                              f"failed ({exc.strerror or exc}); the previous set is unchanged") from exc
        except BaseException:
            _remove_all(staged.values())
            raise
        return staged

    def publish(self, superobs, ledger, grid, inputs, version="", created=None) -> dict:
        """Check the table, then write and publish every file of the set (see the module
        docstring for the protocol); return {role: path} of the files and the ``manifest``.

        Raises NonFiniteOutputError before anything is written when the table holds a value
        that must not reach the output.
        """
        if self._lock is None:
            raise RuntimeError("OutputSet.publish called outside its 'with' block")
        created = created or dt.datetime.now(dt.UTC)
        check_finite(superobs)
        paths = self.paths()
        staged = self._write_temporaries(superobs, ledger, grid, inputs, version, created)
        manifest_tmp = None
        try:
            manifest = Manifest(
                run_id=self.run_id, created=_utc_text(dt.datetime.now(dt.UTC)),
                software_version=version,
                files=tuple(dataclasses.replace(describe_file(tmp, role), name=paths[role].name)
                            for role, tmp in staged.items()))
            manifest_tmp = temporary_path(self.manifest_path)
            manifest_tmp.write_text(manifest.to_json(), encoding="utf-8")
            fsync_file(manifest_tmp)
            self._commit(staged, manifest_tmp)
        finally:
            _remove_all([*staged.values(), manifest_tmp])
        return {**paths, "manifest": self.manifest_path}

    def _commit(self, staged: dict, manifest_tmp: Path) -> None:
        """Steps 3 and 4 of the protocol: unpublish, rename into place, manifest last."""
        paths = self.paths()
        with contextlib.suppress(FileNotFoundError):
            os.unlink(self.manifest_path)
        fsync_directory(self.directory)  # no published set on disk before any file changes
        for role, path in self._all_paths().items():
            if role not in staged:
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(path)
        for role, tmp in staged.items():
            os.replace(tmp, paths[role])
        fsync_directory(self.directory)  # the files are in place before the manifest names them
        os.replace(manifest_tmp, self.manifest_path)
        fsync_directory(self.directory)


def _write_parquet(superobs, path, run_id: str) -> None:
    """The declared columns in the declared order (an empty table has fewer), with the run id
    in the schema metadata."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = superobs[[c for c in TABLE_COLUMNS if c in superobs]]
    table = pa.Table.from_pandas(frame, preserve_index=False)
    metadata = dict(table.schema.metadata or {})
    metadata[PARQUET_RUN_ID_KEY] = run_id.encode("utf-8")
    pq.write_table(table.replace_schema_metadata(metadata), path)


def _remove_all(paths) -> None:
    """Remove the temporaries left (those renamed into place are gone already)."""
    for path in paths:
        if path is not None:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(path)
