"""Where the per-file work runs, and how its partial results are combined.

The per-file work (:func:`obsprep.run.build.process_file`) is independent from file to file and
returns a mergeable accumulator.  It can run

- in this process (``jobs=1``),
- in local worker processes (``jobs=N``, :class:`concurrent.futures.ProcessPoolExecutor`), or
- on an existing Dask distributed cluster (``scheduler="tcp://host:8786"``, or a
  ``distributed.Client``), with the optional extra ``pip install obsprep[dask]``.  Dask is
  imported only here and only on that path.

Determinism.  Floating-point merging is not associative, so results are made independent of
where and when the work ran by always combining the per-file accumulators in one fixed tree:
the list of files in task order is cut into consecutive groups of :data:`MERGE_FAN_IN`, each
group is merged (in task order) into one accumulator, and the same is repeated on the merged
list until one is left.  :class:`FixedTreeReducer` is that tree, evaluated incrementally as
results arrive (holding at most ``MERGE_FAN_IN - 1`` partial results per level, so memory does
not grow with the number of files); locally it merges in this process, on a cluster it submits
each node as one task to the workers.  So the super-observations are bit-for-bit identical for
any ``jobs``, on a cluster, and on reruns.

A file with the same bytes as an earlier file of the same source is not read again; the ledger
lists it as ``duplicate_file`` (:func:`identical_files`).
"""

from __future__ import annotations

import itertools
import os
import threading
from concurrent.futures import ProcessPoolExecutor

from obsprep.run.ledger import DUPLICATE_FILE, UNREADABLE, LedgerEntry
from obsprep.run.tasks import ExecutionResult, FileResult, FileTask
from obsprep.superobs import Accumulator

#: number of partial accumulators merged by one node of the reduction tree
MERGE_FAN_IN = 8
#: ledger status of a file skipped because an earlier file of the source has the same bytes


# --------------------------------------------------------------------------------------------
# the fixed reduction tree

def merge_group(items):
    """Merge one node of the tree: the accumulators of ``items`` in their order.

    ``items`` may hold accumulators, per-file results (their ``accumulator`` is taken) and None
    (files that kept nothing), which are skipped.  A group with one accumulator returns it
    unchanged (no re-rounding); with none, None.
    """
    present = []
    for item in items:
        accumulator = getattr(item, "accumulator", item)
        if accumulator is not None:
            present.append(accumulator)
    if not present:
        return None
    if len(present) == 1:
        return present[0]
    return Accumulator.merge(present)


class FixedTreeReducer:
    """The one merge tree of the build, evaluated as the items arrive in task order.

    The items in task order are cut into consecutive groups of ``fan_in``, each group merged
    into one node, and the same repeated on the nodes until one is left.  ``add`` items one
    by one, then ``result()``.  A node is merged as soon as its ``fan_in`` children are known,
    so at most ``fan_in - 1`` partial results wait on each level.

    ``merge(items)`` merges one node (default :func:`merge_group`); on a Dask cluster it
    submits that merge as a task, so the cluster evaluates the same tree.
    """

    def __init__(self, fan_in: int | None = None, merge=None):
        fan_in = MERGE_FAN_IN if fan_in is None else fan_in
        if fan_in < 2:
            raise ValueError(f"fan_in must be at least 2, got {fan_in}")
        self.fan_in = fan_in
        self._merge = merge_group if merge is None else merge
        self._levels: list[list] = []
        self._count = 0

    def add(self, item) -> None:
        """Add the next item (in task order)."""
        self._count += 1
        self._push(0, getattr(item, "accumulator", item))

    def _push(self, depth, item):
        while len(self._levels) <= depth:
            self._levels.append([])
        level = self._levels[depth]
        level.append(item)
        if len(level) == self.fan_in:
            self._levels[depth] = []
            self._push(depth + 1, self._merge(level))

    def result(self):
        """The reduced accumulator (None when nothing was added or nothing was kept)."""
        if self._count == 0:
            return None
        # Close the last, incomplete group of each level from the bottom up, as a
        # level-by-level reduction of the whole list would.
        depth = 0
        while True:
            above = any(self._levels[d] for d in range(depth + 1, len(self._levels)))
            level = self._levels[depth] if depth < len(self._levels) else []
            if not above:
                return self._merge(level)
            if level:
                self._levels[depth] = []
                self._push(depth + 1, self._merge(level))
            depth += 1


# --------------------------------------------------------------------------------------------
# the same file given twice

def identical_files(tasks) -> dict:
    """Tasks whose file has the same content as an earlier file of the same source.

    A re-delivered granule under a new name would otherwise be counted twice.  Only files of
    equal size are compared: first by SHA-256 of their first and last MiB, then, where those
    agree, of all their bytes; so a night of distinct files costs one ``stat`` each, or little
    more for products of fixed size.  (The same path listed twice never gets this far: the
    file list of a source has each path once.)  Returns ``{file_index: path of the first
    copy}``.
    """
    import hashlib

    def digest(path, size, whole):
        h = hashlib.sha256()
        with open(path, "rb") as fh:
            if whole or size <= 2 << 20:
                for block in iter(lambda: fh.read(1 << 20), b""):
                    h.update(block)
            else:
                h.update(fh.read(1 << 20))
                fh.seek(size - (1 << 20))
                h.update(fh.read(1 << 20))
        return h.hexdigest()

    by_size: dict = {}
    for task in tasks:
        try:
            size = os.path.getsize(task.path)
        except OSError:
            continue  # missing: the per-file work lists it as unreadable
        if size:
            by_size.setdefault((task.source.index, size), []).append(task)
    duplicates = {}
    for (_, size), same_size in by_size.items():
        if len(same_size) < 2:
            continue
        candidates: dict = {}
        for task in same_size:
            try:
                candidates.setdefault(digest(task.path, size, whole=False), []).append(task)
            except OSError:
                continue
        for same_ends in candidates.values():
            if len(same_ends) < 2:
                continue
            first_by_digest = {}
            for task in same_ends:  # in task order: the first copy is read, later ones not
                try:
                    key = digest(task.path, size, whole=True)
                except OSError:
                    continue
                if key in first_by_digest:
                    duplicates[task.file_index] = first_by_digest[key]
                else:
                    first_by_digest[key] = task.path
    return duplicates


def _duplicate_result(task: FileTask, first: str):
    return FileResult(LedgerEntry(file=task.path, sensor=task.source.sensor, kind=task.source.kind,
                                  status=DUPLICATE_FILE, message=f"same content as {first}; "
                                  "not read again", size_bytes=os.path.getsize(task.path)))


# --------------------------------------------------------------------------------------------
# running the tasks

#: one file at a time per worker process: the HDF5 library under netCDF4 is not thread-safe,
#: and a Dask worker may run several tasks in threads of one process
_FILE_LOCK = threading.Lock()


def run_one_task(process, cfg, grid, sensor_names, strict, task: FileTask) -> FileResult:
    """The per-file work of one task, wherever it runs (here, a local worker, a Dask worker):
    ``process(cfg, grid, source, path, file_index, sensor_names, strict)``."""
    with _FILE_LOCK:
        return process(cfg, grid, task.source, task.path, task.file_index, sensor_names, strict)


_WORKER_CONTEXT: dict = {}


def _init_worker(*context):
    """Process-pool initializer: keep the per-file function, the config and the grid (with
    its cached search tables) in the worker, so each task ships only (source, path, index)."""
    _WORKER_CONTEXT["context"] = context


def _run_in_worker(task: FileTask) -> FileResult:
    return run_one_task(*_WORKER_CONTEXT["context"], task)


def _in_task_order(tasks, duplicates, ran):
    """Results of every task in task order: those that ran, and the skipped duplicates."""
    ran = iter(ran)
    for task in tasks:
        if task.file_index in duplicates:
            yield _duplicate_result(task, duplicates[task.file_index])
        else:
            yield next(ran)


def _collect(results, reducer, outcome, bar):
    for result in results:
        outcome.entries.append(result.entry)
        outcome.profile_names.update(result.profile_names)
        reducer.add(result)
        if bar is not None:
            bar.update()


def run_tasks(process, cfg, grid, tasks, sensor_names, *, strict=False, jobs=1, scheduler=None,
              progress=False) -> ExecutionResult:
    """Run the per-file work for every task and reduce the accumulators in the fixed tree.

    Parameters
    ----------
    process : callable
        The per-file work, ``process(cfg, grid, source, path, file_index, sensor_names,
        strict) -> FileResult`` (:func:`obsprep.run.build.process_file`); a module-level
        function, so that it can be sent to worker processes.
    cfg, grid, sensor_names, strict
        Passed to ``process``.
    tasks : list of FileTask
        In merge order (``file_index`` is the position).
    jobs : int
        Local worker processes (1: in this process).  Ignored when ``scheduler`` is given.
    scheduler : str or distributed.Client, optional
        Address of a running Dask scheduler (or a client) to run the tasks on.
    progress : bool
        Show a progress bar over the files.

    Returns
    -------
    ExecutionResult
    """
    bar = None
    if progress and tasks:
        from tqdm import tqdm

        class Bar(tqdm):
            monitor_interval = 0  # no monitor thread: worker processes are forked later

        # disable=None: no bar when stderr is not a terminal (a nightly log gets no \r litter)
        bar = Bar(total=len(tasks), unit="file", desc="obsprep build", leave=False, disable=None)
    duplicates = identical_files(tasks)
    to_run = [t for t in tasks if t.file_index not in duplicates]
    try:
        if scheduler is not None:
            return _run_on_dask(process, cfg, grid, tasks, duplicates, sensor_names, strict,
                                scheduler, bar)
        outcome = ExecutionResult()
        reducer = FixedTreeReducer()
        if jobs and jobs > 1 and len(to_run) > 1:
            from obsprep.readers.cf import preload

            preload()  # before the workers are forked, so each inherits it
            with ProcessPoolExecutor(max_workers=min(jobs, len(to_run)), initializer=_init_worker,
                                     initargs=(process, cfg, grid, sensor_names, strict)) as pool:
                _collect(_in_task_order(tasks, duplicates, pool.map(_run_in_worker, to_run)),
                         reducer, outcome, bar)
        else:
            ran = (run_one_task(process, cfg, grid, sensor_names, strict, t) for t in to_run)
            _collect(_in_task_order(tasks, duplicates, ran), reducer, outcome, bar)
        outcome.accumulator = reducer.result()
        return outcome
    finally:
        if bar is not None:
            bar.close()


# --------------------------------------------------------------------------------------------
# Dask distributed

#: longest time, in seconds, the build waits while the cluster has no worker (none joined yet,
#: or all were lost) before it stops with a ClusterError; tests lower it
NO_WORKER_TIMEOUT_SECONDS = 120.0
#: seconds between two looks at the cluster while the build waits for results
POLL_SECONDS = 1.0
#: a scheduler that has not answered the worker count for this long counts as lost (s)
SCHEDULER_SILENCE_SECONDS = 20.0
#: times a file's task is submitted again after the scheduler gave it up because the workers
#: running it were lost (the scheduler itself first moves it to another worker, up to
#: ``distributed.scheduler.allowed-failures`` times); then the file is listed as unreadable
FILE_RESUBMISSIONS = 1


def _summary(result):
    return result.entry, result.profile_names


def _identity(value):
    """A task returning its argument: the config and the grid enter the cluster as the result
    of a task, which the scheduler recomputes if the worker holding it is lost (scattered data
    would be gone with it)."""
    return value


def _lost_result(task: FileTask, attempts: int, address: str) -> FileResult:
    """The ledger entry of a file whose task lost a worker every time it was tried."""
    return FileResult(LedgerEntry(
        file=task.path, sensor=task.source.sensor, kind=task.source.kind, status=UNREADABLE,
        message=f"the Dask workers running its task were lost {attempts} time(s) (killed, e.g. "
                f"out of memory, on the cluster at {address}); not read",
        size_bytes=os.path.getsize(task.path) if os.path.exists(task.path) else 0))


class _ClusterWatch:
    """Hands out finished futures while watching that the cluster still has workers.

    Futures are :meth:`add`-ed as they are submitted; :meth:`next_done` returns those done
    since the last call (at least one; a ``distributed.as_completed`` set, so each call costs
    the finished futures only, not all pending ones).  While none is done it looks at the
    cluster every :data:`POLL_SECONDS` and raises :class:`ClusterError` once the cluster has had
    no worker for :data:`NO_WORKER_TIMEOUT_SECONDS`, when the scheduler does not answer or
    cancels the tasks.  So a build on an empty or dying cluster ends within that bound, with
    one line.
    """

    #: seconds between two looks for finished futures
    _NAP = 0.02

    def __init__(self, client, address: str):
        from distributed import as_completed

        self.client = client
        self.address = address
        self._finished = as_completed()
        self._watched = set()  # added and not yet handed out
        self._empty_since = None
        self._silent_since = None

    def add(self, future) -> None:
        """Watch ``future`` too."""
        self._watched.add(future)
        self._finished.add(future)

    def _workers(self, done: int, total: int) -> int:
        """Workers the scheduler has; -1 while a busy scheduler is slow to answer (a scheduler
        that has not answered for :data:`SCHEDULER_SILENCE_SECONDS` counts as lost)."""
        import time

        from obsprep.exceptions import ClusterError

        try:
            workers = len(self.client.nthreads(callback_timeout=max(5.0, 5 * POLL_SECONDS)))
        except (OSError, TimeoutError) as exc:
            now = time.monotonic()
            if isinstance(exc, TimeoutError):
                # a scheduler moving large results on a loaded machine can be slow to answer
                if self._silent_since is None:
                    self._silent_since = now
                if now - self._silent_since < SCHEDULER_SILENCE_SECONDS:
                    return -1
            raise ClusterError(f"lost the connection to the Dask scheduler at {self.address} "
                               f"({type(exc).__name__}: {exc}; {done} of {total} files done); "
                               f"the build stops") from None
        self._silent_since = None
        return workers

    def check(self, done: int, total: int) -> None:
        """Raise ClusterError when the cluster has had no worker for too long."""
        import time

        from obsprep.exceptions import ClusterError

        workers = self._workers(done, total)
        if workers < 0:
            return  # no answer yet: look again at the next poll
        if workers:
            self._empty_since = None
            return
        now = time.monotonic()
        if self._empty_since is None:
            self._empty_since = now
        elif now - self._empty_since >= NO_WORKER_TIMEOUT_SECONDS:
            raise ClusterError(f"the Dask cluster at {self.address} has had no worker for "
                               f"{NO_WORKER_TIMEOUT_SECONDS:g} s ({done} of {total} files done); "
                               "the build stops")

    def result_of(self, future, done: int, total: int):
        """The result of a finished ``future`` (its task's exception raised as itself), fetched
        while the cluster is watched: the data may go with their worker before they are
        fetched, and then the fetch would wait for a recomputation that may never come.  Returns
        :data:`_LOST` when the result was lost; raises ClusterError as :meth:`check` does."""
        while True:
            try:
                return future.result(timeout=POLL_SECONDS)
            except TimeoutError:
                if future.status in ("lost", "pending"):
                    return _LOST
                self.check(done, total)

    def next_done(self, done: int, total: int) -> list:
        """The watched futures finished since the last call (at least one)."""
        import time

        from obsprep.exceptions import ClusterError

        last_look = time.monotonic()
        while True:
            finished = [f for f in self._finished.next_batch(block=False) if f in self._watched]
            if any(f.status == "cancelled" for f in finished):  # e.g. the scheduler went away
                raise ClusterError(f"the Dask scheduler at {self.address} cancelled the build's "
                                   f"tasks ({done} of {total} files done); the build stops")
            if finished:
                self._watched.difference_update(finished)
                return finished
            time.sleep(self._NAP)
            if time.monotonic() - last_look >= POLL_SECONDS:
                self.check(done, total)
                # a result lost with the worker holding it is never "completed": hand it out
                # as done, for the caller to submit again (see _is_lost_worker)
                lost = [f for f in self._watched if f.status == "lost"]
                if lost:
                    self._watched.difference_update(lost)
                    return lost
                last_look = time.monotonic()


#: what :meth:`_ClusterWatch.result_of` returns for a result lost with its worker
_LOST = object()


def _is_lost_worker(future) -> bool:
    """The future of a done task was lost with a worker: it failed because the workers running
    it were lost (distributed.KilledWorker), or its result went with the worker holding it
    (handed out as done, but neither finished nor erred: status "lost" or back to pending).
    Asking such a future for its result would wait for a recomputation that may never come."""
    from distributed import KilledWorker

    if future.status == "error":
        return isinstance(future.exception(), KilledWorker)
    return future.status != "finished"


def _run_on_dask(process, cfg, grid, tasks, duplicates, sensor_names, strict, scheduler,
                 bar) -> ExecutionResult:
    """Submit the per-file tasks and the fixed merge tree to a Dask cluster.

    Input files must be readable under the same paths on the workers (a shared filesystem).
    A worker lost while it runs a file is made good by running the file again (the scheduler
    moves the task to another worker; a task it gives up on is submitted again
    :data:`FILE_RESUBMISSIONS` times, then the file is listed as unreadable).  The merge tree
    is fed in task order as the files finish, so it is the tree of ``jobs=1`` whatever order the
    workers finish in.  No worker joined, or none left, for :data:`NO_WORKER_TIMEOUT_SECONDS`:
    :class:`~obsprep.exceptions.ClusterError`.
    """
    from obsprep.exceptions import ClusterError, ConfigError

    try:
        from distributed import Client
    except ImportError as exc:
        raise ConfigError("--scheduler", "running on a Dask cluster needs the optional "
                          "dependency: pip install 'obsprep[dask]'") from exc
    if isinstance(scheduler, Client):
        client, own = scheduler, False
    else:
        import dask

        try:
            # the connect timeout of the Dask configuration (distributed.comm.timeouts.connect)
            timeout = dask.config.get("distributed.comm.timeouts.connect")
            client, own = Client(str(scheduler), timeout=timeout), True
        except (OSError, TimeoutError, ValueError) as exc:
            raise ConfigError("--scheduler", f"cannot connect to the Dask scheduler at "
                              f"{scheduler!r}: {exc}") from exc
    address = getattr(client.scheduler, "address", None) or str(scheduler)
    try:
        outcome = ExecutionResult()
        if not tasks:
            return outcome
        import uuid

        try:
            client.wait_for_workers(1, timeout=NO_WORKER_TIMEOUT_SECONDS)
        except TimeoutError:
            raise ClusterError(f"no worker joined the Dask cluster at {address} within "
                               f"{NO_WORKER_TIMEOUT_SECONDS:g} s; the build stops") from None
        run = uuid.uuid4().hex  # task keys unique to this run on a shared cluster
        # the config and grid go to the cluster once, not once per task
        cfg_f, grid_f, names_f = (client.submit(_identity, value, key=f"obsprep-{name}-{run}")
                                  for name, value in (("config", cfg), ("grid", grid),
                                                      ("sensors", sensor_names)))
        watch = _ClusterWatch(client, address)

        def submit(task, attempt):
            key = f"obsprep-file-{task.file_index}-{attempt}-{run}"
            file = client.submit(run_one_task, process, cfg_f, grid_f, names_f, strict, task,
                                 key=key, pure=False)
            summary = client.submit(_summary, file, key=f"{key}-summary", pure=False)
            watch.add(summary)
            return file, summary

        nodes = itertools.count()
        reducer = FixedTreeReducer(merge=lambda items: client.submit(
            merge_group, items, pure=False, key=f"obsprep-merge-{next(nodes)}-{run}"))
        file_of, entries, attempts = {}, {}, {}
        waiting = {}  # summary future -> task
        for task in tasks:
            if task.file_index in duplicates:
                entries[task.file_index] = _summary(_duplicate_result(task,
                                                                      duplicates[task.file_index]))
                file_of[task.file_index] = None
                if bar is not None:
                    bar.update()
            else:
                attempts[task.file_index] = 1
                file, summary = submit(task, 1)
                file_of[task.file_index] = file
                waiting[summary] = task
        next_index = 0
        while True:
            # the tree takes the files in task order, each once it has finished
            while next_index < len(tasks) and next_index in entries:
                reducer.add(file_of.pop(next_index))
                next_index += 1
            if next_index == len(tasks):
                break
            for summary in watch.next_done(len(entries), len(tasks)):
                task = waiting.pop(summary)
                index = task.file_index
                was_finished = summary.status == "finished"
                result = watch.result_of(summary, len(entries), len(tasks)) if was_finished \
                    else _LOST
                if result is not _LOST:
                    entries[index] = result
                elif was_finished or _is_lost_worker(file_of[index]) or _is_lost_worker(summary):
                    if attempts[index] <= FILE_RESUBMISSIONS:
                        attempts[index] += 1
                        file_of[index], again = submit(task, attempts[index])
                        waiting[again] = task
                        continue
                    entries[index] = _summary(_lost_result(task, attempts[index], address))
                    file_of[index] = None
                else:
                    summary.result()  # the task's own exception, raised here as itself
                if bar is not None:
                    bar.update()
        root = reducer.result()
        if root is not None:
            watch.add(root)
            watch.next_done(len(tasks), len(tasks))
            lost = _is_lost_worker(root)
            if not lost:
                root = watch.result_of(root, len(tasks), len(tasks))
                lost = root is _LOST
            if lost:
                raise ClusterError(f"merging the partial results lost the Dask workers of the "
                                   f"cluster at {address}; the build stops")
        for index in range(len(tasks)):
            entry, names = entries[index]
            outcome.entries.append(entry)
            outcome.profile_names.update(names)
        outcome.accumulator = root
        return outcome
    finally:
        if own:
            client.close()


__all__ = ["MERGE_FAN_IN", "DUPLICATE_FILE", "FileTask", "FileResult", "ExecutionResult", "merge_group",
           "FixedTreeReducer", "identical_files", "run_one_task", "run_tasks",
           "NO_WORKER_TIMEOUT_SECONDS"]
