"""Refinement: where to run the solver next so the surrogate learns the most.

Score a Sobol candidate set by the surrogate's doubt — the largest over targets of the
predictive standard deviation divided by that target's training spread — and pick greedily
the highest-scoring candidates subject to a spacing rule: no new point closer than
``min_distance`` (unit-cube Euclidean metric over the features) to a study point or to another
new point. The default spacing is half the spacing of a regular grid holding the old and new
points together, ``0.5 (n_old + n_new)^(-1/d)``, so picks spread out even where a model's
uncertainty is not distance-aware (the boosting ensemble's). This is the "maximum variance"
rule of sequential design (e.g. D. J. C. MacKay, Neural Computation 4(4), 1992, "active data
selection"; T. J. Santner, B. J. Williams & W. I. Notz, *The Design and Analysis of Computer
Experiments*, Springer 2003, ch. 6), with a spacing guard.

:func:`refine_points` is the hook for ``filamant run STUDY.toml --refine N``: fit on the
current table, return N new parameter dicts to evaluate; the caller evaluates, stores and
refits.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from surrogates.dataset import build_dataset
from surrogates.fit import fit_surrogate
from surrogates.sampling import FeatureSampler
from surrogates.surrogate import Surrogate, nearest_distance
from sweeps.errors import ConfigError

__all__ = ["propose_points", "refine_points"]


def propose_points(
    surrogate: Surrogate,
    n: int,
    *,
    n_candidates: int = 4096,
    min_distance: float | None = None,
    fixed: Mapping[str, Any] | None = None,
    seed: int = 0,
) -> pd.DataFrame:
    """``n`` new parameter sets where the surrogate is least certain.

    Parameters
    ----------
    surrogate : Surrogate
    n : int
        Points to propose.
    n_candidates : int
        Sobol candidates scored (rounded up to a power of two; at least ``4 n``).
    min_distance : float, optional
        Spacing rule in unit-cube units; default ``0.5 (n_train + n)^(-1/d)``.
    fixed : mapping, optional
        Features held at a value.
    seed : int

    Returns
    -------
    DataFrame
        Parameter columns (config units; choice levels exact) and ``score`` (the scaled
        standard deviation), best first. Fewer than ``n`` rows when the spacing rule leaves no
        room: the caller is told by the row count.
    """
    if n < 1:
        raise ConfigError(f"--refine: the number of new points must be >= 1 (got {n})")
    sampler = FeatureSampler(surrogate, fixed)
    d = max(1, sum(1 for f in sampler.free if not f.discrete))
    if min_distance is None:
        min_distance = 0.5 * (len(surrogate.X_train) + n) ** (-1.0 / d)
    U = sampler.sample(max(n_candidates, 4 * n), seed)
    _, std = surrogate.predict_unit(U)
    score = np.max(np.column_stack([std[t] / surrogate.targets[t].y_std
                                    for t in surrogate.targets]), axis=1)
    ok = nearest_distance(U, surrogate.X_train) >= min_distance if len(surrogate.X_train) else \
        np.ones(len(U), dtype=bool)
    picked: list[int] = []
    for i in np.argsort(-score, kind="mergesort"):
        if len(picked) >= n:
            break
        if not ok[i]:
            continue
        if picked and np.min(np.linalg.norm(U[picked] - U[i], axis=1)) < min_distance:
            continue
        picked.append(int(i))
    out = sampler.values(U[picked])
    out["score"] = score[picked]
    return out.reset_index(drop=True)


def refine_points(
    table: pd.DataFrame,
    features: Iterable[Any],
    targets: Sequence[str],
    n: int,
    *,
    model: str | Mapping[str, str] = "auto",
    seed: int = 0,
    fixed: Mapping[str, Any] | None = None,
) -> tuple[list[dict[str, Any]], Surrogate]:
    """Fit on the current study table and propose ``n`` points to add (the ``--refine`` hook).

    Parameters
    ----------
    table : DataFrame
        The study table (``point_id``, parameter and metric columns).
    features : iterable of FeatureSpec or study parameter specs
    targets : sequence of str
        ``[surrogate] targets``.
    n : int
    model : {"auto", "gp", "boosting"} or mapping
    seed : int
    fixed : mapping, optional

    Returns
    -------
    points : list of dict
        Parameter name -> value (config units), ready to be planned and evaluated.
    surrogate : Surrogate
        The surrogate they were chosen with.
    """
    ds = build_dataset(table, features, targets)
    sur = fit_surrogate(ds, model, seed=seed)
    props = propose_points(sur, n, seed=seed, fixed=fixed)
    points = [{k: (v.item() if isinstance(v, np.generic) else v)
               for k, v in row.items() if k != "score"}
              for row in props.to_dict(orient="records")]
    return points, sur
