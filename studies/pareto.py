"""Objectives, constraints and Pareto fronts of an optimization study (``[optimize]``).

One place decides what a design's metrics mean for the optimizer and for the exported front,
so the two can never disagree:

- **Objectives** ``{metric, goal = "max"|"min"}``: the metric values, in config units. A design
  whose objective metric is null (the metric does not exist for it, e.g. no resonance in the
  band) has no objective vector: it is never on the front, and its optuna trial is PRUNED with
  the metric's reason (see :mod:`studies.optimize`).
- **Constraints** ``{metric, min?, max?}``: one violation per bound, ``max(0, min - v)`` and
  ``max(0, v - max)`` (optuna's convention: a value > 0 is violated, <= 0 satisfied; a bound is
  inclusive). A null constraint metric violates every bound of that constraint by
  :data:`MISSING_VIOLATION`, so it is infeasible and ranks below every measured violation.
- **Front**: the feasible designs (every violation 0) with a full objective vector that no other
  such design dominates (Pareto dominance: at least as good in every objective and strictly
  better in one; Deb, *Multi-Objective Optimization Using Evolutionary Algorithms*, Wiley 2001,
  section 2.4, from memory). Designs with equal objective vectors do not dominate each
  other: all are kept. With one objective the front is the best feasible value (and any exact
  ties).
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from sweeps.errors import ConfigError

__all__ = ["MISSING_VIOLATION", "ObjectiveSpec", "ConstraintSpec", "Goals", "non_dominated",
           "pareto_front", "front_of", "export_pareto"]

#: Violation of each bound of a constraint whose metric is null. Larger than any violation a
#: metric of these tags reaches in its own units (MHz, dB, ohm, ratios), so a design without the
#: metric ranks below every design that has it.
MISSING_VIOLATION = 1.0e6


@dataclass(frozen=True)
class ObjectiveSpec:
    """One objective: ``metric`` to maximise (``goal = "max"``) or minimise."""

    metric: str
    goal: str

    @property
    def maximize(self) -> bool:
        return self.goal == "max"


@dataclass(frozen=True)
class ConstraintSpec:
    """One constraint ``min <= metric <= max`` (either bound may be ``None``)."""

    metric: str
    min: float | None = None
    max: float | None = None


@dataclass(frozen=True)
class Goals:
    """The objectives and constraints of an ``[optimize]`` section.

    Build with :meth:`from_section` from the validated config section (or anything with
    ``objectives`` and ``constraints`` of the same shape).
    """

    objectives: tuple[ObjectiveSpec, ...]
    constraints: tuple[ConstraintSpec, ...] = ()

    @classmethod
    def from_section(cls, section: Any) -> Goals:
        if section is None:
            raise ConfigError("optimize: this study has no [optimize] section (sampler.method "
                              "is not \"optimize\"), so it has no objectives")
        return cls(
            objectives=tuple(ObjectiveSpec(o.metric, o.goal) for o in section.objectives),
            constraints=tuple(ConstraintSpec(c.metric, c.min, c.max)
                              for c in section.constraints),
        )

    @property
    def metrics(self) -> list[str]:
        """The objective metrics, in config order."""
        return [o.metric for o in self.objectives]

    @property
    def directions(self) -> list[str]:
        """optuna directions: ``"maximize"`` or ``"minimize"`` per objective."""
        return ["maximize" if o.maximize else "minimize" for o in self.objectives]

    def violations(self, metrics: Mapping[str, float | None]) -> dict[str, float]:
        """Constraint violations of a design, one per bound, keyed ``"<i>:<metric><op><bound>"``
        (``"0:resonance_mhz>=915"``); 0 where satisfied."""
        out: dict[str, float] = {}
        for i, c in enumerate(self.constraints):
            v = _number(metrics.get(c.metric))
            for bound, op, sign in ((c.min, ">=", 1.0), (c.max, "<=", -1.0)):
                if bound is None:
                    continue
                key = f"{i}:{c.metric}{op}{bound:g}"
                out[key] = MISSING_VIOLATION if v is None else max(0.0, sign * (bound - v))
        return out

    def feasible(self, metrics: Mapping[str, float | None]) -> bool:
        """Every constraint holds (a null constraint metric never holds)."""
        return all(v <= 0.0 for v in self.violations(metrics).values())

    def objective_values(self, metrics: Mapping[str, float | None],
                         reasons: Mapping[str, str] | None = None
                         ) -> tuple[list[float] | None, str]:
        """``(values, "")`` in config order, or ``(None, why)`` if an objective metric is null."""
        values = []
        for o in self.objectives:
            v = _number(metrics.get(o.metric))
            if v is None:
                why = (reasons or {}).get(o.metric) or "no value"
                return None, f"objective {o.metric} is null: {why}"
            values.append(v)
        return values, ""


def _number(v: Any) -> float | None:
    """A metric value as a finite float, or ``None`` (null, NaN or not a number)."""
    if v is None or isinstance(v, bool):
        return None
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def non_dominated(values: NDArray[np.float64], maximize: Sequence[bool]) -> NDArray[np.bool_]:
    """Mask of the rows of ``values`` that no other row Pareto-dominates.

    The filter is :func:`surrogates.tradeoff.non_dominated` (a lexicographic sweep) on the
    values turned into losses; equal rows are all kept.

    Parameters
    ----------
    values : ndarray, shape (n, k)
        Objective vectors (finite).
    maximize : sequence of bool, length k
        Per objective: larger is better (else smaller is better).

    Returns
    -------
    ndarray of bool, shape (n,)
    """
    from surrogates.tradeoff import non_dominated as front_indices

    a = np.asarray(values, dtype=float)
    if a.ndim != 2 or a.shape[1] != len(maximize):
        raise ValueError(f"values must have shape (n, {len(maximize)}), got {a.shape}")
    if not np.isfinite(a).all():
        raise ValueError("objective values must be finite")
    loss = a * np.where(np.asarray(maximize, dtype=bool), -1.0, 1.0)  # smaller is better
    keep = np.zeros(len(loss), dtype=bool)
    keep[front_indices(loss)] = True
    return keep


def pareto_front(table: pd.DataFrame, goals: Goals) -> pd.DataFrame:
    """The rows of a study table (:func:`studies.api.table_of`) on the front of ``goals``.

    A row qualifies when its ``status`` is ``done``, every objective metric has a value and
    every constraint holds; of those, the non-dominated ones are returned, in table order.
    """
    if table.empty:
        return table.copy()
    metric_cols = sorted({*goals.metrics, *(c.metric for c in goals.constraints)})
    done = (table["status"] == "done").to_numpy(dtype=bool)
    full = table[goals.metrics].notna().all(axis=1).to_numpy(dtype=bool)
    records = table[metric_cols].to_dict("records")
    ok = done & full & np.array([goals.feasible(r) for r in records], dtype=bool)
    candidates = table[ok]
    if candidates.empty:
        return candidates.copy()
    mask = non_dominated(candidates[goals.metrics].to_numpy(dtype=float),
                         [o.maximize for o in goals.objectives])
    return candidates[mask].copy()


def front_of(ctx: Any) -> pd.DataFrame:
    """The Pareto front of a stored optimization study (rows as in :func:`table_of`).

    Raises
    ------
    ConfigError
        If the study is not an optimization study.
    StoreError
        If it has not been run.
    """
    from studies.api import table_of

    goals = Goals.from_section(getattr(ctx.study, "optimize", None))
    return pareto_front(table_of(ctx, done_only=True), goals)


def export_pareto(ctx: Any, path: str | os.PathLike[str]) -> tuple[Path, int]:
    """Write the study's Pareto front to ``path`` (.csv or .parquet), atomically.

    Same columns as ``export --table``. Returns ``(path, rows)``.
    """
    from studies.export import check_table_path, write_table

    path = check_table_path(path, "--pareto")
    if getattr(ctx.study, "optimize", None) is None:
        raise ConfigError(f"--pareto: study {ctx.name!r} is not an optimization study "
                          f"(sampler.method = \"{ctx.method}\"); a front needs [optimize] "
                          "objectives")
    df = front_of(ctx)
    write_table(df, path, "--pareto")
    return path, len(df)
