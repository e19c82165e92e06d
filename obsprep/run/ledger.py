"""The ledger: for every input file and sensor, raw observations read, kept and rejected per reason.

Invariant, checked on every run: ``read == kept + sum(rejected)`` for every entry.  Files that
could not be read are listed with their reason (and 0 observations); a source whose patterns
matched no file has one entry of status ``no_files`` naming the patterns.

The CSV has the same columns every night (:data:`ENTRY_COLUMNS`, then ``rejected_<reason>``
for every reason the build knows, zero when unused), so a database can ingest it; the JSON
adds the run's metadata (:attr:`Ledger.metadata`) under ``run``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field

import pandas as pd

from obsprep.exceptions import LedgerError
from obsprep.model.reasons import REASONS

#: statuses of an entry: read; could not be read; the same bytes as an earlier file of the
#: source (not read again); no file matched the source's patterns
UNREADABLE, DUPLICATE_FILE, NO_FILES = "unreadable", "duplicate_file", "no_files"
STATUSES = ("ok", UNREADABLE, DUPLICATE_FILE, NO_FILES)

#: the leading CSV columns, before one ``rejected_<reason>`` column per known reason
ENTRY_COLUMNS = ("file", "sensor", "kind", "status", "message", "warnings", "size_bytes", "read", "kept")


@dataclass
class LedgerEntry:
    """Accounting of one (file, sensor)."""

    file: str
    sensor: str
    kind: str = ""
    status: str = "ok"          # one of STATUSES
    message: str = ""           # why a file is unreadable; for no_files, the patterns
    size_bytes: int = 0
    read: int = 0
    kept: int = 0
    rejected: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)  # problems that did not stop the file

    def check(self) -> None:
        """Raise LedgerError unless read == kept + sum(rejected)."""
        total = self.kept + sum(self.rejected.values())
        if total != self.read:
            raise LedgerError(f"ledger does not balance for {self.file} ({self.sensor}): "
                              f"read {self.read} != kept {self.kept} + rejected {total - self.kept}")


def rejected_counts(table: pd.DataFrame) -> dict:
    """{reason: number of rows} of the rejected rows of ``table``."""
    counts = table["rejected"].value_counts(dropna=True)
    return {str(k): int(v) for k, v in counts.items() if v > 0}


def entry_from_table(table: pd.DataFrame, file: str, sensor: str, kind: str, size_bytes: int,
                     counted_earlier: dict | None = None) -> LedgerEntry:
    """Count a fully processed table: kept rows have no ``rejected`` code.

    ``counted_earlier``: {reason: rows} rejected and removed from the table before (they count
    as read and rejected).
    """
    rejected = rejected_counts(table)
    for reason, count in (counted_earlier or {}).items():
        rejected[reason] = rejected.get(reason, 0) + int(count)
    read = len(table) + sum((counted_earlier or {}).values())
    entry = LedgerEntry(file=file, sensor=sensor, kind=kind, size_bytes=size_bytes,
                        read=read, kept=int(table["rejected"].isna().sum()), rejected=rejected)
    entry.check()
    return entry


class Ledger:
    """All entries of one run."""

    def __init__(self):
        self.entries: list[LedgerEntry] = []
        #: the run's metadata for the JSON (analysis time, window, version, configuration hash,
        #: start and end, exit status, warnings; set by the build)
        self.metadata: dict = {}

    def add(self, entry: LedgerEntry) -> None:
        entry.check()
        self.entries.append(entry)

    def check(self) -> None:
        """Check the invariant for every entry (raises LedgerError)."""
        for e in self.entries:
            e.check()

    @property
    def unreadable(self) -> list[LedgerEntry]:
        """Entries of files that could not be read."""
        return [e for e in self.entries if e.status == UNREADABLE]

    @property
    def no_files(self) -> list[LedgerEntry]:
        """Entries of sources whose patterns matched no file."""
        return [e for e in self.entries if e.status == NO_FILES]

    def to_frame(self) -> pd.DataFrame:
        """One row per (file, sensor): :data:`ENTRY_COLUMNS`, then ``rejected_<reason>`` for
        every known reason (the same columns whatever occurred); warnings joined by ``"; "``."""
        reasons = list(REASONS)
        rows = []
        for e in self.entries:
            row = {"file": e.file, "sensor": e.sensor, "kind": e.kind, "status": e.status,
                   "message": e.message, "warnings": "; ".join(e.warnings), "size_bytes": e.size_bytes,
                   "read": e.read, "kept": e.kept}
            row.update({f"rejected_{r}": int(e.rejected.get(r, 0)) for r in reasons})
            unknown = set(e.rejected) - set(reasons)
            if unknown:
                raise LedgerError(f"ledger entry of {e.file} has unregistered reasons {sorted(unknown)}")
            rows.append(row)
        columns = list(ENTRY_COLUMNS) + [f"rejected_{r}" for r in reasons]
        return pd.DataFrame(rows, columns=columns).astype(
            {c: "int64" for c in columns if c in ("size_bytes", "read", "kept") or c.startswith("rejected_")})

    def by_sensor(self) -> pd.DataFrame:
        """Totals per sensor (files, unreadable files, read, kept, rejected per reason)."""
        frame = self.to_frame()
        if frame.empty:
            return frame
        frame["files"] = (frame["status"] != NO_FILES).astype(int)
        frame["unreadable"] = (frame["status"] == UNREADABLE).astype(int)
        numeric = ["files", "unreadable", "read", "kept"] + [c for c in frame if c.startswith("rejected_")]
        return frame.groupby("sensor", sort=False)[numeric].sum().reset_index()

    def to_json(self, run_id: str = "") -> str:
        """The ledger as JSON: ``run_id`` (the output set's, when given), ``run`` (metadata),
        ``reasons`` (code: description), ``entries``."""
        head = {"run_id": run_id} if run_id else {}
        return json.dumps({**head, "run": self.metadata, "reasons": REASONS,
                           "entries": [e.__dict__ for e in self.entries]}, indent=1, default=str)

    def write(self, csv_path, json_path, run_id: str = "") -> None:
        """Write the ledger as CSV (one row per file and sensor) and JSON (with ``run_id``
        first when given)."""
        self.to_frame().to_csv(csv_path, index=False)
        with open(json_path, "w") as fh:
            fh.write(self.to_json(run_id))


def reason_totals(entries) -> dict:
    """Sum of rejected counts per reason over entries."""
    tot: dict[str, int] = {}
    for e in entries:
        for k, v in e.rejected.items():
            tot[k] = tot.get(k, 0) + int(v)
    return dict(sorted(tot.items(), key=lambda kv: -kv[1]))


__all__ = ["Ledger", "LedgerEntry", "ENTRY_COLUMNS", "STATUSES", "UNREADABLE", "DUPLICATE_FILE", "NO_FILES",
           "entry_from_table", "reason_totals"]
