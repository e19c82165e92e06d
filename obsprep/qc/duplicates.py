"""Duplicate profiles across files: the same platform at the same time and place.

The only cross-file step of the build, kept light and separate so the per-file work stays
independent: before the files are processed, :func:`find_duplicates` reads the identity of each
profile (``group``) of every file of the sources whose ``qc.duplicates`` is on -- platform,
time, position, and how good the copy is -- decides which copies lose, and hands each file the
set of its losing groups; :func:`reject_duplicates` then rejects their rows as ``duplicate``
inside the per-file work, so the ledger counts them.

Two profiles are copies when they come from different files, have the same non-empty
platform, and their times and positions differ by no more than the tolerances (the smaller of
the two sources' ``duplicate_time_seconds`` and ``duplicate_distance_km``; great-circle
distance on the mean Earth sphere).  Copies are grouped transitively; in each group one is
kept: the highest ``rank`` (Argo DATA_MODE: delayed mode D over adjusted A over real time R),
then the most valid values, then the earliest file in task order, then the smallest group
label.  The decision depends only on the files' contents and order, never on timing.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.exceptions import InputFileError
from obsprep.geo.sphere import great_circle_distance
from obsprep.model.table import kept, reject
from obsprep.qc.check import QcCheck, QcSetting, declare_reasons

IDENTITY_COLUMNS = ("group", "platform", "time", "lon", "lat", "rank", "n_valid")


def identities_from_table(table: pd.DataFrame) -> pd.DataFrame:
    """One identity row per ``group`` of an observation table: platform, time, lon and lat of
    its first row, ``rank`` 0 and ``n_valid`` = rows not rejected by the reader."""
    frame = pd.DataFrame({
        "group": table["group"].astype(str).to_numpy(),
        "platform": table["platform"].astype(str).to_numpy(),
        "time": table["time"].to_numpy(),
        "lon": table["lon"].to_numpy(), "lat": table["lat"].to_numpy(),
        "valid": kept(table).astype(np.int64),
    })
    grouped = frame.groupby("group", sort=True)
    out = grouped[["platform", "time", "lon", "lat"]].first()
    out["n_valid"] = grouped["valid"].sum()
    out["rank"] = 0
    return out.reset_index()[list(IDENTITY_COLUMNS)]


def file_identities(path, source) -> pd.DataFrame:
    """Identities of the profiles of one file of ``source`` (a config Source).

    Readers with an ``identities`` method (Argo) read only the per-profile variables; others are
    read in full and reduced with :func:`identities_from_table`.
    """
    from obsprep.readers import guess_kind, read, registered_readers
    from obsprep.readers.cf import declared_options, open_dataset, reader_options

    options = dict(source.options)
    reader_profile = dict(source.reader or {})
    kind = source.kind
    if kind not in (None, "auto"):
        reader = registered_readers().get(kind)
    else:
        reader = None
    if reader is None or hasattr(reader, "identities"):
        ds = open_dataset(path, profile=reader_profile or None, load=False)
        try:
            if reader is None:
                reader = registered_readers()[guess_kind(path, ds)]
            if hasattr(reader, "identities"):
                # options were checked at load; with kind auto the reader takes its own
                parsed = reader_options(reader, {"sensor": source.sensor,
                                                 **declared_options(reader, options)})
                return reader.identities(ds, path, options=parsed)
        finally:
            ds.close()
    table = read(path, kind=reader.kind, reader_profile=reader_profile or None,
                 sensor=source.sensor, **options)
    return identities_from_table(table)


def decide_duplicates(records: pd.DataFrame) -> np.ndarray:
    """Boolean array over ``records``: True for the copies that lose.

    ``records`` columns: ``platform`` (str), ``time`` (datetime64), ``lon``, ``lat``
    (degrees), ``rank``, ``n_valid``, ``task`` (file order), ``group``, ``time_tolerance_s``,
    ``distance_tolerance_m``.  Vectorised: records are sorted by (platform, time) and compared
    with the next 1, 2, ... records until none of the same platform is within the largest
    time tolerance; copies are joined into connected components (scipy.sparse.csgraph).
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    n = len(records)
    lose = np.zeros(n, dtype=bool)
    if n < 2:
        return lose
    platform = records["platform"].astype(str).to_numpy()
    time = records["time"].to_numpy().astype("datetime64[ns]")
    lon, lat = records["lon"].to_numpy(float), records["lat"].to_numpy(float)
    usable = (platform != "") & ~np.isnat(time) & np.isfinite(lon) & np.isfinite(lat)
    idx = np.flatnonzero(usable)
    seconds = (time[idx] - np.datetime64(0, "ns")).astype(np.int64) / 1e9
    order = np.lexsort((seconds, pd.factorize(platform[idx], sort=True)[0]))
    idx, seconds = idx[order], seconds[order]
    task = records["task"].to_numpy()
    time_tol = records["time_tolerance_s"].to_numpy(float)
    dist_tol = records["distance_tolerance_m"].to_numpy(float)
    max_time_tol = float(time_tol[idx].max()) if idx.size else 0.0
    first, second = [], []
    for shift in range(1, idx.size):  # bounded by the records of one platform within the tolerance
        a, b = idx[:-shift], idx[shift:]
        same = platform[a] == platform[b]
        dt = seconds[shift:] - seconds[:-shift]
        near_in_time = same & (dt <= max_time_tol)
        if not near_in_time.any():
            break
        distance = great_circle_distance(lon[a], lat[a], lon[b], lat[b])
        pair = (near_in_time & (dt <= np.minimum(time_tol[a], time_tol[b]))
                & (distance <= np.minimum(dist_tol[a], dist_tol[b])) & (task[a] != task[b]))
        first.append(a[pair])
        second.append(b[pair])
    if not first or not sum(len(f) for f in first):
        return lose
    a, b = np.concatenate(first), np.concatenate(second)
    graph = coo_matrix((np.ones(a.size), (a, b)), shape=(n, n))
    _, component = connected_components(graph, directed=False)
    size = np.bincount(component, minlength=n)
    in_group = size[component] > 1
    # best first: highest rank, most valid values, earliest file, smallest group label
    group_code = pd.factorize(records["group"].astype(str).to_numpy(), sort=True)[0]
    best = np.lexsort((group_code, task, -records["n_valid"].to_numpy(),
                       -records["rank"].to_numpy(), component))
    first_of_component = np.ones(n, dtype=bool)
    first_of_component[1:] = component[best][1:] != component[best][:-1]
    winner = np.zeros(n, dtype=bool)
    winner[best[first_of_component]] = True
    lose = in_group & ~winner
    return lose


def find_duplicates(tasks) -> dict:
    """Decide the duplicate copies among ``tasks`` (objects with ``source``, ``path`` and
    ``file_index``, in task order) whose source has ``qc.duplicates`` on.

    Returns ``{(source index, path): frozenset of losing group labels}`` for the files that lose
    at least one profile.  A file that cannot be read here is left out (the per-file work lists
    it as unreadable).
    """
    frames = []
    for task in tasks:
        settings = task.source.qc
        if settings is None or not settings.duplicates:
            continue
        try:
            frame = file_identities(task.path, task.source)
        except (InputFileError, MemoryError):
            continue  # the file's own read says why, in its ledger entry
        if frame.empty:
            continue
        frame = frame.copy()
        frame["task"] = task.file_index
        frame["source_index"] = task.source.index
        frame["path"] = task.path
        frame["time_tolerance_s"] = settings.duplicate_time_seconds
        frame["distance_tolerance_m"] = settings.duplicate_distance_km * 1000.0
        frames.append(frame)
    if not frames:
        return {}
    records = pd.concat(frames, ignore_index=True)
    lose = decide_duplicates(records)
    out: dict = {}
    for (source_index, path), groups in records[lose].groupby(["source_index", "path"])["group"]:
        out[(int(source_index), str(path))] = frozenset(groups.astype(str))
    return out


def reject_duplicates(table: pd.DataFrame, groups) -> int:
    """Reject the rows of ``table`` whose ``group`` is in ``groups`` as ``duplicate``."""
    if not groups:
        return 0
    mask = np.isin(table["group"].astype(str).to_numpy(), list(groups))
    return reject(table, mask, "duplicate")


def _apply_duplicates(table: pd.DataFrame, context, settings) -> dict:
    return {"duplicate": reject_duplicates(table, context.duplicate_groups)}


# Always applied: a file's losing groups are only non-empty when the pre-pass ran for it.
DUPLICATE_CHECK = QcCheck(
    name="duplicate",
    reasons={"duplicate": "a better copy of the same profile (platform, time, position) is in "
                          "another file"},
    apply=_apply_duplicates,
    settings=(
        QcSetting("duplicates", "boolean", False,
                  "check profiles against the other files of the sources that enable it; the "
                  "worse copy is rejected as duplicate"),
        QcSetting("duplicate_time_seconds", "non_negative_number", 60.0,
                  "time tolerance of the duplicate check, s"),
        QcSetting("duplicate_distance_km", "non_negative_number", 1.0,
                  "position tolerance of the duplicate check, km"),
    ))
declare_reasons(DUPLICATE_CHECK)
