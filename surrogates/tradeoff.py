"""Trade-off fronts: dense sampling of the surrogate and its non-dominated (Pareto) set.

At least 1e5 Sobol candidates over the free features are predicted in batches; those meeting
every constraint are reduced to the non-dominated set for the objectives (a candidate is
dominated when another is at least as good in every objective and better in one; K. Deb,
*Multi-Objective Optimization using Evolutionary Algorithms*, Wiley 2001, §2.4). The filter
sorts candidates lexicographically — a candidate can only be dominated by one before it — and
sweeps them: with a running minimum for two objectives, a Fenwick tree for three
(O(n log n)), and in blocks against the front so far for more.

Objectives and constraints may name a target metric or a feature (e.g. minimise
``antenna.length_mm`` for the smallest tag).
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from surrogates.features import range_warnings, unit_of
from surrogates.sampling import FeatureSampler
from surrogates.specs import parse_goal
from surrogates.surrogate import Surrogate
from sweeps.errors import ConfigError

__all__ = ["TradeoffResult", "non_dominated", "tradeoff", "plot_front", "MIN_CANDIDATES"]

logger = logging.getLogger(__name__)

#: Fewest candidates a front is computed from.
MIN_CANDIDATES = 100_000


def _groups(F: NDArray[np.float64]) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """Lexicographic order of the rows and the group number of each (identical rows share)."""
    order = np.lexsort(F.T[::-1])
    S = F[order]
    new = np.ones(len(S), dtype=bool)
    new[1:] = np.any(S[1:] != S[:-1], axis=1)
    return order, np.cumsum(new) - 1


def _front_2d(F: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Two objectives: a row is dominated iff an earlier (lexicographic) distinct row has a
    second objective <= its own; one sweep with a running minimum."""
    order, group = _groups(F)
    f2 = F[order, 1]
    g_min = np.full(group[-1] + 1, np.inf)
    np.minimum.at(g_min, group, f2)
    before = np.concatenate([[np.inf], np.minimum.accumulate(g_min)[:-1]])
    keep = np.empty(len(F), dtype=bool)
    keep[order] = f2 < before[group]
    return keep


def _front_3d(F: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Three objectives: sweep in lexicographic order keeping, in a Fenwick tree over the
    ranks of the second objective, the prefix minimum of the third (the sweep of H. T. Kung,
    F. Luccio & F. P. Preparata, J. ACM 22(4), 1975); O(n log n)."""
    order, group = _groups(F)
    S = F[order]
    ranks = np.searchsorted(np.unique(S[:, 1]), S[:, 1]) + 1  # 1-based, ties share a rank
    m = int(ranks.max())
    tree = [np.inf] * (m + 1)
    keep_sorted = np.zeros(len(S), dtype=bool)
    f3 = S[:, 2].tolist()
    rk = ranks.tolist()
    grp = group.tolist()
    i = 0
    n = len(S)
    while i < n:
        j = i
        while j < n and grp[j] == grp[i]:
            j += 1
        # query: min third objective among earlier rows with second objective <= this one
        r, best = rk[i], np.inf
        while r > 0:
            best = min(best, tree[r])
            r -= r & -r
        dominated = best <= f3[i]
        keep_sorted[i:j] = not dominated
        r, v = rk[i], f3[i]
        while r <= m:
            if v < tree[r]:
                tree[r] = v
            r += r & -r
        i = j
    keep = np.empty(n, dtype=bool)
    keep[order] = keep_sorted
    return keep


def _front_blocks(F: NDArray[np.float64], block: int) -> NDArray[np.bool_]:
    """Any number of objectives: lexicographic sweep in blocks against the front so far (a
    row can only be dominated by one before it); O(n x front size)."""
    order = np.lexsort(F.T[::-1])
    keep = np.zeros(len(F), dtype=bool)
    front_vals = np.zeros((0, F.shape[1]))
    for s in range(0, len(order), block):
        idx = order[s:s + block]
        cand = F[idx]
        for ref in (front_vals, None):
            if ref is not None and not len(ref):
                continue
            other = cand if ref is None else ref
            le = np.all(other[None, :, :] <= cand[:, None, :], axis=2)
            lt = np.any(other[None, :, :] < cand[:, None, :], axis=2)
            ok = ~np.any(le & lt, axis=1)
            idx, cand = idx[ok], cand[ok]
        keep[idx] = True
        front_vals = np.vstack([front_vals, cand])
    return keep


def non_dominated(F: NDArray[np.float64], block: int = 512) -> NDArray[np.intp]:
    """Indices of the non-dominated rows of ``F`` (every column minimised).

    Parameters
    ----------
    F : ndarray, shape (n, k)
    block : int
        Rows compared at once by the general (k >= 4) sweep.

    Returns
    -------
    ndarray of int
        Row indices of the front, increasing. Exact duplicates are all kept (neither
        dominates the other).
    """
    F = np.asarray(F, dtype=float)
    if F.ndim != 2 or len(F) == 0:
        return np.zeros(0, dtype=np.intp)
    k = F.shape[1]
    if k == 1:
        keep = F[:, 0] == F[:, 0].min()
    elif k == 2:
        keep = _front_2d(F)
    elif k == 3:
        keep = _front_3d(F)
    else:
        keep = _front_blocks(F, block)
    return np.flatnonzero(keep)


@dataclass
class TradeoffResult:
    """A trade-off front and how it was found.

    Attributes
    ----------
    front : DataFrame
        One row per non-dominated design: parameter columns (config units), every target's
        prediction and ``<target>_std``, and ``flags`` (text); sorted by the first objective.
    objectives : dict
        Name -> ``"max"`` or ``"min"``.
    constraints : dict
        Name -> ``(lo, hi)``.
    n_candidates, n_feasible : int
    warnings : list of str
    candidates : DataFrame
        A random subset (at most 20 000) of the feasible candidates (means only), for plots.
    """

    front: pd.DataFrame
    objectives: dict[str, str]
    constraints: dict[str, tuple[float, float]]
    n_candidates: int
    n_feasible: int
    warnings: list[str] = field(default_factory=list)
    candidates: pd.DataFrame | None = None


def _check_names(surrogate: Surrogate, names: Mapping[str, Any], what: str) -> None:
    known = set(surrogate.feature_names) | set(surrogate.target_names)
    for n in names:
        if n not in known:
            raise ConfigError(
                f"{what}: {n!r} is neither a surrogate target ({', '.join(surrogate.targets)}) "
                f"nor a feature ({', '.join(surrogate.feature_names)})"
            )


def tradeoff(
    surrogate: Surrogate,
    objectives: Mapping[str, str],
    *,
    constraints: Mapping[str, tuple[float, float]] | None = None,
    fixed: Mapping[str, Any] | None = None,
    n_candidates: int = 131_072,
    seed: int = 0,
    batch: int = 16_384,
) -> TradeoffResult:
    """Non-dominated designs of the surrogate for ``objectives`` under ``constraints``.

    Parameters
    ----------
    surrogate : Surrogate
    objectives : mapping
        Metric or feature name -> ``"max"`` or ``"min"``.
    constraints : mapping, optional
        Metric or feature name -> ``(lo, hi)`` (infinite for an open side).
    fixed : mapping, optional
        Features held at a value (config units).
    n_candidates : int
        Sobol candidates (at least :data:`MIN_CANDIDATES`; rounded up to a power of two).
    seed : int
    batch : int
        Candidates predicted at once.

    Returns
    -------
    TradeoffResult
    """
    if not objectives:
        raise ConfigError("--objective: give at least one metric=max|min")
    goals = {k: parse_goal(v, f"--objective {k}") for k, v in objectives.items()}
    cons = dict(constraints or {})
    _check_names(surrogate, goals, "--objective")
    _check_names(surrogate, cons, "--constraint")
    if n_candidates < MIN_CANDIDATES:
        raise ConfigError(f"tradeoff: at least {MIN_CANDIDATES} candidates are sampled "
                          f"(got {n_candidates})")
    sampler = FeatureSampler(surrogate, fixed)
    warns = range_warnings(surrogate.features, dict(sampler.fixed))
    U = sampler.sample(n_candidates, seed)
    targets = surrogate.target_names
    means = {t: np.empty(len(U)) for t in targets}
    for s in range(0, len(U), batch):
        m, _ = surrogate.predict_unit(U[s:s + batch], targets, return_std=False)
        for t in targets:
            means[t][s:s + batch] = m[t]
    table = sampler.values(U)
    for t in targets:
        table[t] = means[t]
    ok = np.ones(len(table), dtype=bool)
    for n, (lo, hi) in cons.items():
        v = table[n].to_numpy(dtype=float)
        ok &= (v >= lo) & (v <= hi)
    # a metric that did not exist near a candidate can neither meet a constraint nor rank it
    for n in dict.fromkeys([*goals, *cons]):
        if n in surrogate.targets and surrogate.targets[n].n_dropped:
            null = np.zeros(len(U), dtype=bool)
            for s in range(0, len(U), batch):
                null[s:s + batch] = surrogate.null_nearby(n, U[s:s + batch])
            if null.any():
                warns.append(f"{int(null.sum())} candidates left out: the nearest study point "
                             f"had no {n} (the metric does not exist there)")
            ok &= ~null
    rows = np.flatnonzero(ok)
    feasible = table.iloc[rows].reset_index(drop=True)
    n_feasible = len(feasible)
    if n_feasible == 0:
        warns.append("no candidate meets every constraint; the front is empty "
                     "(loosen --constraint or widen the study space)")
        empty = feasible.assign(**{f"{t}_std": [] for t in targets})
        return TradeoffResult(front=empty, objectives=goals, constraints=cons,
                              n_candidates=len(U), n_feasible=0, warnings=warns,
                              candidates=empty)
    F = np.column_stack([(-1.0 if g == "max" else 1.0) * feasible[n].to_numpy(dtype=float)
                         for n, g in goals.items()])
    idx = non_dominated(F)
    first, g0 = next(iter(goals.items()))
    front = feasible.iloc[idx].copy()
    front["_row"] = rows[idx]
    front = front.drop_duplicates(subset=[c for c in front.columns if c != "_row"])
    front = front.sort_values(first, ascending=(g0 == "min"), kind="mergesort")
    U_front = U[front.pop("_row").to_numpy()]
    front = front.reset_index(drop=True)
    _, sd = surrogate.predict_unit(U_front, targets)
    for t in targets:
        front[f"{t}_std"] = sd[t]
    flags = [[] for _ in range(len(front))]
    for t in targets:
        for i in np.flatnonzero(surrogate.null_nearby(t, U_front)):
            flags[i].append(f"{t}: nearest study point had no {t}")
    front["flags"] = ["; ".join(f) for f in flags]
    rng = np.random.default_rng(seed)
    sub = feasible.iloc[np.sort(rng.choice(n_feasible, min(n_feasible, 20_000), replace=False))]
    logger.info("tradeoff: %d candidates, %d feasible, %d on the front",
                len(U), n_feasible, len(front))
    return TradeoffResult(front=front, objectives=goals, constraints=cons,
                          n_candidates=len(U), n_feasible=n_feasible, warnings=warns,
                          candidates=sub.reset_index(drop=True))


def _label(name: str) -> str:
    u = unit_of(name)
    return f"{name} ({u})" if u else name


def plot_front(result: TradeoffResult, path: str | Path, *, title: str | None = None) -> Path:
    """Draw the front (PNG): two objectives as a scatter with the front line, more as a
    matrix of pairwise scatters of the front. Uses the Agg canvas, no display needed."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    path = Path(path)
    names = list(result.objectives)
    front = result.front
    if len(names) == 1:
        names = names + [c for c in front.columns if c in result.constraints][:1]
    if len(names) == 1:
        names = [names[0], names[0]]
    k = len(names)
    if k == 2:
        fig = Figure(figsize=(6.4, 4.8))
        ax = fig.add_subplot(1, 1, 1)
        cand = result.candidates
        if cand is not None and len(cand):
            ax.scatter(cand[names[0]], cand[names[1]], s=2, c="0.75", label="feasible designs",
                       rasterized=True)
        if len(front):
            ax.plot(front[names[0]], front[names[1]], "o-", ms=3, c="C3",
                    label="non-dominated front")
        ax.set_xlabel(_label(names[0]) + f" [{result.objectives.get(names[0], '')}]")
        ax.set_ylabel(_label(names[1]) + f" [{result.objectives.get(names[1], '')}]")
        ax.legend(loc="best")
        ax.grid(True, alpha=0.3)
    else:
        fig = Figure(figsize=(3.0 * k, 3.0 * k))
        for i in range(k):
            for j in range(k):
                ax = fig.add_subplot(k, k, i * k + j + 1)
                if i == j:
                    ax.hist(front[names[i]], bins=20, color="C3")
                else:
                    ax.scatter(front[names[j]], front[names[i]], s=4, c="C3")
                if i == k - 1:
                    ax.set_xlabel(_label(names[j]), fontsize=8)
                if j == 0:
                    ax.set_ylabel(_label(names[i]), fontsize=8)
    fig.suptitle(title or f"Trade-off front ({len(front)} designs of {result.n_candidates} "
                          "candidates, surrogate predictions)")
    fig.tight_layout()
    FigureCanvasAgg(fig).print_png(str(path))
    return path
