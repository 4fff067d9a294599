"""Evaluate a study's missing points on dask and store each finished batch at once.

The client (this process) owns the store; workers only run :func:`evaluate_batch`, a pure
function of the study config and a list of ``(point_id, params)`` that returns one
:class:`~studies.points.Record` per point it evaluated (a worker starts no point of a batch
after ``max_batch_s``; the client queues the rest again). The client keeps two batches per
worker thread in flight, sizes them from the measured time per point
(:class:`studies.batching.BatchPlanner`: few large batches, and a last round sized so that the
workers finish together), sends each round of them to the scheduler in one message, and writes
every finished batch in one transaction.

Failures
--------
- A point whose evaluation raises is a ``failed`` record with the exception as its reason; it is
  stored like any result and not retried.
- A worker that dies (killed, out of memory, segfault) is replaced by its nanny and dask
  re-runs its batch elsewhere; if dask gives up on a batch (``KilledWorker``) every point of it
  counts one attempt and is resubmitted alone, so a point that kills workers is isolated and,
  after ``max_attempts``, stored as ``failed`` with the reason.
- Any other error of the cluster itself (workers that cannot import filamant, a lost scheduler)
  stops the run with everything finished so far stored; nothing is marked failed for it.
- Ctrl-C (``KeyboardInterrupt``) or SIGTERM stops the run: batches already finished are stored,
  the rest are cancelled; the caller releases the lease. The signal takes effect only while the
  client waits for the cluster, never inside a store transaction (:mod:`studies.interrupts`).
"""

from __future__ import annotations

import functools
import gc
import itertools
import logging
import math
import os
import socket
import sys
import time
import uuid
from collections import deque
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, field
from typing import Any, Literal, get_args

from studies.batching import BatchPlanner
from studies.interrupts import SafeInterrupts
from studies.lease import Lease
from studies.points import Point, Record
from studies.store import Store
from sweeps.errors import ConfigError, FilamantError, StoreError

__all__ = ["ClusterSettings", "JobSystem", "RunStats", "WorkerThreads", "evaluate_batch",
           "make_jobqueue_cluster", "open_client", "run_points", "default_workers",
           "submit_queued_many", "gc_frozen", "started_within"]

logger = logging.getLogger(__name__)

JobSystem = Literal["slurm", "pbs", "sge", "lsf", "htcondor", "oar", "moab"]
_JOBQUEUE_CLASSES: dict[str, str] = {
    "slurm": "SLURMCluster", "pbs": "PBSCluster", "sge": "SGECluster", "lsf": "LSFCluster",
    "htcondor": "HTCondorCluster", "oar": "OARCluster", "moab": "MoabCluster",
}
assert set(_JOBQUEUE_CLASSES) == set(get_args(JobSystem))

#: A worker task: ``(study_json, [(point_id, params)], max_s) -> [Record]``, one record per
#: point it evaluated, in order: all of them, or (:func:`run_points` passes ``max_s``, in s)
#: the first ones, none started after ``max_s`` had passed (see :func:`evaluate_batch`).
Task = Callable[..., list[Record]]


def default_workers() -> int:
    """One worker per core available to this process."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True)
class ClusterSettings:
    """Where the work runs (``[cluster]``).

    Parameters
    ----------
    workers : int, optional
        Worker processes of a LocalCluster (single-threaded); default one per core.
    scheduler : str, optional
        Address of a running dask scheduler (``tcp://host:8786``) to join instead.
    jobqueue : mapping, optional
        Start workers through a batch system: ``system`` (slurm, pbs, sge, lsf, htcondor, oar,
        moab), ``jobs`` (number of batch jobs), and any dask-jobqueue option (``queue``,
        ``cores``, ``memory``, ``walltime``, ``account``, ``job_extra_directives``, ...) passed
        through unchanged.
    """

    workers: int | None = None
    scheduler: str | None = None
    jobqueue: Mapping[str, Any] | None = None

    def __post_init__(self) -> None:
        if self.workers is not None and (int(self.workers) != self.workers or self.workers < 1):
            raise ConfigError(f"cluster.workers: must be a whole number >= 1 "
                              f"(got {self.workers!r})")
        if self.scheduler is not None and self.jobqueue:
            raise ConfigError("cluster: give either scheduler or jobqueue, not both")

    def describe(self) -> str:
        if self.scheduler:
            return f"dask scheduler {self.scheduler}"
        if self.jobqueue:
            return f"{self.jobqueue.get('system')} batch jobs via dask-jobqueue"
        return f"{self.workers or default_workers()} local worker process(es)"


def make_jobqueue_cluster(options: Mapping[str, Any]) -> tuple[Any, int]:
    """Construct (but do not scale) the dask-jobqueue cluster of ``[cluster.jobqueue]``.

    Returns ``(cluster, jobs)``. Workers are single-threaded: ``processes`` defaults to
    ``cores``, so every job runs one worker process per core.

    Raises
    ------
    ConfigError
        For an unknown system, a missing dask-jobqueue, or options it rejects.
    """
    opts = dict(options)
    system = str(opts.pop("system", "")).lower()
    jobs = opts.pop("jobs", 1)
    if system not in _JOBQUEUE_CLASSES:
        raise ConfigError(f"cluster.jobqueue.system: expected one of "
                          f"{', '.join(get_args(JobSystem))} (got {system or 'nothing'!r})")
    if int(jobs) != jobs or jobs < 1:
        raise ConfigError(f"cluster.jobqueue.jobs: must be a whole number >= 1 (got {jobs!r})")
    dask_jobqueue = _import_jobqueue()
    cls = getattr(dask_jobqueue, _JOBQUEUE_CLASSES[system])
    known = _jobqueue_options(cls)
    unknown = sorted(k for k in opts if k not in known)
    if unknown:
        import difflib

        close = difflib.get_close_matches(unknown[0], sorted(known), n=1)
        hint = f"; did you mean {close[0]}?" if close else ""
        raise ConfigError(f"cluster.jobqueue.{unknown[0]}: not an option of dask-jobqueue's "
                          f"{_JOBQUEUE_CLASSES[system]}{hint}")
    if "cores" in opts:
        opts.setdefault("processes", opts["cores"])
    opts.setdefault("scheduler_options", {"dashboard_address": ":0"})
    try:
        cluster = cls(**opts)
    except (TypeError, ValueError) as exc:
        raise ConfigError(f"cluster.jobqueue: {_JOBQUEUE_CLASSES[system]} rejected the options: "
                          f"{exc}") from None
    return cluster, int(jobs)


def _import_jobqueue() -> Any:
    """``dask_jobqueue``, imported without its replacement of this process's Ctrl-C handler.

    Importing ``dask_jobqueue.runner`` sets SIGINT to ``sys.exit`` for the whole process (seen
    in dask-jobqueue 0.9), which would turn a later Ctrl-C into ``SystemExit`` outside a run.
    """
    import signal
    import threading

    main = threading.current_thread() is threading.main_thread()
    old = signal.getsignal(signal.SIGINT) if main else None
    try:
        import dask_jobqueue
        import dask_jobqueue.core  # noqa: F401 - the modules that set the handler, imported now
    except ImportError:
        raise ConfigError("cluster.jobqueue: needs the dask-jobqueue package "
                          "(pip install 'filamant[jobqueue]')") from None
    finally:
        if old is not None:
            signal.signal(signal.SIGINT, old)
    return dask_jobqueue


def _jobqueue_options(cls: type) -> set[str]:
    """Keyword options a dask-jobqueue cluster class accepts (its own, its job class's and the
    base job class's)."""
    import inspect

    from dask_jobqueue.core import Job

    names: set[str] = set()
    for fn in (cls.__init__, getattr(cls, "job_cls", Job).__init__, Job.__init__):
        names |= {p.name for p in inspect.signature(fn).parameters.values()
                  if p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)}
    return names - {"self", "scheduler", "job_cls"}


@contextmanager
def open_client(settings: ClusterSettings, *, connect_timeout_s: float = 15.0
                ) -> Iterator[Any]:
    """A ``distributed.Client`` on the cluster ``settings`` describes; closed on exit.

    ``connect_timeout_s`` bounds the wait for a running scheduler (``[cluster] scheduler``).
    """
    from distributed import Client, LocalCluster

    if settings.scheduler:
        try:
            client = Client(settings.scheduler, timeout=f"{connect_timeout_s}s")
        except (OSError, TimeoutError) as exc:
            raise ConfigError(f"cluster.scheduler: cannot reach {settings.scheduler} "
                              f"({exc})") from None
        try:
            yield client
        finally:
            client.close()
        return
    with ExitStack() as stack:
        if settings.jobqueue:
            cluster, jobs = make_jobqueue_cluster(settings.jobqueue)
            cluster.scale(jobs=jobs)
        else:
            import dask

            # held while the cluster lives: the scheduler and nannies in this process read
            # some of these settings after start-up
            stack.enter_context(dask.config.set(_local_cluster_config()))
            # the scheduler's small HTTP server (health, metrics) still starts: on a free port,
            # not dask's fixed 8787, which another cluster on this machine may hold
            cluster = LocalCluster(n_workers=settings.workers or default_workers(),
                                   threads_per_worker=1, processes=True,
                                   dashboard_address=":0", scheduler_kwargs={"dashboard": False})
        stack.callback(cluster.close)
        client = Client(cluster)
        stack.callback(client.close)
        if not settings.jobqueue:  # local workers share the terminal's Ctrl-C
            from studies.localworkers import LocalWorkerPlugin

            client.register_plugin(LocalWorkerPlugin())
        yield client


def _local_cluster_config() -> dict[str, Any]:
    """dask settings of the local cluster (one worker process per core on this machine)."""
    import dask

    # dask starts workers with MALLOC_TRIM_THRESHOLD_=65536, which makes glibc return
    # memory after every evaluation's temporaries: about 40 % slower per design (measured
    # with filamant bench). 64 MiB keeps the worker's heap while still trimming big frees.
    # Setting the trim threshold also freezes glibc's mmap threshold at 128 KiB, so every
    # frequency-stacked array (a few MB) would be a fresh mmap, page-faulted in and unmapped
    # again: another 15-20 % per design (measured: evaluate_batch of the benchmark study in
    # one process, with and without). 32 MiB, glibc's largest, is where the dynamic
    # threshold of an unconfigured process ends up anyway.
    environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ", {}) or {})
    environ["MALLOC_TRIM_THRESHOLD_"] = 64 * 2**20
    environ["MALLOC_MMAP_THRESHOLD_"] = 32 * 2**20
    return {
        # one task per worker thread at a time: a worker that dies was running exactly the
        # batch it is blamed for (dask counts every task on a dead worker as suspicious).
        # dask holds tasks back at the scheduler only in groups of more than twice the
        # threads; the few batches of a short run are placed on workers as submitted.
        "distributed.scheduler.worker-saturation": 1.0,
        "distributed.nanny.pre-spawn-environ": environ,
        # No dashboard (nobody is told its address) and no statistical profiler in the
        # workers (it samples every thread's stack every 10 ms for that dashboard, holding
        # the GIL the evaluation needs); both cost CPU the workers share with this client.
        "distributed.worker.profile.enabled": False,
        # For the same reason the housekeeping timers run less often: the event-loop health
        # tick (20 ms by default; it only feeds "event loop unresponsive" warnings), the
        # resource monitor (dashboard figures), the memory monitor (an RSS read per process
        # every 100 ms; once a second still stops a runaway worker long before it fills this
        # machine's memory) and work stealing (with one task per worker thread at a time
        # there is nothing to steal). Measured with two idle workers over 4 s: this process
        # 70 -> 8 ms of CPU per second, each worker 23 -> 3 ms.
        "distributed.admin.tick.interval": "1s",
        "distributed.admin.system-monitor.interval": "5s",
        "distributed.worker.memory.monitor-interval": "1s",
        "distributed.scheduler.work-stealing": False,
    }


# -- the worker side ------------------------------------------------------------------------


@functools.lru_cache(maxsize=4)
def _evaluator(study_json: str) -> Callable[[dict[str, Any]], Record]:
    from studies.context import point_evaluator

    return point_evaluator(study_json)


def started_within(items: Sequence[Any], max_s: float) -> Iterator[Any]:
    """Yield ``items`` in order, the first always and no later one once ``max_s`` seconds have
    passed since the first was yielded: how a worker task cuts its batch short (the caller
    evaluates each item between yields)."""
    start = time.perf_counter()
    for i, item in enumerate(items):
        if i and time.perf_counter() - start >= max_s:
            return
        yield item


def evaluate_batch(study_json: str, items: list[tuple[str, dict[str, Any]]],
                   max_s: float = math.inf) -> list[Record]:
    """Evaluate points of a study in order (runs on a worker; never touches the store).

    Parameters
    ----------
    study_json : str
        The study's canonical config as JSON (``Study.canonical()``).
    items : list of (point_id, params)
    max_s : float
        Start no point once this many seconds have passed since the first started (the first
        always runs): the client sizes batches before it knows how long a design takes, and
        returns the points left over to its queue.

    Returns
    -------
    list of Record
        One per evaluated item, in order (all items unless ``max_s`` cut the batch short); an
        evaluation that raises gives ``ok=False`` with the reason.
    """
    worker = f"{socket.gethostname()}:{os.getpid()}"
    evaluate = _evaluator(study_json)
    out: list[Record] = []
    for pid, params in started_within(items, max_s):
        t0 = time.perf_counter()
        try:
            rec = evaluate(params)
            rec.point_id = pid
        except Exception as exc:  # any failure of one design is that point's result
            rec = Record(pid, ok=False, reason=f"{type(exc).__name__}: {exc}")
        rec.elapsed_s = time.perf_counter() - t0
        rec.worker = worker
        out.append(rec)
    return out


# -- the client side ------------------------------------------------------------------------


@dataclass
class RunStats:
    """What one call of :func:`run_points` did."""

    evaluated: int = 0
    failed: int = 0
    batches: int = 0
    lost_batches: int = 0
    requeued: int = 0  # points handed back unevaluated by batches cut short at max_batch_s
    interrupted: bool = False
    elapsed_s: float = 0.0
    seconds_per_point: float | None = None
    workers: int = 0
    batch_sizes: list[int] = field(default_factory=list)


class WorkerThreads:
    """The cluster's worker-thread count, asked of the scheduler at most every ``max_age_s``.

    Each ask is a round trip through the scheduler, whose CPU local workers share; asking twice
    for every batch cost this process 0.11 s of CPU per 64-design run on two local workers,
    asking once a second 0.08 s (measured, mean of 8 runs each). Workers that join or leave
    (an adaptive or batch-job cluster) are seen within ``max_age_s``.
    """

    def __init__(self, client: Any, max_age_s: float = 1.0) -> None:
        self.client = client
        self.max_age_s = max_age_s
        self._n = 0
        self._at = -math.inf

    def __call__(self) -> int:
        """Worker threads now (as of at most ``max_age_s`` ago)."""
        now = time.monotonic()
        if now - self._at > self.max_age_s:
            self._n = sum(self.client.nthreads().values())
            self._at = now
        return self._n


@functools.lru_cache(maxsize=1)
def _can_mark_queued() -> bool:
    """Whether this dask's task spec takes the ``_data_producer`` mark (dask >= 2025)."""
    import inspect

    try:
        from dask.task_spec import Task
    except ImportError:  # pragma: no cover - older dask
        return False
    return "_data_producer" in inspect.signature(Task.__init__).parameters


#: Tasks submitted by this process: the n-th gets priority -n (see submit_queued_many).
_SUBMITTED = itertools.count(1)


def submit_queued_many(client: Any, tasks: Sequence[tuple[str, Callable[..., Any],
                                                          tuple[Any, ...]]]) -> list[Any]:
    """Submit ``(key, fn, args)`` tasks in one message, to wait in the scheduler's queue.

    dask holds a task back in the scheduler's queue (``worker-saturation``), handing it to the
    first worker thread to free, only if it is "root-ish": one of a group of more than twice
    the cluster's threads, or marked as producing data. A run has a few batches out at a
    time, so plain ``client.submit`` tasks are placed on a worker at once, by the scheduler's
    estimate of how busy each is, which knows nothing of batch sizes: two large batches of a
    short run could both go to one worker while the other stood idle (seen in 2 of 4
    64-design runs on two workers with a trial planner that sent its last two batches
    together, the run taking 1.7 times as long). Marked, they wait in the queue and are
    taken first in, first out, which is what :class:`studies.batching.BatchPlanner` plans
    for: every task this process submits gets a lower priority than the one before
    (``-n`` for the n-th), so the queue keeps the order of submission within a call and
    across calls. (dask orders its queue by priority first; tasks of other clients at the
    default priority 0 go before these.)

    All tasks go in one graph, so one message: the client sends the scheduler its messages
    at most every 10 ms, and a batch submitted just after another waited that long while its
    worker stood idle (measured: the second of two probe batches started 5-20 ms after the
    first, both submitted within 1 ms). Returns the Futures, in the order of ``tasks``.
    """
    if not tasks:
        return []
    if not _can_mark_queued():  # pragma: no cover - older dask: placed at once
        return [client.submit(fn, *args, key=key, pure=False) for key, fn, args in tasks]
    from dask.highlevelgraph import HighLevelGraph, MaterializedLayer
    from dask.task_spec import Task

    layers = {key: MaterializedLayer({key: Task(key, fn, *args, _data_producer=True)},
                                     annotations={"priority": -next(_SUBMITTED)})
              for key, fn, args in tasks}
    graph = HighLevelGraph(layers, {key: set() for key in layers})
    keys = [key for key, _, _ in tasks]
    return list(client.get(graph, keys, sync=False, fifo_timeout="0s"))


@contextmanager
def gc_frozen() -> Iterator[None]:
    """Keep the objects that exist now out of the garbage collector's full passes for a while.

    The client's pauses are every worker's: a full collection of this process (dask, the
    solver's imports, SQLAlchemy: some 170,000 objects) took 60-70 ms in one 64-design run on
    two workers of about 200 ms, and both workers stood idle through it (measured with
    ``filamant bench``'s study). ``gc.freeze`` (Python >= 3.7) moves every object tracked now
    to a permanent generation that collections skip; objects made inside the block are
    collected as usual, and ``gc.unfreeze`` on leaving hands the rest back. Does nothing when
    something else has already frozen objects.
    """
    if gc.get_freeze_count():
        yield
        return
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


class ClusterError(ConfigError):
    """The cluster failed in a way that is not one point's fault (reported under [cluster])."""


def run_points(
    store: Store,
    study: str,
    study_json: str,
    todo: Sequence[Point],
    lease: Lease,
    client: Any,
    *,
    task: Task = evaluate_batch,
    progress: bool | None = None,
    done_before: int = 0,
    max_attempts: int = 3,
    target_batch_s: float = 1.0,
    min_batch_s: float = 0.1,
    max_batch: int = 64,
    in_flight_per_worker: int = 2,
    max_batch_s: float | None = None,
) -> RunStats:
    """Evaluate ``todo`` on ``client``'s cluster, storing every finished batch.

    Parameters
    ----------
    store, study, lease
        Where results go; each batch is written under ``lease`` in one transaction.
    study_json : str
        Canonical config JSON handed to ``task``.
    todo : sequence of Point
        The points to evaluate (status planned).
    client : distributed.Client
    task : callable
        The worker function (default :func:`evaluate_batch`).
    progress : bool, optional
        Show a progress bar on stderr (default: when stderr is a terminal).
    done_before : int
        Points already finished (the bar starts there).
    max_attempts : int
        Attempts per point whose worker died before it is stored as failed.
    target_batch_s : float
        Wanted wall time of one batch in s.
    min_batch_s : float
        Smallest wall time (s) of a batch but for the last round, in which the points left are
        shared out so that the workers finish together: each batch costs the client a store
        transaction and the scheduler a round trip, about 10 ms of CPU (measured), which
        single cheap designs would not cover.
    max_batch : int
        Largest batch.
    in_flight_per_worker : int
        Batches kept submitted (running or queued) per worker thread.
    max_batch_s : float, optional
        A worker starts no point of a batch after this many seconds (default twice
        ``target_batch_s``); the points it leaves go back to the front of the queue. The first
        batches are sized before any design's time is known, and this bounds them.

    Returns
    -------
    RunStats
    """
    from distributed import as_completed
    from distributed.scheduler import KilledWorker
    from tqdm import tqdm

    stats = RunStats()
    t_start = time.perf_counter()
    queue: deque[Point] = deque(todo)
    retry: deque[Point] = deque()  # resubmitted alone after a lost batch
    inflight: dict[Any, list[Point]] = {}
    planner = BatchPlanner(target_batch_s=target_batch_s, min_batch_s=min_batch_s,
                           max_batch=max_batch, in_flight_per_worker=in_flight_per_worker)
    cap_s = 2.0 * target_batch_s if max_batch_s is None else max_batch_s
    # on this client's event loop: the default (the newest client's loop) would wait on these
    # futures from another loop when a process holds two clients, and then hear of each
    # finished batch only at that loop's next timer (measured: 50-200 ms late, a worker idle)
    ac = as_completed(loop=client.loop, with_results=True, raise_errors=False)
    tag = uuid.uuid4().hex[:8]

    threads = WorkerThreads(client)

    def slots() -> int:
        n = threads()
        stats.workers = max(stats.workers, n)
        return max(1, n)

    def send(batches: list[list[Point]], n: int, now: float) -> None:
        keys = [f"filamant-{tag}-{len(stats.batch_sizes) + i}-{b[0].point_id}"
                for i, b in enumerate(batches)]
        futs = submit_queued_many(client, [
            (key, task, (study_json, [(p.point_id, p.params) for p in b], cap_s))
            for key, b in zip(keys, batches, strict=True)])
        for key, fut, batch in zip(keys, futs, batches, strict=True):
            stats.batch_sizes.append(len(batch))
            inflight[fut] = batch
            planner.submitted(key, len(batch), now, n)
            ac.add(fut)

    stopping = False  # set once interrupted: the clean-up stores, it submits nothing

    def submit() -> None:
        if stopping:
            return
        n, now = slots(), time.perf_counter()
        batches = [[retry.popleft()]
                   for _ in range(min(len(retry), n * in_flight_per_worker - len(inflight)))]
        if queue:
            batches += [[queue.popleft() for _ in range(k)]
                        for k in planner.next_sizes(len(queue), n, now)]
        send(batches, n, now)

    def handle(fut: Any, batch: list[Point], result: Any = None) -> None:
        status = fut.status
        if status == "finished":
            records = fut.result() if result is None else result
            got = [r.point_id for r in records]
            # the batch's points in order, all or (cut short at max_batch_s) the first ones
            if not got or got != [p.point_id for p in batch[:len(got)]]:
                raise ClusterError(f"cluster: a batch returned results for other points "
                                   f"({got[:3]}...); refusing to store them")
            planner.finished(fut.key, time.perf_counter(),
                             [r.elapsed_s for r in records if r.ok])
            if len(got) < len(batch):  # the rest back to the front of the queue
                queue.extendleft(reversed(batch[len(got):]))
                stats.requeued += len(batch) - len(got)
                planner.requeued()
            submit()  # the freed worker's next batch goes out before this one is stored
            store.write_batch(study, records, owner=lease.owner)
            stats.batches += 1
            stats.evaluated += len(records)
            stats.failed += sum(not r.ok for r in records)
            bar.update(len(records))
            return
        exc = fut.exception() if status == "error" else None
        if status in ("cancelled", "lost") or isinstance(exc, KilledWorker):
            stats.lost_batches += 1
            planner.finished(fut.key, time.perf_counter(), [])
            reason = f"worker died while evaluating it ({type(exc).__name__ if exc else status})"
            ids = [p.point_id for p in batch]
            gone = set(store.record_lost_attempt(study, ids, reason, owner=lease.owner,
                                                 max_attempts=max_attempts))
            logger.warning("a batch of %d point(s) was lost with its worker; %d resubmitted "
                           "alone, %d given up", len(batch), len(batch) - len(gone), len(gone))
            stats.failed += len(gone)
            bar.update(len(gone))
            retry.extend(p for p in batch if p.point_id not in gone)
            submit()
            return
        raise ClusterError(f"cluster: a batch failed outside the solver: "
                           f"{type(exc).__name__}: {exc} (is filamant installed, at this "
                           "version, on every worker?)")

    bar = tqdm(total=done_before + len(todo), initial=done_before, unit="pt", file=sys.stderr,
               desc=study, dynamic_ncols=True, smoothing=0.1,
               disable=(not sys.stderr.isatty()) if progress is None else not progress)
    interrupts = SafeInterrupts()
    with interrupts.deferred(), gc_frozen():  # a second Ctrl-C waits for the clean-up below
        try:
            _drive(interrupts, ac, inflight, handle, submit, lease, store, study)
        except KeyboardInterrupt:
            stats.interrupted = True
            stopping = True
            logger.warning("interrupted: storing finished batches, cancelling the rest")
            for fut, batch in list(inflight.items()):
                if fut.status == "finished":
                    try:
                        handle(fut, batch)
                    except (FilamantError, OSError) as exc:  # pragma: no cover - best effort
                        logger.warning("could not store a finished batch: %s", exc)
            _cancel(client, list(inflight))
        except BaseException:
            _cancel(client, list(inflight))
            raise
        finally:
            bar.close()
            stats.elapsed_s = time.perf_counter() - t_start
            stats.seconds_per_point = planner.per_point_s
    return stats


def _drive(interrupts: SafeInterrupts, ac: Any, inflight: dict[Any, list[Point]],
           handle: Callable[[Any, list[Point], Any], None], submit: Callable[[], None],
           lease: Lease, store: Store, study: str) -> None:
    """Submit, then handle each batch as it completes (handling it submits the next ones);
    Ctrl-C only while waiting for one."""
    submit()
    while inflight:
        with interrupts.waiting():
            fut, result = next(ac)
        handle(fut, inflight.pop(fut), result)
        if lease.lost.is_set():
            raise StoreError(f"{store.display_url}: study {study!r}: the run lease was taken "
                             "over by another client; stopping")
        # released only now that the next batches are out: the client sends the scheduler
        # its messages at most every 10 ms, so a release sent just before a submission could
        # hold that submission (and the freed worker) back that long
        fut.release()
    interrupts.check()


def _cancel(client: Any, futures: list[Any]) -> None:
    if futures:
        try:
            client.cancel(futures)
        except Exception as exc:  # noqa: BLE001 - the cluster may already be gone
            logger.debug("cancel failed: %s", exc)
