"""Which designs of a study the report calls "best", by a rule the page states.

Sweep studies (grid, sobol, lhs, random): among the ``done`` points whose ``resonance_mhz``
exists (the reactance crosses zero inside the band, so the tag resonates in band), the highest
``delta_rcs_dbsm`` first. The differential RCS is what the reader hears: it combines the
modulation between the two switch states with the antenna's gain, so a lossy filament that
modulates well but radiates little ranks low. Points without ``delta_rcs_dbsm`` (imported
Touchstone results carry no gain) follow, by ``modulation_factor``. When no point resonates in
band, every ``done`` point is ranked the same way and the page says so.

Optimization studies (``[optimize]``): the feasible points (every ``[optimize] constraints``
met) ranked by the single objective, or, for several objectives, the non-dominated feasible
points (K. Deb, *Multi-Objective Optimization using Evolutionary Algorithms*, Wiley 2001,
section 2.4: a point is dominated when another is at least as good in every objective and
better in one) ordered by the first objective.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["Selection", "best_designs", "non_dominated_rows"]


@dataclass(frozen=True)
class Selection:
    """The best designs of a study and the rule that chose them.

    Attributes
    ----------
    table : DataFrame
        The chosen rows of the study table (:func:`studies.api.table_of`), best first, with a
        ``rank`` column (1 = best).
    rule : str
        The rule in one sentence, for the page.
    notes : list of str
        Remarks (fallbacks taken, points left out).
    """

    table: pd.DataFrame
    rule: str
    notes: list[str]

    @property
    def point_ids(self) -> list[str]:
        return list(self.table["point_id"])


def _finite(df: pd.DataFrame, col: str) -> pd.Series:
    return df[col].notna() & np.isfinite(df[col].astype(float))


def non_dominated_rows(values: np.ndarray) -> np.ndarray:
    """Indices of the non-dominated rows of ``values`` (every column minimised).

    Parameters
    ----------
    values : ndarray, shape (n, k)

    Returns
    -------
    ndarray of int
        Row indices in their original order. Identical rows are all kept.
    """
    v = np.asarray(values, dtype=float)
    keep = []
    for i in range(len(v)):
        le = np.all(v <= v[i], axis=1)
        lt = np.any(v < v[i], axis=1)
        if not np.any(le & lt):
            keep.append(i)
    return np.array(keep, dtype=int)


def _sweep_rank(done: pd.DataFrame) -> tuple[pd.DataFrame, str, list[str]]:
    notes: list[str] = []
    rule = ("among the finished designs that resonate in the band (resonance_mhz exists), "
            "highest delta_rcs_dbsm first; designs without delta_rcs_dbsm follow by "
            "modulation_factor")
    pool = done[done["resonance_mhz"].notna()]
    if pool.empty:
        notes.append("no finished design resonates in the band (Im Zin never crosses zero): "
                     "all finished designs are ranked instead")
        pool = done
    with_rcs = pool[_finite(pool, "delta_rcs_dbsm")].sort_values(
        ["delta_rcs_dbsm", "modulation_factor"], ascending=False, kind="mergesort")
    without = pool[~_finite(pool, "delta_rcs_dbsm")].sort_values(
        "modulation_factor", ascending=False, kind="mergesort", na_position="last")
    return pd.concat([with_rcs, without]), rule, notes


def _optimize_rank(done: pd.DataFrame, optimize: Any) -> tuple[pd.DataFrame, str, list[str]]:
    notes: list[str] = []
    ok = pd.Series(True, index=done.index)
    cons = []
    for c in optimize.constraints:
        v = done[c.metric].astype(float)
        if c.min is not None:
            ok &= v >= c.min
        if c.max is not None:
            ok &= v <= c.max
        lo = "" if c.min is None else f"{c.min:g} <= "
        hi = "" if c.max is None else f" <= {c.max:g}"
        cons.append(f"{lo}{c.metric}{hi}")
    objectives = [(o.metric, o.goal) for o in optimize.objectives]
    for m, _ in objectives:
        ok &= _finite(done, m)
    feasible = done[ok]
    where = f" meeting {', '.join(cons)}" if cons else ""
    if feasible.empty:
        notes.append("no finished trial is feasible with every objective defined: "
                     "nothing to rank")
        return feasible, f"the optimization's objectives over the trials{where}", notes
    if len(objectives) == 1:
        m, goal = objectives[0]
        ranked = feasible.sort_values(m, ascending=(goal == "min"), kind="mergesort")
        return ranked, f"the trials{where}, {'lowest' if goal == 'min' else 'highest'} {m} " \
                       "first (the optimization's objective)", notes
    signs = np.array([1.0 if g == "min" else -1.0 for _, g in objectives])
    vals = feasible[[m for m, _ in objectives]].to_numpy(dtype=float) * signs
    front = feasible.iloc[non_dominated_rows(vals)]
    m0, g0 = objectives[0]
    ranked = front.sort_values(m0, ascending=(g0 == "min"), kind="mergesort")
    goals = ", ".join(f"{g} {m}" for m, g in objectives)
    return ranked, (f"the non-dominated trials{where} for the optimization's objectives "
                    f"({goals}), ordered by {m0}"), notes


def best_designs(table: pd.DataFrame, *, count: int = 3, optimize: Any = None) -> Selection:
    """The ``count`` best designs of a study table by the rule of this module.

    Parameters
    ----------
    table : DataFrame
        The study table (:func:`studies.api.table_of`).
    count : int
        How many to keep (at least 1).
    optimize : studies.sections.Optimize, optional
        The study's ``[optimize]`` section; selects the optimization rule.

    Returns
    -------
    Selection
        Possibly empty (``table`` has no finished point), with the reason in ``notes``.
    """
    count = max(1, int(count))
    done = table[table["status"] == "done"]
    if done.empty:
        return Selection(table.iloc[0:0].assign(rank=[]), "no finished design to rank",
                         ["the study has no finished point yet (filamant run)"])
    if optimize is not None:
        ranked, rule, notes = _optimize_rank(done, optimize)
    else:
        ranked, rule, notes = _sweep_rank(done)
    top = ranked.head(count).copy()
    top.insert(0, "rank", np.arange(1, len(top) + 1))
    return Selection(top.reset_index(drop=True), rule, notes)
