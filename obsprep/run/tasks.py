"""The unit of the build's per-file work: one file of one source (a task) and what it yields.

Both the build (:mod:`obsprep.run.build`, which does the work) and the execution
(:mod:`obsprep.run.execution`, which decides where it runs) use these types, so neither needs
the other's internals.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from obsprep.run.ledger import LedgerEntry
from obsprep.superobs import Accumulator


@dataclass(frozen=True)
class FileTask:
    """One file of one source, with its position in the task list (the merge order)."""

    source: object
    path: str
    file_index: int


@dataclass
class FileResult:
    """What processing one file yields: its ledger entry, its partial sums (None when it kept
    nothing) and the names of its profiles by profile key."""

    entry: LedgerEntry
    accumulator: Accumulator | None = None
    profile_names: dict = field(default_factory=dict)


@dataclass
class ExecutionResult:
    """What running every task gives: ledger entries and profile names in task order, and the
    accumulator of all files (None when no file kept anything)."""

    entries: list = field(default_factory=list)
    profile_names: dict = field(default_factory=dict)
    accumulator: Accumulator | None = None
