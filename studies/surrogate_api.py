"""Surrogates of a study: fit one from the study's table, load it back for its config.

The glue between a study config (:class:`studies.context.StudyContext`) and
:mod:`surrogates`, used by the ``fit``, ``ask``, ``tradeoff`` and ``yield`` verbs and by the
report:

* features are the study's ``[space]`` parameters; targets ``[surrogate] targets`` (empty:
  every stored metric known for enough points); the model ``[surrogate] model``;
* the file is ``<config dir>/<study name>.surrogate.zip``
  (:func:`surrogates.store.surrogate_path`);
* it is bound to the config by a fingerprint of the study's plan (everything that changes a
  solve) and of its metric settings: a surrogate fitted for another config is refused;
* query values come from ``--set section.key=value`` for ``[space]`` parameters; the other
  parameters take the config's nominal (base design) values.
"""

from __future__ import annotations

import hashlib
import json
import logging
import math
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from studies.context import StudyContext
from studies.tomlfile import parse_override, suggest
from surrogates.dataset import MIN_ROWS, build_dataset, training_sha256
from surrogates.features import FeatureSpec, encode, range_warnings
from surrogates.fit import DEFAULT_FOLDS, fit_surrogate
from surrogates.store import load_surrogate, save_surrogate, surrogate_path
from surrogates.surrogate import Surrogate
from sweeps.errors import ConfigError, StoreError

__all__ = ["FitOutcome", "surrogate_fingerprint", "feature_specs", "nominal_values",
           "done_table", "study_targets", "fit_study", "load_study_surrogate", "split_sets",
           "verify_point", "query_values", "CONFIG_SECTIONS", "study_surrogate_path",
           "add_refinement_points", "Query", "open_query"]

logger = logging.getLogger(__name__)

#: ``--set`` sections that configure how a study is stored or fitted, never its results: a
#: query verb applies them to the config; every other ``--set`` must name a ``[space]`` key.
CONFIG_SECTIONS = ("study", "cluster", "surrogate")


def surrogate_fingerprint(ctx: StudyContext) -> str:
    """SHA-256 binding a surrogate to the config: the plan fingerprint (space, sampler, base
    design, band, solver) and the metric settings (``[reader]``)."""
    fn = getattr(ctx.study, "metrics_fingerprint", None)
    payload = {"plan": ctx.plan_fingerprint, "metrics": fn() if callable(fn) else None}
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


def feature_specs(ctx: StudyContext) -> tuple[FeatureSpec, ...]:
    """The study's ``[space]`` parameters as surrogate features (sorted by name)."""
    return tuple(FeatureSpec.from_parameter(p) for p in ctx.study.parameters)


def study_surrogate_path(ctx: StudyContext) -> Path:
    """Where the study's surrogate file lives (beside the config)."""
    source = getattr(ctx.study, "source", None) or Path.cwd() / f"{ctx.name}.toml"
    return surrogate_path(source, ctx.name)


def _dig(tree: Mapping[str, Any], dotted: str) -> Any:
    node: Any = tree
    for part in dotted.split("."):
        if not isinstance(node, Mapping) or part not in node:
            return None
        node = node[part]
    return node


def nominal_values(ctx: StudyContext) -> dict[str, Any]:
    """Each feature's value in the config's base design (config units).

    A ``[space]`` key missing from its section takes the parameter's first value (its ``min``
    or first listed value), as the study's base design does; so does a choice parameter whose
    base value is not one of its studied values (the surrogate knows only those).
    """
    out: dict[str, Any] = {}
    canon = ctx.canonical
    for f in feature_specs(ctx):
        v = _dig(canon, f.name)
        if v is None or isinstance(v, Mapping):
            v = f.values[0] if f.values is not None else f.min
        elif f.values is not None and not _is_level(f, v):
            v = f.values[0]
        out[f.name] = v
    return out


def _is_level(f: FeatureSpec, v: Any) -> bool:
    try:
        encode([f], {f.name: [v]})
    except ConfigError:
        return False
    return not range_warnings([f], {f.name: v}) if f.kind == "levels" else True


def done_table(ctx: StudyContext) -> tuple[pd.DataFrame, dict[str, int]]:
    """The study's evaluated points (status ``done``) and the counts by status.

    Raises
    ------
    StoreError
        No store or no study yet.
    """
    from studies.api import table_of

    table = table_of(ctx)
    counts = {k: int(v) for k, v in table["status"].value_counts().items()}
    counts["total"] = len(table)
    done = table[table["status"] == "done"].reset_index(drop=True)
    return done, counts


def study_targets(ctx: StudyContext, table: pd.DataFrame) -> tuple[list[str], list[str]]:
    """``[surrogate] targets``, or every stored metric known for at least
    :data:`~surrogates.dataset.MIN_ROWS` points; and notes on metrics left out."""
    from studies.store import METRIC_COLUMNS

    configured = list(ctx.study.surrogate.targets)
    if configured:
        return configured, []
    targets, notes = [], []
    for m in METRIC_COLUMNS:
        if m not in table.columns:
            continue
        n = int(pd.to_numeric(table[m], errors="coerce").notna().sum())
        if n >= MIN_ROWS:
            targets.append(m)
        elif n:
            notes.append(f"{m}: known for only {n} point(s), not modelled")
    if not targets:
        raise ConfigError(f"study {ctx.name!r}: no metric is known for {MIN_ROWS} or more "
                          "points yet; run the study first (filamant run)")
    return targets, notes


@dataclass
class FitOutcome:
    """What :func:`fit_study` did."""

    surrogate: Surrogate
    path: Path
    counts: dict[str, int]
    notes: list[str] = field(default_factory=list)


def fit_study(
    ctx: StudyContext,
    *,
    folds: int = DEFAULT_FOLDS,
    seed: int = 0,
    progress: Callable[[int, int, str], None] | None = None,
    path: str | os.PathLike[str] | None = None,
) -> FitOutcome:
    """Fit the study's surrogate from its stored results and save it beside the config.

    ``progress(done, total, message)``: see :func:`surrogates.fit.fit_surrogate`.
    """
    table, counts = done_table(ctx)
    if table.empty:
        raise StoreError(f"study {ctx.name!r}: no evaluated point yet "
                         f"({counts.get('planned', 0)} planned, {counts.get('failed', 0)} "
                         "failed); run it first (filamant run)")
    targets, notes = study_targets(ctx, table)
    features = feature_specs(ctx)
    ds = build_dataset(table, features, targets, source=f"study {ctx.name}")
    notes.extend(line for line in ds.summary() if "dropped" in line)
    for k in ("failed", "planned"):
        if counts.get(k):
            notes.append(f"{counts[k]} {k} point(s) not used")
    sur = fit_surrogate(
        ds, ctx.study.surrogate.model, folds=folds, seed=seed,
        plan_fingerprint=surrogate_fingerprint(ctx), progress=progress,
        meta={"study": ctx.name, "n_done": len(table),
              "config_plan_fingerprint": ctx.plan_fingerprint},
    )
    out = save_surrogate(sur, Path(path) if path else study_surrogate_path(ctx))
    logger.info("study %r: surrogate saved to %s", ctx.name, out)
    return FitOutcome(surrogate=sur, path=out, counts=counts, notes=notes)


def load_study_surrogate(
    ctx: StudyContext, *, check_fresh: bool = True, path: str | os.PathLike[str] | None = None
) -> tuple[Surrogate, Path, list[str]]:
    """Load the study's surrogate, refusing one fitted for another config.

    Returns
    -------
    surrogate, path, warnings
        ``warnings`` says when the study has changed since the fit (more points done).
    """
    p = Path(path) if path else study_surrogate_path(ctx)
    if not p.exists():
        raise StoreError(f"{p}: no surrogate for study {ctx.name!r} yet; fit one first "
                         f"(filamant fit {ctx.study.source or ctx.name + '.toml'})")
    sur = load_surrogate(p, plan_fingerprint=surrogate_fingerprint(ctx),
                         features=feature_specs(ctx))
    warns: list[str] = []
    if check_fresh:
        try:
            table, _ = done_table(ctx)
        except StoreError:
            warns.append("the study's store cannot be read: the surrogate's freshness was not "
                         "checked")
        else:
            sha = training_sha256(table, sur.features, sur.target_names)
            if sha != sur.training_sha256:
                warns.append(
                    f"the study changed since the surrogate was fitted ({len(table)} points "
                    f"done now, {sur.meta.get('n_done', '?')} then): fit it again "
                    "(filamant fit) to use them")
    return sur, p, warns


def split_sets(sets: Sequence[str]) -> tuple[list[str], list[tuple[str, Any]]]:
    """Split ``--set`` items into config overrides (``study.``, ``cluster.``, ``surrogate.``)
    and parameter values ``(dotted name, value)`` for the query."""
    overrides: list[str] = []
    values: list[tuple[str, Any]] = []
    for item in sets:
        parts, value = parse_override(item)
        if parts[0] in CONFIG_SECTIONS:
            overrides.append(item)
        else:
            values.append((".".join(parts), value))
    return overrides, values


def query_values(ctx: StudyContext, values: Sequence[tuple[str, Any]]) -> dict[str, Any]:
    """``--set`` parameter values checked against the study's features.

    Raises
    ------
    ConfigError
        A key that is not a ``[space]`` parameter (the study held it fixed), or a repeat.
    """
    names = [f.name for f in feature_specs(ctx)]
    out: dict[str, Any] = {}
    for name, value in values:
        if name not in names:
            fixed = _dig(ctx.canonical, name)
            held = f" (the study held it at {fixed!r})" if fixed is not None else ""
            raise ConfigError(
                f"--set {name}: not a [space] parameter of study {ctx.name!r}{held}, so the "
                f"surrogate cannot vary it; parameters: {', '.join(names)}"
                + suggest(name, names))
        if name in out:
            raise ConfigError(f"--set {name}: given twice")
        out[name] = value
    return out


def verify_point(ctx: StudyContext, params: Mapping[str, Any]) -> dict[str, float | None]:
    """One real solver evaluation of the study's design at ``params`` (config units)."""
    from studies.context import point_evaluator

    clean = {k: (float(v) if isinstance(v, int | float) and not isinstance(v, bool) else v)
             for k, v in params.items()}
    rec = point_evaluator(ctx.canonical_json)(clean)
    return {k: (None if v is None or (isinstance(v, float) and not math.isfinite(v)) else v)
            for k, v in rec.metrics.items()}


def add_refinement_points(ctx: StudyContext, n: int, *, seed: int = 0) -> list[dict[str, Any]]:
    """Propose ``n`` new points where the study's surrogate is least certain and add them to
    the study as ``planned`` (the hook of ``filamant run STUDY.toml --refine N``).

    Fits a surrogate to the points done so far (:func:`surrogates.refine.refine_points`: max
    predictive standard deviation over a Sobol candidate set, with a spacing rule), then stores
    the new points under the study's run lease in one transaction. The caller runs the study
    (which evaluates every ``planned`` point) and fits again.

    Returns
    -------
    list of dict
        The new points' parameters (config units).

    Raises
    ------
    StoreError
        No study yet, or another run holds the lease.
    """
    from studies.lease import Lease
    from studies.points import Point
    from studies.store import Store
    from surrogates.refine import refine_points

    table, _ = done_table(ctx)
    targets, _ = study_targets(ctx, table)
    params, _ = refine_points(table, feature_specs(ctx), targets, n,
                              model=ctx.study.surrogate.model, seed=seed)
    with Store(ctx.store_url, create=False) as store, \
            Lease.acquire(store, ctx.name, command="refine") as lease:
        seq = store.next_seq(ctx.name)
        known = {p.point_id for p in store.points(ctx.name)}
        points = []
        for i, p in enumerate(params):
            pid = ctx.point_id(p)
            if pid in known:
                continue
            known.add(pid)
            points.append(Point(pid, p, seq + i, "solver"))
        store.write_batch(ctx.name, [], owner=lease.owner, new_points=points)
    logger.info("study %r: %d refinement point(s) planned", ctx.name, len(points))
    return [p.params for p in points]


@dataclass
class Query:
    """What a query verb starts from: the config, its surrogate and the ``--set`` values."""

    ctx: StudyContext
    surrogate: Surrogate
    path: Path
    warnings: list[str]
    given: dict[str, Any]


def open_query(study: str | os.PathLike[str], sets: Sequence[str]) -> Query:
    """Load the config (``--set`` of ``study.``/``cluster.``/``surrogate.`` keys applied), its
    surrogate (refused if fitted for another config) and the ``--set`` parameter values."""
    from studies.api import load_context

    overrides, values = split_sets(sets)
    ctx = load_context(study, overrides)
    sur, path, warns = load_study_surrogate(ctx)
    return Query(ctx=ctx, surrogate=sur, path=path, warnings=warns,
                 given=query_values(ctx, values))
