"""The Python API of studies: run one, ask its status, read its table.

>>> from studies.api import run_study, study_table          # doctest: +SKIP
>>> summary = run_study("studies/examples/drawer_study.toml")  # doctest: +SKIP
>>> df = study_table("studies/examples/drawer_study.toml")     # doctest: +SKIP

``run_study`` launches a study or resumes what is missing: the plan is drawn and stored once,
when the study is created; later runs evaluate the points still ``planned``. A config whose
plan, solver or metric settings differ from the stored study is refused (``fresh=True`` deletes
the stored study first); a second run while one is live is refused by the run lease.
"""

from __future__ import annotations

import logging
import os
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from typing import Any

import pandas as pd

from studies.context import StudyContext
from studies.lease import Lease, lease_info
from studies.runner import Task, evaluate_batch, open_client, run_points
from studies.store import METRIC_COLUMNS, Store, describe_changes
from sweeps.errors import StoreError

__all__ = ["RunSummary", "load_context", "open_study", "run_study", "run_context",
           "study_status", "status_of", "study_table", "table_of", "lease_options"]

logger = logging.getLogger(__name__)

PathLike = str | os.PathLike[str]


@dataclass
class RunSummary:
    """The outcome of :func:`run_study`.

    Attributes
    ----------
    study, store : str
        Study name and store URL (password hidden).
    total, done, failed, planned : int
        Points in the study and by status after the run (``planned``: still to evaluate).
    evaluated : int
        Points evaluated by this run.
    created : bool
        This run created the study (drew and stored the plan).
    deleted : int
        Points deleted first by ``fresh=True``.
    interrupted : bool
        Stopped by Ctrl-C before the end (everything finished is stored).
    elapsed_s : float
    seconds_per_point : float or None
        Median evaluation time of one point on a worker.
    workers : int
        Worker threads seen.
    trials : dict or None
        Optimization studies only: optuna trial counts (see
        :func:`studies.optimize.run_optimize`).
    """

    study: str
    store: str
    total: int
    done: int
    failed: int
    planned: int
    evaluated: int
    created: bool
    deleted: int
    interrupted: bool
    elapsed_s: float
    seconds_per_point: float | None
    workers: int
    trials: dict[str, Any] | None = None

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


def load_context(path: PathLike, overrides: Sequence[str] = ()) -> StudyContext:
    """Load and validate a study config; raises ``ConfigError`` naming file and key."""
    from studies.config import load_study

    return StudyContext.from_study(load_study(path, list(overrides)))


def run_study(path: PathLike, overrides: Sequence[str] = (), fresh: bool = False, *,
              progress: bool | None = None) -> RunSummary:
    """Launch the study of ``path``, or resume what is missing.

    Parameters
    ----------
    path : path-like
        Study TOML file.
    overrides : sequence of str
        ``section.key=value`` overrides (as ``--set``).
    fresh : bool
        Delete the stored study (in one transaction) and start over.
    progress : bool, optional
        Progress bar on stderr (default: when stderr is a terminal).

    Returns
    -------
    RunSummary

    Raises
    ------
    ConfigError
        A bad config (nothing is opened or written).
    StoreError
        A changed config, a live run elsewhere, an unusable store.
    """
    return run_context(load_context(path, overrides), fresh=fresh, progress=progress)


def run_context(ctx: StudyContext, *, fresh: bool = False, progress: bool | None = None,
                task: Task = evaluate_batch, heartbeat_s: float | None = None,
                stale_after_s: float | None = None,
                on_start: Callable[[str, int, int], None] | None = None,
                **runner_options: Any) -> RunSummary:
    """:func:`run_study` for an already loaded config.

    ``on_start(store_url, to_evaluate, total)`` is called once the run holds the lease and the
    plan is stored (the CLI prints where the store is); ``task``, the lease timings and
    ``runner_options`` (see :func:`studies.runner.run_points`) are for tests and benchmarks.
    """
    if ctx.method == "optimize":
        from studies.optimize import run_optimize

        opts = {k: v for k, v in runner_options.items() if k == "max_attempts"}
        return run_optimize(ctx, fresh=fresh, progress=progress, task=task,
                            heartbeat_s=heartbeat_s, stale_after_s=stale_after_s,
                            on_start=on_start, **opts)
    t0 = time.perf_counter()
    lease_kw = lease_options(heartbeat_s, stale_after_s)
    with Store(ctx.store_url) as store:
        metrics_fp = _metrics_fingerprint(ctx)
        if not fresh:  # refuse a changed config before writing anything
            store.check_compatible(ctx.name, ctx.canonical, ctx.plan_fingerprint,
                                   ctx.solver_fingerprint, metrics_fp)
        with Lease.acquire(store, ctx.name, command="run", **lease_kw) as lease:
            created, deleted = open_study(store, ctx, lease, fresh=fresh)
            todo = store.points(ctx.name, "planned")
            before = store.counts(ctx.name)
            if on_start is not None:
                on_start(store.display_url, len(todo), before["total"])
            stats = None
            if todo:
                logger.info("study %r: %d of %d point(s) to evaluate on %s", ctx.name,
                            len(todo), before["total"], ctx.cluster.describe())
                try:
                    with open_client(ctx.cluster) as client:
                        stats = run_points(store, ctx.name, ctx.canonical_json, todo, lease,
                                           client, task=task, progress=progress,
                                           done_before=before["total"] - len(todo),
                                           **runner_options)
                except KeyboardInterrupt:
                    if stats is None:  # while the cluster started: nothing was evaluated
                        raise
                    stats.interrupted = True  # while it shut down: every result is stored
            counts = store.counts(ctx.name)
    return RunSummary(
        study=ctx.name, store=store.display_url, total=counts["total"], done=counts["done"],
        failed=counts["failed"], planned=counts["planned"],
        evaluated=stats.evaluated if stats else 0, created=created, deleted=deleted,
        interrupted=bool(stats and stats.interrupted), elapsed_s=time.perf_counter() - t0,
        seconds_per_point=stats.seconds_per_point if stats else None,
        workers=stats.workers if stats else 0,
    )


def lease_options(heartbeat_s: float | None, stale_after_s: float | None
                  ) -> dict[str, float]:
    """Keyword arguments of :meth:`Lease.acquire` for the timings given (``None``: default)."""
    opts = {"heartbeat_s": heartbeat_s, "stale_after_s": stale_after_s}
    return {k: v for k, v in opts.items() if v is not None}


def open_study(store: Store, ctx: StudyContext, lease: Lease, *, fresh: bool = False
               ) -> tuple[bool, int]:
    """Under ``lease``: delete the study if ``fresh``, refuse a changed config, and create the
    study with its whole plan if it is new. Returns ``(created, points deleted)``."""
    deleted = 0
    if fresh:
        deleted = store.drop_study(ctx.name, owner=lease.owner)
        if deleted:
            logger.warning("--fresh: deleted the %d stored point(s) of study %r", deleted,
                           ctx.name)
    metrics_fp = _metrics_fingerprint(ctx)
    rec = store.check_compatible(ctx.name, ctx.canonical, ctx.plan_fingerprint,
                                 ctx.solver_fingerprint, metrics_fp)
    if rec is not None:
        return False, deleted
    plan = ctx.plan() if ctx.method != "optimize" else []
    store.create_study(ctx.name, ctx.canonical, ctx.plan_fingerprint, ctx.solver_fingerprint,
                       plan, owner=lease.owner, metrics_fingerprint=metrics_fp)
    logger.info("study %r: stored a plan of %d point(s) in %s", ctx.name, len(plan),
                store.display_url)
    return True, deleted


def _metrics_fingerprint(ctx: StudyContext) -> str | None:
    fn = getattr(ctx.study, "metrics_fingerprint", None)
    return fn() if callable(fn) else None


def study_status(path: PathLike, overrides: Sequence[str] = ()) -> dict[str, Any]:
    """Status of the study of ``path`` (never creates a store). See :func:`status_of`."""
    return status_of(load_context(path, overrides))


def status_of(ctx: StudyContext) -> dict[str, Any]:
    """Status of a study as one JSON-able dict.

    Keys: ``study``, ``store``, ``exists`` (the study is in its store), ``planned`` (points
    still to evaluate), ``done``, ``failed``, ``total``, ``running`` (the live run's host, pid,
    command, heartbeat age — or ``None``), ``config_matches`` (the config is the stored one),
    ``config_changes`` (what differs, if not), ``failure_reasons`` (most common reasons with
    counts), ``created_at`` (epoch s) and ``solver_version``; for an optimization study that
    has been run, ``optimize`` (trial counts, best value or front size: see
    :func:`studies.optimize.optimize_status`).
    """
    out: dict[str, Any] = {"study": ctx.name, "store": None, "exists": False, "planned": 0,
                           "done": 0, "failed": 0, "total": 0, "running": None,
                           "config_matches": None, "config_changes": [],
                           "failure_reasons": {}, "created_at": None, "solver_version": None}
    try:
        store = Store(ctx.store_url, create=False)
    except StoreError:
        from studies.store import display_url

        out["store"] = display_url(ctx.store_url)
        return out
    with store:
        out["store"] = store.display_url
        rec = store.study(ctx.name)
        info = lease_info(store, ctx.name)
        out["running"] = info.as_dict() if info is not None and not info.stale else None
        if rec is None:
            return out
        out["exists"] = True
        out.update({k: v for k, v in store.counts(ctx.name).items()})
        out["created_at"] = rec.created_at
        out["solver_version"] = rec.solver_version
        try:
            store.check_compatible(ctx.name, ctx.canonical, ctx.plan_fingerprint,
                                   ctx.solver_fingerprint, _metrics_fingerprint(ctx))
            out["config_matches"] = True
        except StoreError:
            out["config_matches"] = False
            out["config_changes"] = describe_changes(rec.config, ctx.canonical, limit=20)
        if out["failed"]:
            reasons = Counter(r["reason"] or "" for r in store.results(ctx.name)
                              if r["status"] == "failed")
            out["failure_reasons"] = dict(reasons.most_common(5))
        if ctx.method == "optimize":
            from studies.optimize import optimize_status

            out["optimize"] = optimize_status(ctx, store)
    return out


def study_table(path: PathLike, overrides: Sequence[str] = (), *, done_only: bool = False
                ) -> pd.DataFrame:
    """The study of ``path`` as a table; see :func:`table_of`."""
    return table_of(load_context(path, overrides), done_only=done_only)


def table_of(ctx: StudyContext, *, done_only: bool = False) -> pd.DataFrame:
    """One row per point of the study (only the evaluated ones with ``done_only``), in plan
    order.

    Columns: ``point_id``; the parameters by dotted name (config units); one column per metric
    (``sweeps.metrics.METRIC_NAMES`` order, NaN where the metric is missing or the point is not
    done); ``status`` (planned | done | failed), ``source`` (solver | touchstone | optimize) and
    ``failure_reason``.

    Raises
    ------
    StoreError
        If the store or the study does not exist yet.
    """
    with Store(ctx.store_url, create=False) as store:
        if store.study(ctx.name) is None:
            raise StoreError(f"{store.display_url}: no study {ctx.name!r} yet; run it first "
                             "(filamant run)")
        rows = store.results(ctx.name)
    if done_only:
        rows = [r for r in rows if r["status"] == "done"]
    names = list(ctx.space.names)
    for r in rows:  # points whose parameters are not in [space] (should not happen)
        names += [k for k in r["params"] if k not in names]
    records = []
    for r in rows:
        d: dict[str, Any] = {"point_id": r["point_id"]}
        d.update({n: r["params"].get(n) for n in names})
        d.update({m: r[m] for m in METRIC_COLUMNS})
        d.update(status=r["status"], source=r["source"], failure_reason=r["reason"])
        records.append(d)
    df = pd.DataFrame.from_records(
        records, columns=["point_id", *names, *METRIC_COLUMNS, "status", "source",
                          "failure_reason"])
    for m in METRIC_COLUMNS:
        df[m] = pd.to_numeric(df[m], errors="coerce").astype("float64")
    return df
