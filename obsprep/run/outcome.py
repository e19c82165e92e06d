"""The outcome of a build and the exit status that states it.

A nightly build runs unattended; the scheduler that starts it sees only its exit status, so the
status says what the analysis that follows needs to know:

====  =====================  ==============================================================
code  name                   meaning
====  =====================  ==============================================================
0     ok                     every required source delivered and every output was written
1     failed                 the build stopped (an error; nothing new was published)
2     usage                  bad command line or configuration (nothing was read)
3     files_lost             outputs written, but some input files could not be read
4     source_missing         outputs written, but a required source delivered no files, no
                             readable file or no kept observation, or the output is empty
5     cluster_unavailable    the Dask cluster had no worker (none joined, or all were lost)
====  =====================  ==============================================================

Statuses 3 and 4 are both "completed with a loss": 4 wins over 3.  An optional source
(``required = false``) that delivered nothing changes nothing; an unreadable file of any
source is a lost file.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from obsprep.run.ledger import NO_FILES, UNREADABLE

#: exit statuses, by name (the table above)
EXIT_STATUS = {
    "ok": 0,
    "failed": 1,
    "usage": 2,
    "files_lost": 3,
    "source_missing": 4,
    "cluster_unavailable": 5,
}


@dataclass
class Outcome:
    """What a finished build delivered: ``name`` (a key of :data:`EXIT_STATUS`) and the
    problems behind it, one line each."""

    name: str = "ok"
    problems: list = field(default_factory=list)

    @property
    def exit_status(self) -> int:
        """The process exit status of this outcome (:data:`EXIT_STATUS`)."""
        return EXIT_STATUS[self.name]

    def line(self) -> str:
        """One line stating the outcome, for the end of the summary and the log."""
        if self.name == "ok":
            return "outcome: ok (exit status 0): every required source delivered; outputs written"
        return (f"outcome: {self.name.upper().replace('_', ' ')} (exit status {self.exit_status}): "
                + "; ".join(self.problems))


def build_outcome(sources, entries, n_superobs: int) -> Outcome:
    """The outcome of a completed build from its ledger.

    Parameters
    ----------
    sources : the configured sources (each with ``sensor`` and ``required``)
    entries : the ledger entries of the run (one per file and sensor, ``no_files`` for a source
        whose patterns matched nothing)
    n_superobs : number of super-observations written
    """
    missing, lost = [], []
    for source in sources:
        own = [e for e in entries if e.sensor == source.sensor]
        files = [e for e in own if e.status != NO_FILES]
        readable = [e for e in files if e.status == "ok"]
        lost += [e for e in files if e.status == UNREADABLE]
        if not source.required:
            continue
        if not files:
            missing.append(f"required source '{source.sensor}' delivered no files")
        elif not readable:
            missing.append(f"required source '{source.sensor}' delivered no readable file "
                           f"({sum(e.status == UNREADABLE for e in files)} unreadable)")
        elif sum(e.kept for e in readable) == 0:
            missing.append(f"required source '{source.sensor}' delivered no kept observation "
                           f"({sum(e.read for e in readable)} read, all rejected)")
    if n_superobs == 0:
        missing.append("the output holds no super-observation")
    lost_lines = [f"{len(lost)} input file{'s' if len(lost) != 1 else ''} unreadable"] if lost else []
    if missing:
        return Outcome("source_missing", missing + lost_lines)
    if lost:
        return Outcome("files_lost", lost_lines)
    return Outcome("ok")


__all__ = ["EXIT_STATUS", "Outcome", "build_outcome"]
