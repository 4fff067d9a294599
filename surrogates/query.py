"""Questions answered by a surrogate: forward predictions and inverse (solve-for) queries.

Forward: every target predicted at given parameter values, with one predictive standard
deviation as the uncertainty. Values outside the trained ranges are answered but flagged
("EXTRAPOLATED") in the warnings, never silently.

Inverse: free parameters chosen within their trained ranges so that the predicted metrics hit
target values, by bounded multi-start optimisation on the surrogate: a Sobol set of candidates
(I. M. Sobol', USSR Comput. Math. Math. Phys. 7(4), 1967, via :class:`scipy.stats.qmc.Sobol`)
is scored in one batch, the best are polished with L-BFGS-B (R. H. Byrd, P. Lu, J. Nocedal &
C. Zhu, SIAM J. Sci. Comput. 16(5), 1995, via :func:`scipy.optimize.minimize`). The objective
is the sum of squared misses, each divided by that target's spread in the training data.
Choice parameters that are free are solved at each of their studied values.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy.optimize import minimize
from scipy.stats import qmc

from surrogates.features import FeatureSpec, decode, discrete_levels, encode, range_warnings
from surrogates.surrogate import Surrogate
from sweeps.errors import ConfigError

__all__ = ["Prediction", "InverseResult", "resolve_values", "forward", "forward_table",
           "solve_for"]

#: A target counts as met when its miss is below this share of its training spread ...
_MET_REL = 1e-3
#: ... or below this many predictive standard deviations.
_MET_SIGMA = 0.5


def _fmt(v: Any) -> str:
    return f"{v:g}" if isinstance(v, int | float | np.floating) else str(v)


@dataclass
class Prediction:
    """A forward answer at one set of parameter values.

    Attributes
    ----------
    parameters : dict
        The parameter values used (config units), given and defaulted.
    values : dict
        Predicted metric values (metric name -> value in its unit).
    uncertainty : dict
        One predictive standard deviation per metric, same units.
    warnings : list of str
        Extrapolation and missing-metric flags.
    """

    parameters: dict[str, Any]
    values: dict[str, float]
    uncertainty: dict[str, float]
    warnings: list[str] = field(default_factory=list)

    @property
    def extrapolated(self) -> bool:
        return any("EXTRAPOLATED" in w for w in self.warnings)

    def to_json(self) -> dict[str, Any]:
        """``{metric: value, ..., "uncertainty": {...}, "warnings": [...]}``."""
        out: dict[str, Any] = dict(self.values)
        out["uncertainty"] = dict(self.uncertainty)
        out["warnings"] = list(self.warnings)
        return out


@dataclass
class InverseResult:
    """An inverse answer: free parameter values that hit metric targets on the surrogate.

    Attributes
    ----------
    free : dict
        Solved parameter values under their config key names (config units).
    fixed : dict
        The other parameters' values used.
    predicted, uncertainty : dict
        Every target's prediction and standard deviation at the solution.
    targets : dict
        The requested metric values.
    residual : dict
        ``predicted - target`` per requested metric (its unit).
    met : bool
        Every requested metric within ``max(1e-3 x training spread, 0.5 sigma)`` of its target.
    warnings : list of str
    alternatives : list of dict
        Other distinct solutions found (free values), best first; several exist when there
        are more free parameters than targets.
    """

    free: dict[str, Any]
    fixed: dict[str, Any]
    predicted: dict[str, float]
    uncertainty: dict[str, float]
    targets: dict[str, float]
    residual: dict[str, float]
    met: bool
    warnings: list[str] = field(default_factory=list)
    alternatives: list[dict[str, Any]] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        """Free values under their keys, predicted metrics, ``uncertainty``, ``residual``,
        ``met``, ``warnings`` and ``alternatives``."""
        out: dict[str, Any] = {k: _py(v) for k, v in self.free.items()}
        out.update(self.predicted)
        out["uncertainty"] = dict(self.uncertainty)
        out["targets"] = dict(self.targets)
        out["residual"] = dict(self.residual)
        out["met"] = self.met
        out["warnings"] = list(self.warnings)
        out["alternatives"] = [{k: _py(v) for k, v in a.items()} for a in self.alternatives]
        return out


def _py(v: Any) -> Any:
    return v.item() if isinstance(v, np.generic) else v


def resolve_values(
    surrogate: Surrogate,
    values: Mapping[str, Any],
    defaults: Mapping[str, Any] | None = None,
    *,
    source: str = "--set",
) -> dict[str, Any]:
    """All feature values for a query: given ones over defaults, unknown names refused.

    Parameters
    ----------
    surrogate : Surrogate
    values : mapping
        Parameter name -> value (config units) given by the user.
    defaults : mapping, optional
        Values for features not given (e.g. the study config's nominal values). Keys that are
        not features are ignored here.
    source : str
        Where the values came from, for messages.

    Raises
    ------
    ConfigError
        A given name is not a feature, or a feature has no value.
    """
    names = surrogate.feature_names
    for k in values:
        if k not in names:
            raise ConfigError(
                f"{source}: {k!r} is not a surrogate feature (the study held it fixed, so the "
                f"surrogate cannot vary it); features: {', '.join(names)}"
            )
    out: dict[str, Any] = {}
    for f in surrogate.features:
        if f.name in values:
            out[f.name] = values[f.name]
        elif defaults is not None and f.name in defaults:
            out[f.name] = defaults[f.name]
        else:
            raise ConfigError(f"{source}: no value for {f.name!r}; give {source} {f.name}=...")
    return out


def _null_warnings(surrogate: Surrogate, U: NDArray[np.float64], names: Sequence[str],
                   row: int | None = None) -> list[str]:
    where = f"row {row}: " if row is not None else ""
    out = []
    for name in names:
        if surrogate.null_nearby(name, U)[0]:
            out.append(
                f"{where}{name}: the nearest study point had no {name} (the metric did not "
                "exist there); this value may stand for a design where it does not exist"
            )
    return out


def forward(
    surrogate: Surrogate,
    values: Mapping[str, Any],
    *,
    defaults: Mapping[str, Any] | None = None,
    targets: Sequence[str] | None = None,
) -> Prediction:
    """Predict every target (or ``targets``) at one set of parameter values.

    Parameters
    ----------
    surrogate : Surrogate
    values : mapping
        Parameter name -> value in config units.
    defaults : mapping, optional
        Values for features not in ``values``.
    targets : sequence of str, optional

    Returns
    -------
    Prediction
    """
    params = resolve_values(surrogate, values, defaults)
    names = list(targets) if targets is not None else surrogate.target_names
    U = encode(surrogate.features, {k: [v] for k, v in params.items()}, source="--set")
    mean, std = surrogate.predict_unit(U, names)
    warns = range_warnings(surrogate.features, params) + _null_warnings(surrogate, U, names)
    return Prediction(parameters=params, values={k: float(v[0]) for k, v in mean.items()},
                      uncertainty={k: float(v[0]) for k, v in std.items()}, warnings=warns)


def forward_table(
    surrogate: Surrogate, table: pd.DataFrame, *, targets: Sequence[str] | None = None
) -> pd.DataFrame:
    """Batch forward prediction for a table of parameter values (one row per design).

    Returns the input columns plus, per target, ``<metric>`` and ``<metric>_std``, and
    ``extrapolated`` (bool) and ``warnings`` (text) columns.
    """
    names = list(targets) if targets is not None else surrogate.target_names
    U = encode(surrogate.features, table, source="query table")
    mean, std = surrogate.predict_unit(U, names)
    out = table.reset_index(drop=True).copy()
    for k in names:
        out[k] = mean[k]
        out[f"{k}_std"] = std[k]
    outside = np.zeros(len(out), dtype=bool)
    notes: list[list[str]] = [[] for _ in range(len(out))]
    j = 0
    for f in surrogate.features:
        if f.kind != "category":
            u = U[:, j]
            bad = (u < -1e-9) | (u > 1 + 1e-9)
            outside |= bad
            for i in np.flatnonzero(bad):
                notes[i].append(f"{f.name} outside {f.describe_range()}: EXTRAPOLATED")
        j += f.n_columns
    for k in names:
        for i in np.flatnonzero(surrogate.null_nearby(k, U)):
            notes[i].append(f"{k}: nearest study point had no {k}")
    out["extrapolated"] = outside
    out["warnings"] = ["; ".join(n) for n in notes]
    return out


def _combos(features: Sequence[FeatureSpec], free_discrete: Sequence[str],
            limit: int = 256) -> list[dict[str, int]]:
    levels = [range(len(next(f for f in features if f.name == n).values))  # type: ignore[arg-type]
              for n in free_discrete]
    n = math.prod(len(r) for r in levels)
    if n > limit:
        raise ConfigError(
            f"--solve-for: {n} combinations of free choice parameters {list(free_discrete)} "
            f"(limit {limit}); fix some of them with --set"
        )
    return [dict(zip(free_discrete, c, strict=True)) for c in itertools.product(*levels)]


def solve_for(
    surrogate: Surrogate,
    free: Sequence[str],
    targets: Mapping[str, float],
    *,
    fixed: Mapping[str, Any] | None = None,
    defaults: Mapping[str, Any] | None = None,
    n_candidates: int = 1024,
    n_starts: int = 8,
    seed: int = 0,
) -> InverseResult:
    """Find free parameter values (within the trained ranges) that hit metric targets.

    Parameters
    ----------
    surrogate : Surrogate
    free : sequence of str
        Parameters to solve for (dotted config names).
    targets : mapping
        Metric name -> wanted value (its unit), e.g. ``{"resonance_mhz": 915.0}``.
    fixed : mapping, optional
        Values of other parameters (config units).
    defaults : mapping, optional
        Values of parameters neither free nor fixed (the config's nominal values).
    n_candidates : int
        Sobol candidates scored before polishing (rounded up to a power of two).
    n_starts : int
        Best candidates polished by L-BFGS-B.
    seed : int
        Sobol scrambling seed.

    Returns
    -------
    InverseResult
    """
    if not free:
        raise ConfigError("--solve-for: name at least one parameter to solve for")
    if not targets:
        raise ConfigError("--target: give at least one metric=value to solve for")
    free = list(dict.fromkeys(free))
    feats = {f.name: f for f in surrogate.features}
    for n in free:
        surrogate.feature(n)
    fixed = dict(fixed or {})
    both = set(free) & set(fixed)
    if both:
        raise ConfigError(f"--solve-for: {sorted(both)} cannot be both free and set")
    for m, v in targets.items():
        surrogate.target(m)
        if not (isinstance(v, int | float) and math.isfinite(v)):
            raise ConfigError(f"--target: {m} needs a finite number (got {v!r})")
    rest = {k: v for k, v in (defaults or {}).items() if k in feats and k not in free}
    rest.update(fixed)
    base = resolve_values(surrogate, rest, {n: _placeholder(feats[n]) for n in free},
                          source="--set")
    U0 = encode(surrogate.features, {k: [v] for k, v in base.items()}, source="--set")[0]
    col = _column_index(surrogate.features)
    cont = [n for n in free if not feats[n].discrete]
    disc = [n for n in free if feats[n].discrete]
    names = list(targets)
    t = np.array([float(targets[m]) for m in names])
    scale = np.array([surrogate.targets[m].y_std for m in names])

    def objective_batch(U: NDArray[np.float64]) -> NDArray[np.float64]:
        mean, _ = surrogate.predict_unit(U, names, return_std=False)
        r = np.column_stack([(mean[m] - t[i]) / scale[i] for i, m in enumerate(names)])
        return np.sum(r * r, axis=1)

    m_pow = max(1, math.ceil(math.log2(max(2, n_candidates))))
    found: list[tuple[float, NDArray[np.float64]]] = []
    for combo in _combos(surrogate.features, disc):
        Ub = U0.copy()
        for n, level in combo.items():
            a, b = col[n]
            Ub[a:b] = discrete_levels(feats[n])[level]
        idx = [col[n][0] for n in cont]
        if not idx:
            found.append((float(objective_batch(Ub[None, :])[0]), Ub))
            continue
        cand = qmc.Sobol(len(idx), scramble=True, seed=seed).random_base2(m_pow)
        Uc = np.repeat(Ub[None, :], len(cand), axis=0)
        Uc[:, idx] = cand
        score = objective_batch(Uc)
        for s in np.argsort(score)[:max(1, n_starts)]:
            def fun(x: NDArray[np.float64], _ub: NDArray[np.float64] = Ub,
                    _idx: list[int] = idx) -> float:
                u = _ub.copy()
                u[_idx] = x
                return float(objective_batch(u[None, :])[0])

            res = minimize(fun, cand[s], method="L-BFGS-B", bounds=[(0.0, 1.0)] * len(idx),
                           options={"ftol": 1e-15, "gtol": 1e-12, "maxiter": 500})
            x = np.clip(res.x, 0.0, 1.0) if res.fun <= score[s] else cand[s]
            u = Ub.copy()
            u[idx] = x
            found.append((min(float(res.fun), float(score[s])), u))
    return _result(surrogate, found, free, cont, names, targets, base, col)


def _placeholder(f: FeatureSpec) -> Any:
    return f.values[0] if f.values is not None else f.min


def _column_index(features: Sequence[FeatureSpec]) -> dict[str, tuple[int, int]]:
    out, j = {}, 0
    for f in features:
        out[f.name] = (j, j + f.n_columns)
        j += f.n_columns
    return out


def _decode_row(surrogate: Surrogate, u: NDArray[np.float64], names: Sequence[str]
                ) -> dict[str, Any]:
    d = decode(surrogate.features, u[None, :])
    return {n: _py(d[n][0]) for n in names}


def _result(surrogate: Surrogate, found: list[tuple[float, NDArray[np.float64]]],
            free: Sequence[str], cont: Sequence[str], names: Sequence[str],
            targets: Mapping[str, float], base: Mapping[str, Any],
            col: Mapping[str, tuple[int, int]]) -> InverseResult:
    U = np.array([u for _, u in found])
    obj = np.array([o for o, _ in found])
    mean, std = surrogate.predict_unit(U, surrogate.target_names)

    def met_row(i: int) -> bool:
        for m in names:
            miss = abs(mean[m][i] - targets[m])
            if miss > max(_MET_REL * surrogate.targets[m].y_std, _MET_SIGMA * std[m][i]):
                return False
        return True

    met = np.array([met_row(i) for i in range(len(U))])
    unc = np.array([sum(std[m][i] / surrogate.targets[m].y_std for m in names)
                    for i in range(len(U))])
    # among solutions that meet every target prefer the most certain, else the smallest miss
    order = sorted(range(len(U)), key=lambda i: (not met[i], unc[i] if met[i] else obj[i]))
    best = order[0]
    picked: list[int] = [best]
    for i in order[1:]:
        if met[i] != met[best] and not met[i]:
            continue
        if all(np.max(np.abs(U[i] - U[j])) > 0.05 for j in picked):
            picked.append(i)
        if len(picked) >= 6:
            break
    free_vals = _decode_row(surrogate, U[best], free)
    fixed_vals = {k: v for k, v in base.items() if k not in free}
    warns: list[str] = range_warnings(surrogate.features, fixed_vals)
    for n in cont:
        a, _ = col[n]
        if U[best, a] <= 1e-6 or U[best, a] >= 1 - 1e-6:
            f = surrogate.feature(n)
            warns.append(f"{n}={free_vals[n]:g} {f.unit} is at the edge of its trained range "
                         f"{f.describe_range()}: the target may need a value outside it")
    if not met[best]:
        misses = ", ".join(f"{m} {mean[m][best]:.6g} vs {targets[m]:g}" for m in names)
        warns.append(f"targets not reached within the trained ranges (best: {misses})")
    warns += _null_warnings(surrogate, U[best][None, :], surrogate.target_names)
    return InverseResult(
        free=free_vals, fixed=fixed_vals,
        predicted={m: float(mean[m][best]) for m in surrogate.target_names},
        uncertainty={m: float(std[m][best]) for m in surrogate.target_names},
        targets={m: float(v) for m, v in targets.items()},
        residual={m: float(mean[m][best] - targets[m]) for m in names},
        met=bool(met[best]), warnings=warns,
        alternatives=[_decode_row(surrogate, U[i], free) for i in picked[1:]],
    )
