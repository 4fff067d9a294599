"""Optimization studies: optuna asks and tells on the client, the solves run on dask.

``[sampler] method = "optimize"`` turns a study into an optimization. The optuna study lives in
the study's own database (``optuna.storages.RDBStorage`` on ``[study] store``: SQLite by default,
PostgreSQL for shared use; optuna's tables sit beside the ``filamant_`` ones) and is named after
the filamant study. The client asks optuna for a trial, turns its parameters into a point of the
study and submits the point's evaluation to a free dask worker — at most one trial per worker
thread in flight, a new one asked as soon as a worker frees up — then stores the result and
tells optuna.

Trials and points
-----------------
Every trial is also a point of the study: the same ``point_id`` (hash of the canonical parameter
values, the solver settings and the plan fingerprint, :mod:`studies.points`), the same results
and responses tables, ``source = "optimize"``, so ``status``, ``export``, ``fit`` and ``report``
see an optimization like any study. A point is stored as ``planned`` when its trial is asked
(``seq`` = ask order) and gets its result in one transaction when its evaluation returns; only
then is optuna told. The trial's user attribute ``point_id`` records which point it is (several
trials may share one point). A parameter set proposed again reuses the stored result, or waits
for the evaluation already in flight: no point is evaluated twice.

Outcomes
--------
- ``COMPLETE``: the objective metrics have values; the constraint violations of
  :meth:`studies.pareto.Goals.violations` are set with ``Trial.set_constraint`` (optuna 5's
  successor of the deprecated ``constraints_func``; the samplers read them from there).
- ``PRUNED``: the design has no objective vector, for one of two reasons, given in the trial's
  user attribute ``reason``:

  - its solve raised, or killed its worker ``max_attempts`` times: the point is ``failed``
    with the same reason, the trial has ``failed_solve = true`` and every constraint counts as
    violated by :data:`studies.pareto.MISSING_VIOLATION`;
  - it was solved but an objective metric is null (it does not exist for this design, e.g. no
    resonance in the band): the point is ``done``; the constraints are those of its metrics.

  Why not ``FAIL`` for a failed solve: optuna's samplers ignore FAIL trials, so TPE never
  learns where the solver refuses designs and, on a choice such as a trace too wide for the
  thin-wire model, keeps proposing it (measured: after its start-up, TPE asked for the refused
  width in 23 trials out of 23). A pruned trial ranks below every complete one in TPE, which
  then avoids it; NSGA-II draws parents from complete trials only.
- ``FAIL``: the run stopped (killed, Ctrl-C) while the trial was in flight: user attribute
  ``interrupted = true``; its parameters are asked again.

Only COMPLETE trials count toward ``optimize.trials``. So that a space where most designs fail
cannot keep a run going for ever, the run stops once ``max(20, 3 * trials)`` trials have been
pruned or failed over the study's life (interrupted ones not counted; a design proposed again
counts again); the summary says so.

Resume
------
The run lease (:mod:`studies.lease`) keeps a second client out. A killed run leaves trials
``RUNNING`` and maybe points ``planned``; the next run marks those trials ``FAIL`` (user
attributes ``reason`` and ``interrupted``), enqueues their parameter sets again
(``Study.enqueue_trial``, user attribute ``retry_of``) so they are asked first, and continues
until ``trials`` trials are COMPLETE. A re-asked point that was already stored before the kill
is told from the store, not solved again. The resumed sampler is seeded with
``(seed, trials so far)``, so it does not replay the first run's random start.

Ctrl-C or SIGTERM stops a run cleanly: evaluations already finished are stored and told, the
others cancelled, their trials failed and requeued at once, the lease released. The signal
takes effect only between database transactions (see :mod:`studies.interrupts`).

Samplers (``[optimize] algorithm``)
-----------------------------------
- ``tpe``: ``optuna.samplers.TPESampler`` (Bergstra et al., NeurIPS 2011; multivariate for one
  objective, MOTPE for several), ``n_startup_trials = clamp(trials // 5, 3, 10)``.
- ``nsga2``: ``optuna.samplers.NSGAIISampler`` (Deb et al., IEEE TEVC 6(2), 2002) with
  constrained domination; ``population_size = clamp(trials // 5, 8, 50)``.
- ``gp``: ``optuna.samplers.GPSampler`` needs PyTorch. Where it cannot be imported the closest
  sampler that runs is used instead — TPE with the same small start-up, like the GP a sequential
  model-based (Bayesian) optimizer that handles constraints, integers and choices — and a
  warning says so; the sampler used is recorded in the optuna study's user attributes.
"""

from __future__ import annotations

import importlib.util
import itertools
import logging
import sys
import time
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from studies.api import RunSummary, lease_options, open_study
from studies.context import StudyContext
from studies.interrupts import SafeInterrupts
from studies.lease import Lease
from studies.pareto import Goals, pareto_front
from studies.points import Point, Record, canonical_value
from studies.runner import (
    ClusterError,
    Task,
    WorkerThreads,
    evaluate_batch,
    open_client,
    submit_queued_many,
)
from studies.space import Space
from studies.store import METRIC_COLUMNS, Store, display_url
from sweeps.errors import ConfigError, FilamantError, StoreError

__all__ = ["distributions", "make_sampler", "open_storage", "run_optimize", "optimize_status",
           "trial_table", "ATTR_POINT", "ATTR_REASON", "ATTR_RETRY", "ATTR_INTERRUPTED",
           "ATTR_FAILED_SOLVE"]

logger = logging.getLogger(__name__)

#: Trial user attributes.
ATTR_POINT = "point_id"
ATTR_REASON = "reason"
ATTR_RETRY = "retry_of"
ATTR_INTERRUPTED = "interrupted"
ATTR_FAILED_SOLVE = "failed_solve"
#: Study user attributes.
_ATTR_SAMPLER = "filamant_sampler"
_ATTR_ALGORITHM = "filamant_algorithm"


# -- optuna set-up --------------------------------------------------------------------------


def distributions(space: Space) -> dict[str, Any]:
    """optuna distributions of a study's ``[space]``: float ranges (log if asked), integer
    ranges (``IntDistribution``, log if asked) and choices (``CategoricalDistribution``)."""
    from optuna.distributions import (
        CategoricalDistribution,
        FloatDistribution,
        IntDistribution,
    )

    out: dict[str, Any] = {}
    for p in space.parameters:
        if p.kind == "choice":
            out[p.name] = CategoricalDistribution(list(p.values))
        elif p.integer:
            out[p.name] = IntDistribution(int(p.min), int(p.max), log=p.log)  # type: ignore[arg-type]
        else:
            out[p.name] = FloatDistribution(float(p.min), float(p.max), log=p.log)  # type: ignore[arg-type]
    return out


def _clamp(x: int, lo: int, hi: int) -> int:
    return max(lo, min(hi, x))


def make_sampler(algorithm: str, trials: int, seed: int) -> tuple[Any, str]:
    """The optuna sampler of ``[optimize] algorithm``; returns ``(sampler, description)``.

    See the module docstring for the settings and the ``gp`` fallback.
    """
    import optuna

    startup = _clamp(trials // 5, 3, 10)
    if algorithm == "nsga2":
        size = _clamp(trials // 5, 8, 50)
        return (optuna.samplers.NSGAIISampler(seed=seed, population_size=size),
                f"NSGAIISampler(population_size={size})")
    if algorithm == "gp":
        if importlib.util.find_spec("torch") is not None:
            return (optuna.samplers.GPSampler(seed=seed, n_startup_trials=startup,
                                              deterministic_objective=True),
                    f"GPSampler(n_startup_trials={startup})")
        logger.warning("optimize.algorithm = \"gp\": optuna's GPSampler needs PyTorch, which is "
                       "not installed; using the TPE sampler instead (pip install torch for the "
                       "Gaussian-process sampler)")
        return (optuna.samplers.TPESampler(seed=seed, n_startup_trials=startup),
                f"TPESampler(n_startup_trials={startup}; gp asked, PyTorch missing)")
    if algorithm != "tpe":
        raise ConfigError(f"optimize.algorithm: expected tpe, nsga2 or gp (got {algorithm!r})")
    return (optuna.samplers.TPESampler(seed=seed, n_startup_trials=startup),
            f"TPESampler(n_startup_trials={startup})")


def _immediate_transactions(engine: Any) -> None:
    """Give optuna's SQLite engine the filamant store's settings (WAL, foreign keys, a 30 s busy
    timeout: :func:`studies.store.sqlite_setup`) with every transaction a writer from its start
    (``BEGIN IMMEDIATE``): its read-then-write transactions then wait for the lease heartbeat
    instead of failing on a lock upgrade."""
    from studies.store import sqlite_setup

    sqlite_setup(engine)
    engine.update_execution_options(filamant_write=True)  # BEGIN IMMEDIATE for all
    engine.dispose()  # connections made from now on get the settings


def open_storage(url: str, *, create: bool = True) -> Any:
    """``optuna.storages.RDBStorage`` on the study's database (dispose its ``engine`` after).

    ``create=True`` (the run) creates optuna's tables if missing and, on SQLite, makes every
    transaction a writer from its start; ``create=False`` (``status``, ``export``) only reads.
    """
    from optuna.storages import RDBStorage
    from sqlalchemy.engine import make_url

    sqlite = make_url(url).get_backend_name() == "sqlite"
    kw: dict[str, Any] = {"connect_args": {"timeout": 30.0}} if sqlite else \
        {"pool_pre_ping": True}
    try:
        storage = RDBStorage(url, engine_kwargs=kw, skip_table_creation=not create)
    except Exception as exc:  # optuna wraps driver and schema errors in several types
        raise StoreError(f"study.store: cannot open the optimization trials in "
                         f"{display_url(url)}: {exc}") from None
    if sqlite and create:
        _immediate_transactions(storage.engine)
    return storage


@contextmanager
def _quiet_optuna() -> Iterator[None]:
    """optuna's own per-trial INFO lines off while we run (our log says what matters)."""
    import optuna

    old = optuna.logging.get_verbosity()
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    try:
        yield
    finally:
        optuna.logging.set_verbosity(old)


def _study_id(storage: Any, name: str) -> int | None:
    try:
        return int(storage.get_study_id_from_name(name))
    except KeyError:
        return None


def _derived_seed(seed: int, n_before: int) -> int:
    if n_before == 0:
        return int(seed)
    return int(np.random.SeedSequence([int(seed), int(n_before)]).generate_state(1)[0])


# -- outcomes -------------------------------------------------------------------------------


@dataclass
class _Outcome:
    """What a point's result means for a trial."""

    state: Literal["complete", "pruned", "fail"]
    values: list[float] | None = None
    constraints: dict[str, float] = field(default_factory=dict)
    reason: str = ""
    failed_solve: bool = False


def _outcome(goals: Goals, ok: bool, metrics: dict[str, Any], reasons: dict[str, str],
             failure: str) -> _Outcome:
    if not ok:
        return _Outcome("pruned", constraints=goals.violations({}), failed_solve=True,
                        reason=failure or "the evaluation failed")
    cons = goals.violations(metrics)
    values, why = goals.objective_values(metrics, reasons)
    if values is None:
        return _Outcome("pruned", constraints=cons, reason=why)
    return _Outcome("complete", values=values, constraints=cons)


def _params_of(space: Space, raw: dict[str, Any]) -> dict[str, Any] | None:
    """Canonical, validated parameter values of a trial, or ``None`` if incomplete."""
    if any(n not in raw for n in space.names):
        return None
    vals = {n: canonical_value(raw[n]) for n in space.names}
    return space.validate(vals, where="optimize trial")


# -- the loop -------------------------------------------------------------------------------


@dataclass
class _Job:
    point: Point
    trials: list[Any]
    future: Any = None


class _Optimizer:
    """One ``run``: the ask-and-tell loop (client side; owns the store writes)."""

    def __init__(self, ctx: StudyContext, store: Store, lease: Lease, storage: Any,
                 study: Any, goals: Goals, target: int, *, task: Task, max_attempts: int,
                 interrupts: SafeInterrupts) -> None:
        self.ctx, self.store, self.lease, self.study = ctx, store, lease, study
        self.interrupts = interrupts
        self.storage = storage
        self.goals, self.target, self.task = goals, target, task
        self.max_attempts = max_attempts
        self.dists = distributions(ctx.space)
        self.cap = max(20, 3 * target)
        self.tag = uuid.uuid4().hex[:8]
        self.keys = itertools.count()
        self.jobs: dict[str, _Job] = {}
        self.by_future: dict[Any, str] = {}
        self.known: dict[str, _Outcome] = {}
        self.planned: dict[str, Point] = {}
        self.next_seq = store.next_seq(ctx.name)
        self.complete = 0
        self.unsuccessful = 0
        self.asked = 0
        self.evaluated = 0
        self.times: list[float] = []
        self.workers = 0
        self.stop_reason: str | None = None
        self.bar: Any = None
        self.ac: Any = None
        self.client: Any = None
        self.threads: Callable[[], int] = lambda: 0

    # state of the store and of optuna at start

    def load(self) -> None:
        """Read stored results (reused for re-proposed points) and trial counts."""
        from optuna.trial import TrialState

        self.planned = {p.point_id: p for p in self.store.points(self.ctx.name, "planned")}
        for r in self.store.results(self.ctx.name):
            if r["status"] == "planned":
                continue
            metrics = {m: r[m] for m in METRIC_COLUMNS}
            self.known[r["point_id"]] = _outcome(self.goals, r["status"] == "done", metrics,
                                                 r["reasons"], r["reason"] or "")
        for t in self.study.get_trials(deepcopy=False):
            if t.state == TrialState.COMPLETE:
                self.complete += 1
            elif t.state == TrialState.PRUNED or (
                    t.state == TrialState.FAIL and not t.user_attrs.get(ATTR_INTERRUPTED)):
                self.unsuccessful += 1

    def recover(self) -> int:
        """Mark trials left RUNNING as FAIL and, while trials are missing, enqueue their
        parameters (and those of points still ``planned``) to be asked again; returns how many
        were enqueued."""
        from optuna.trial import TrialState

        storage = self.storage
        sid = storage.get_study_id_from_name(self.ctx.name)
        queued: set[str] = set()
        for t in self.study.get_trials(deepcopy=False, states=(TrialState.WAITING,)):
            p = _params_of(self.ctx.space, dict(t.system_attrs.get("fixed_params", {})))
            if p is not None:
                queued.add(self.ctx.point_id(p))
        running: dict[str, tuple[dict[str, Any], int]] = {}
        for t in self.study.get_trials(deepcopy=False, states=(TrialState.RUNNING,)):
            tid = storage.get_trial_id_from_study_id_trial_number(sid, t.number)
            storage.set_trial_user_attr(tid, ATTR_REASON, "interrupted: the run stopped before "
                                        "this trial's result was told; asked again")
            storage.set_trial_user_attr(tid, ATTR_INTERRUPTED, True)
            self.study.tell(t.number, state=TrialState.FAIL)
            p = _params_of(self.ctx.space, dict(t.params))
            if p is not None:
                running.setdefault(self.ctx.point_id(p), (p, t.number))
        if self.complete >= self.target:
            return 0  # nothing more to ask
        # points left planned first (in ask order), then the other interrupted trials
        again = [(q.params, running.pop(q.point_id, (None, None))[1])
                 for q in sorted(self.planned.values(), key=lambda q: q.seq)]
        again += list(running.values())
        n = 0
        for params, number in again:
            pid = self.ctx.point_id(params)
            if pid in queued:
                continue
            queued.add(pid)
            attrs = {} if number is None else {ATTR_RETRY: number}
            self.study.enqueue_trial(params, user_attrs=attrs, skip_if_exists=False)
            n += 1
        if n:
            logger.info("study %r: %d interrupted trial(s) asked again", self.ctx.name, n)
        return n

    # asking

    def slots(self) -> int:
        n = self.threads()
        self.workers = max(self.workers, n)
        return max(1, n)

    def in_flight(self) -> int:
        return sum(len(j.trials) for j in self.jobs.values())

    def fill(self) -> None:
        """Ask trials until every worker is busy or enough trials are under way.

        The new evaluations go to the cluster together, in one message (see
        :func:`studies.runner.submit_queued_many`).
        """
        fresh: list[_Job] = []
        self._ask_until_busy(fresh)  # if interrupted, interrupted() requeues what it asked
        self.submit(*fresh)

    def _ask_until_busy(self, fresh: list[_Job]) -> None:
        while self.stop_reason is None:
            self.interrupts.check()
            if self.complete >= self.target:
                return
            if self.unsuccessful >= self.cap:
                self.stop_reason = (f"{self.unsuccessful} trials were pruned or failed (the "
                                    f"limit is {self.cap}); see `filamant status` for the "
                                    "reasons and narrow [space] or relax the objectives")
                logger.warning("study %r: stopping: %s", self.ctx.name, self.stop_reason)
                return
            if self.complete + self.in_flight() >= self.target or \
                    len(self.jobs) >= self.slots():
                return
            job = self.ask_one()
            if job is not None:
                fresh.append(job)

    def ask_one(self) -> _Job | None:
        """Ask one trial; the new evaluation it needs (to submit), if any."""
        trial = self.study.ask(self.dists)
        self.asked += 1
        params = _params_of(self.ctx.space, trial.params)
        assert params is not None  # every distribution is suggested by ask()
        pid = self.ctx.point_id(params)
        trial.set_user_attr(ATTR_POINT, pid)
        logger.debug("trial %d -> point %s %s", trial.number, pid, params)
        if pid in self.known:
            self.tell(trial, self.known[pid])
        elif pid in self.jobs:
            self.jobs[pid].trials.append(trial)
        else:
            point = self.planned.pop(pid, None)
            if point is None:
                point = Point(pid, params, self.next_seq, "optimize")
                self.next_seq += 1
                self.store.write_batch(self.ctx.name, [], owner=self.lease.owner,
                                       new_points=[point])
            self.jobs[pid] = _Job(point, [trial])
            return self.jobs[pid]
        return None

    def submit(self, *jobs: _Job) -> None:
        keys = [f"filamant-opt-{self.tag}-{j.point.point_id}-{next(self.keys)}" for j in jobs]
        futures = submit_queued_many(self.client, [
            (key, self.task, (self.ctx.canonical_json, [(j.point.point_id, j.point.params)]))
            for key, j in zip(keys, jobs, strict=True)])
        for job, fut in zip(jobs, futures, strict=True):
            job.future = fut
            self.by_future[fut] = job.point.point_id
            self.ac.add(fut)

    # telling

    def tell(self, trial: Any, out: _Outcome) -> None:
        from optuna.trial import TrialState

        if out.reason:
            trial.set_user_attr(ATTR_REASON, out.reason)
        if out.failed_solve:
            trial.set_user_attr(ATTR_FAILED_SOLVE, True)
        if out.state == "fail":
            self.study.tell(trial, state=TrialState.FAIL)
        else:
            for key, value in out.constraints.items():
                trial.set_constraint(key, value)
            if out.state == "pruned":
                self.study.tell(trial, state=TrialState.PRUNED)
            else:
                self.study.tell(trial, out.values)
        if out.state == "complete":
            self.complete += 1
            self.bar.update(1)
        else:
            self.unsuccessful += 1
            logger.info("trial %d %s: %s", trial.number, out.state, out.reason)

    def handle(self, fut: Any, result: Any = None) -> None:
        """Store a finished evaluation and tell its trials; retry a lost one.

        ``result`` is the finished future's result when already gathered (by the
        ``as_completed`` iterator, on the client's event loop), else it is gathered here.
        """
        from distributed.scheduler import KilledWorker

        pid = self.by_future.pop(fut)
        job = self.jobs.pop(pid)
        status = fut.status
        if status == "finished":
            records: list[Record] = fut.result() if result is None else result
            if [r.point_id for r in records] != [pid]:
                raise ClusterError(f"cluster: an evaluation returned results for other points "
                                   f"({[r.point_id for r in records][:3]}); refusing to store")
            rec = records[0]
            self.store.write_batch(self.ctx.name, records, owner=self.lease.owner)
            self.evaluated += 1
            if rec.ok:
                self.times.append(rec.elapsed_s)
            out = _outcome(self.goals, rec.ok, rec.metrics, rec.reasons, rec.reason)
        else:
            exc = fut.exception() if status == "error" else None
            if not (status in ("cancelled", "lost") or isinstance(exc, KilledWorker)):
                raise ClusterError(f"cluster: an evaluation failed outside the solver: "
                                   f"{type(exc).__name__}: {exc} (is filamant installed, at "
                                   "this version, on every worker?)")
            reason = f"worker died while evaluating it ({type(exc).__name__ if exc else status})"
            gone = self.store.record_lost_attempt(self.ctx.name, [pid], reason,
                                                  owner=self.lease.owner,
                                                  max_attempts=self.max_attempts)
            if not gone:
                logger.warning("point %s was lost with its worker; submitted again", pid)
                self.jobs[pid] = job
                self.submit(job)
                return
            out = _outcome(self.goals, False, {}, {},
                           f"gave up after {self.max_attempts} attempts: {reason}")
        self.known[pid] = out
        for trial in job.trials:
            self.tell(trial, out)

    def loop(self) -> None:
        self.fill()
        while self.jobs:
            with self.interrupts.waiting():
                fut, result = next(self.ac)
            self.handle(fut, result)
            if self.lease.lost.is_set():
                raise StoreError(f"{self.store.display_url}: study {self.ctx.name!r}: the run "
                                 "lease was taken over by another client; stopping")
            self.fill()

    def interrupted(self) -> None:
        """Ctrl-C: store what has finished, cancel the rest, requeue its trials."""
        for pid, job in list(self.jobs.items()):
            if job.future is not None and job.future.status == "finished":
                try:
                    self.handle(job.future)
                except (FilamantError, OSError) as exc:  # pragma: no cover - best effort
                    logger.warning("could not store a finished evaluation of %s: %s", pid, exc)
        self.cancel()
        try:
            self.planned.update({j.point.point_id: j.point for j in self.jobs.values()})
            self.jobs.clear()
            self.recover()
        except Exception as exc:  # noqa: BLE001 - the next run recovers them anyway
            logger.warning("could not requeue the interrupted trials now (%s); the next run "
                           "will", exc)

    def cancel(self) -> None:
        futures = [j.future for j in self.jobs.values() if j.future is not None]
        if futures and self.client is not None:
            try:
                self.client.cancel(futures)
            except Exception as exc:  # noqa: BLE001 - the cluster may already be gone
                logger.debug("cancel failed: %s", exc)


def run_optimize(ctx: StudyContext, *, fresh: bool = False, progress: bool | None = None,
                 task: Task = evaluate_batch, heartbeat_s: float | None = None,
                 stale_after_s: float | None = None,
                 on_start: Callable[[str, int, int], None] | None = None,
                 max_attempts: int = 3) -> RunSummary:
    """Run (or resume) the optimization study ``ctx`` until ``optimize.trials`` trials are
    COMPLETE.

    Parameters
    ----------
    ctx : StudyContext
        An optimization study (``sampler.method = "optimize"``).
    fresh : bool
        Delete the stored study (points and optuna trials) first.
    progress : bool, optional
        Progress bar on stderr (default: when stderr is a terminal).
    task : callable
        The worker function (default :func:`studies.runner.evaluate_batch`; tests pass others).
    heartbeat_s, stale_after_s : float, optional
        Lease timings (see :class:`studies.lease.Lease`).
    on_start : callable, optional
        ``on_start(store_url, trials still to complete, trials)`` once the lease is held.
    max_attempts : int
        Attempts of a point whose worker died before its trial fails.

    Returns
    -------
    RunSummary
        Point counts as for any study, and ``trials``: ``target``, ``complete``, ``pruned``,
        ``failed`` (optuna states; interrupted trials count as failed), ``asked`` (this run),
        ``stopped`` (why the run ended early, or ``None``).

    Raises
    ------
    ConfigError, StoreError
        As :func:`studies.api.run_study`.
    """
    if ctx.method != "optimize" or getattr(ctx.study, "optimize", None) is None:
        raise ConfigError(f"study {ctx.name!r}: not an optimization study (sampler.method = "
                          f"\"{ctx.method}\")")
    section = ctx.study.optimize
    goals = Goals.from_section(section)
    target = int(section.trials)
    t0 = time.perf_counter()
    with Store(ctx.store_url) as store, _quiet_optuna():
        if not fresh:  # refuse a changed config before writing anything
            store.check_compatible(ctx.name, ctx.canonical, ctx.plan_fingerprint,
                                   ctx.solver_fingerprint, ctx.study.metrics_fingerprint())
        with Lease.acquire(store, ctx.name, command="run",
                           **lease_options(heartbeat_s, stale_after_s)) as lease:
            created, deleted = open_study(store, ctx, lease, fresh=fresh)
            interrupts = SafeInterrupts()
            storage = open_storage(ctx.store_url)
            try:
                with interrupts.deferred():
                    study, described = _open_trials(ctx, storage, created, section.algorithm,
                                                    goals, target)
                    opt = _Optimizer(ctx, store, lease, storage, study, goals, target,
                                     task=task, max_attempts=max_attempts,
                                     interrupts=interrupts)
                    opt.load()
                    opt.recover()
                    if on_start is not None:
                        on_start(store.display_url, max(0, target - opt.complete), target)
                    interrupted = _drive(opt, progress, described)
                    trials = _trial_counts(study)
            finally:
                storage.engine.dispose()
            counts = store.counts(ctx.name)
    trials.update(target=target, asked=opt.asked, stopped=opt.stop_reason)
    return RunSummary(
        study=ctx.name, store=store.display_url, total=counts["total"], done=counts["done"],
        failed=counts["failed"], planned=counts["planned"], evaluated=opt.evaluated,
        created=created, deleted=deleted, interrupted=interrupted,
        elapsed_s=time.perf_counter() - t0,
        seconds_per_point=float(np.median(opt.times)) if opt.times else None,
        workers=opt.workers, trials=trials,
    )


def _open_trials(ctx: StudyContext, storage: Any, created: bool, algorithm: str, goals: Goals,
                 target: int) -> tuple[Any, str]:
    """The optuna study of ``ctx`` with its sampler (seeded from the trials so far)."""
    import optuna

    sid = _study_id(storage, ctx.name)
    if created and sid is not None:  # trials of a deleted incarnation of the study
        logger.warning("study %r: deleting the optuna trials left from an earlier study of "
                       "this name", ctx.name)
        optuna.delete_study(study_name=ctx.name, storage=storage)
        sid = None
    n_before = 0 if sid is None else len(storage.get_all_trials(sid, deepcopy=False))
    sampler, described = make_sampler(algorithm, target, _derived_seed(ctx.seed, n_before))
    study = optuna.create_study(storage=storage, study_name=ctx.name, sampler=sampler,
                                directions=goals.directions, load_if_exists=True)
    study.set_user_attr(_ATTR_ALGORITHM, algorithm)
    study.set_user_attr(_ATTR_SAMPLER, described)
    return study, described


def _drive(opt: _Optimizer, progress: bool | None, described: str) -> bool:
    """Run the loop on the study's cluster with a progress bar; ``True`` if interrupted."""
    from tqdm import tqdm

    ctx = opt.ctx
    opt.bar = tqdm(total=opt.target, initial=min(opt.complete, opt.target), unit="trial",
                   file=sys.stderr, desc=ctx.name, dynamic_ncols=True, smoothing=0.1,
                   disable=(not sys.stderr.isatty()) if progress is None else not progress)
    try:
        if opt.complete >= opt.target:
            return False
        from distributed import as_completed

        logger.info("study %r: %d of %d trial(s) to complete with %s on %s", ctx.name,
                    opt.target - opt.complete, opt.target, described, ctx.cluster.describe())
        with open_client(ctx.cluster) as client:
            # see run_points: this client's loop; each result gathered there as it finishes
            opt.client = client
            opt.ac = as_completed(loop=client.loop, with_results=True, raise_errors=False)
            opt.threads = WorkerThreads(client)
            try:
                opt.loop()
            except KeyboardInterrupt:
                logger.warning("interrupted: storing finished evaluations, cancelling the rest")
                opt.interrupted()
                return True
            except BaseException:
                opt.cancel()
                raise
        return False
    finally:
        opt.bar.close()


def _trial_counts(study: Any) -> dict[str, Any]:
    from collections import Counter

    states = Counter(t.state.name.lower() for t in study.get_trials(deepcopy=False))
    return {"complete": states.get("complete", 0), "pruned": states.get("pruned", 0),
            "failed": states.get("fail", 0), "running": states.get("running", 0),
            "waiting": states.get("waiting", 0)}


# -- status and inspection ------------------------------------------------------------------


@contextmanager
def _stored_study(ctx: StudyContext, store: Store) -> Iterator[Any | None]:
    """The optuna study of ``ctx``, read-only, or ``None`` if it has no trials yet."""
    import optuna
    from sqlalchemy import inspect

    if not inspect(store.engine).has_table("studies"):
        yield None
        return
    storage = open_storage(ctx.store_url, create=False)
    try:
        if _study_id(storage, ctx.name) is None:
            yield None
            return
        with _quiet_optuna():
            yield optuna.load_study(study_name=ctx.name, storage=storage,
                                    sampler=optuna.samplers.RandomSampler(seed=0))
    finally:
        storage.engine.dispose()


def optimize_status(ctx: StudyContext, store: Store, table: Any = None) -> dict[str, Any]:
    """The optimization part of ``status``: trial counts and the best value or front size.

    Returns a dict with ``trials`` (target), ``complete``, ``pruned``, ``failed``, ``running``,
    ``waiting``, ``algorithm``, ``sampler``, ``objectives`` (``[{metric, goal}]``),
    ``front_size`` (feasible non-dominated points) and ``best`` — for one objective the best
    feasible point ``{metric, goal, value, point_id, params}``, else ``None``.

    ``table`` is the study table if the caller has it (else it is read).
    """
    from studies.api import table_of

    section = ctx.study.optimize
    goals = Goals.from_section(section)
    out: dict[str, Any] = {"trials": int(section.trials), "complete": 0, "pruned": 0,
                           "failed": 0, "running": 0, "waiting": 0,
                           "algorithm": section.algorithm, "sampler": None,
                           "objectives": [{"metric": o.metric, "goal": o.goal}
                                          for o in goals.objectives],
                           "front_size": 0, "best": None}
    with _stored_study(ctx, store) as study:
        if study is not None:
            out.update(_trial_counts(study))
            out["sampler"] = study.user_attrs.get(_ATTR_SAMPLER)
    front = pareto_front(table_of(ctx, done_only=True) if table is None else table, goals)
    out["front_size"] = int(len(front))
    if len(goals.objectives) == 1 and len(front):
        row = front.iloc[0]
        o = goals.objectives[0]
        out["best"] = {"metric": o.metric, "goal": o.goal, "value": float(row[o.metric]),
                       "point_id": str(row["point_id"]),
                       "params": {n: _plain(row[n]) for n in ctx.space.names}}
    return out


def _plain(v: Any) -> Any:
    return v.item() if isinstance(v, np.generic) else v


def trial_table(ctx: StudyContext) -> Any:
    """The optuna trials of a stored optimization study as a DataFrame.

    Columns: ``number``, ``state`` (complete | pruned | fail | running | waiting), ``point_id``,
    ``reason``, ``retry_of``, one ``value_<metric>`` per objective, and ``feasible`` (every
    constraint holds; ``None`` for trials without constraint values: failed, running, waiting).
    """
    import pandas as pd

    goals = Goals.from_section(ctx.study.optimize)
    with Store(ctx.store_url, create=False) as store, _stored_study(ctx, store) as study:
        trials = [] if study is None else study.get_trials(deepcopy=False)
    rows = []
    for t in trials:
        row: dict[str, Any] = {"number": t.number, "state": t.state.name.lower(),
                               ATTR_POINT: t.user_attrs.get(ATTR_POINT),
                               ATTR_REASON: t.user_attrs.get(ATTR_REASON),
                               ATTR_RETRY: t.user_attrs.get(ATTR_RETRY)}
        for i, m in enumerate(goals.metrics):
            row[f"value_{m}"] = t.values[i] if t.values is not None else None
        cons = t.constraints
        if cons or (not goals.constraints and t.state.name in ("COMPLETE", "PRUNED")):
            row["feasible"] = all(v <= 0 for v in cons.values())
        else:
            row["feasible"] = None
        rows.append(row)
    cols = ["number", "state", ATTR_POINT, ATTR_REASON, ATTR_RETRY,
            *(f"value_{m}" for m in goals.metrics), "feasible"]
    return pd.DataFrame.from_records(rows, columns=cols)
