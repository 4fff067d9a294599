"""Print yield: the share of designs around a nominal that meets every spec, by Monte Carlo.

Each tolerance draws its parameter independently around the nominal value:

* ``normal`` (default): the ``±`` value is three standard deviations (a ±3σ process
  tolerance, about 99.7 % of prints inside; common practice), not truncated;
* ``uniform``: every value within ``±`` equally likely.

A percent tolerance is relative to the nominal, in config units (``±10%`` of 2 mm is ±0.2 mm).
At least 1e4 draws are predicted through the surrogate. The yield's confidence interval is the
Wilson score interval (E. B. Wilson, "Probable inference, the law of succession, and
statistical inference", J. Amer. Statist. Assoc. 22(158), 209-212, 1927): it covers the Monte
Carlo sampling error only. With ``include_model_uncertainty`` each draw's metrics also get an
independent normal error with the surrogate's predictive standard deviation; this widens the
spread by the model's own doubt (treating its errors as independent between draws, whereas a
surrogate's errors at nearby points are correlated — a rough allowance, not a bound).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy.stats import norm

from surrogates.features import encode, range_warnings, unit_of
from surrogates.query import resolve_values
from surrogates.specs import Tolerance
from surrogates.surrogate import Surrogate
from sweeps.errors import ConfigError

__all__ = ["YieldResult", "wilson_interval", "draw_parameters", "yield_estimate",
           "spec_pass", "plot_yield", "MIN_DRAWS"]

#: Fewest Monte Carlo draws through the surrogate.
MIN_DRAWS = 10_000


def wilson_interval(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion ``k / n`` (Wilson 1927).

    ``(p + z²/2n ± z sqrt(p(1-p)/n + z²/4n²)) / (1 + z²/n)`` with ``z`` the two-sided normal
    quantile of ``confidence``.
    """
    if n <= 0 or not 0 <= k <= n:
        raise ConfigError(f"yield: need 0 <= k <= n and n > 0 (got k={k}, n={n})")
    z = float(norm.ppf(0.5 + confidence / 2.0))
    p = k / n
    den = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return max(0.0, centre - half), min(1.0, centre + half)


@dataclass
class YieldResult:
    """Outcome of a yield estimate.

    Attributes
    ----------
    share : float
        Share of draws meeting every spec.
    ci_low, ci_high : float
        Wilson interval at ``confidence``.
    confidence : float
    n_draws, n_pass : int
    fail_share : dict
        Per spec metric: share of draws failing that spec (a draw may fail several; a draw
        whose nearest study point had no value of the metric fails it).
    worst : str or None
        The metric that fails most often (``None`` if nothing fails).
    nominal : dict
        Nominal parameter values, and the surrogate's prediction there (``"predicted"``).
    outside_share : float
        Share of draws outside the trained ranges (extrapolated).
    warnings : list of str
    samples : DataFrame
        The draws: varied parameters, spec metrics, ``pass``.
    """

    share: float
    ci_low: float
    ci_high: float
    confidence: float
    n_draws: int
    n_pass: int
    fail_share: dict[str, float]
    worst: str | None
    nominal: dict[str, Any]
    specs: dict[str, tuple[float, float]]
    tolerances: list[Tolerance]
    outside_share: float
    include_model_uncertainty: bool
    warnings: list[str] = field(default_factory=list)
    samples: pd.DataFrame | None = None

    def to_json(self) -> dict[str, Any]:
        """Plain-JSON summary (no samples)."""
        def num(v: float) -> float | None:
            return v if math.isfinite(v) else None

        return {
            "yield": self.share, "ci_low": self.ci_low, "ci_high": self.ci_high,
            "confidence": self.confidence, "draws": self.n_draws, "pass": self.n_pass,
            "fail_share": dict(self.fail_share), "worst_metric": self.worst,
            "nominal": {k: v for k, v in self.nominal.items() if k != "predicted"},
            "predicted_at_nominal": self.nominal.get("predicted", {}),
            "specs": {k: [num(lo), num(hi)] for k, (lo, hi) in self.specs.items()},
            "tolerances": [{"name": t.name, "value": t.value, "percent": t.percent,
                            "distribution": t.distribution} for t in self.tolerances],
            "outside_share": self.outside_share,
            "model_uncertainty": self.include_model_uncertainty,
            "warnings": list(self.warnings),
        }


def draw_parameters(
    nominal: Mapping[str, Any],
    tolerances: Sequence[Tolerance],
    n: int,
    seed: int = 0,
) -> pd.DataFrame:
    """``n`` independent draws of the toleranced parameters around ``nominal``.

    Untoleranced parameters keep their nominal value. Seeded (``numpy.random.default_rng``).
    """
    rng = np.random.default_rng(seed)
    cols: dict[str, NDArray] = {}
    for k, v in nominal.items():
        cols[k] = np.full(n, v, dtype=object if isinstance(v, str) else float)
    for t in tolerances:
        x0 = float(nominal[t.name])
        hw = t.half_width(x0)
        if t.distribution == "uniform":
            cols[t.name] = rng.uniform(x0 - hw, x0 + hw, n)
        else:
            cols[t.name] = rng.normal(x0, hw / 3.0, n)
    return pd.DataFrame(cols)


def spec_pass(values: Mapping[str, NDArray[np.float64]],
              specs: Mapping[str, tuple[float, float]]) -> dict[str, NDArray[np.bool_]]:
    """Per spec: which designs have the metric within ``[lo, hi]``."""
    return {m: (np.asarray(values[m]) >= lo) & (np.asarray(values[m]) <= hi)
            for m, (lo, hi) in specs.items()}


def yield_estimate(
    surrogate: Surrogate,
    nominal: Mapping[str, Any],
    tolerances: Sequence[Tolerance],
    specs: Mapping[str, tuple[float, float]],
    *,
    defaults: Mapping[str, Any] | None = None,
    n_draws: int = 20_000,
    seed: int = 0,
    include_model_uncertainty: bool = False,
    confidence: float = 0.95,
) -> YieldResult:
    """Monte Carlo yield through the surrogate.

    Parameters
    ----------
    surrogate : Surrogate
    nominal : mapping
        Nominal parameter values (config units); others from ``defaults``.
    tolerances : sequence of Tolerance
        Parameters that vary (range features only).
    specs : mapping
        Metric -> ``(lo, hi)``; a draw passes when every metric is inside its interval.
    defaults : mapping, optional
    n_draws : int
        At least :data:`MIN_DRAWS`.
    seed : int
    include_model_uncertainty : bool
        Add the surrogate's predictive error to each draw (see the module notes).
    confidence : float
        Level of the Wilson interval.

    Returns
    -------
    YieldResult
    """
    if n_draws < MIN_DRAWS:
        raise ConfigError(f"yield: at least {MIN_DRAWS} draws are used (got {n_draws})")
    if not specs:
        raise ConfigError("--spec: give at least one metric=lo:hi")
    if not 0 < confidence < 1:
        raise ConfigError(f"yield: confidence must lie in (0, 1) (got {confidence})")
    for m in specs:
        surrogate.target(m)
    params = resolve_values(surrogate, nominal, defaults)
    seen = set()
    for t in tolerances:
        f = surrogate.feature(t.name)
        if t.name in seen:
            raise ConfigError(f"--tolerance {t.name}: given twice")
        seen.add(t.name)
        if f.discrete:
            raise ConfigError(f"--tolerance {t.name}: a choice parameter ({f.describe_range()})"
                              " cannot have a tolerance")
        x0 = float(params[t.name])
        hw = t.half_width(x0)
        reach = x0 - (hw if t.distribution == "uniform" else 2.0 * hw)
        if f.log and reach <= 0:
            raise ConfigError(
                f"--tolerance {t.name}: ±{hw:g} {f.unit} around {x0:g} reaches values <= 0, "
                "which this positive (log-scaled) parameter cannot take; narrow it"
            )
    warns = range_warnings(surrogate.features, params)
    draws = draw_parameters(params, tolerances, n_draws, seed)
    for t in tolerances:
        if surrogate.feature(t.name).log and np.any(draws[t.name] <= 0):
            raise ConfigError(f"--tolerance {t.name}: draws reached values <= 0; narrow it")
    U = encode(surrogate.features, draws, source="yield draws")
    names = list(specs)
    mean, std = surrogate.predict_unit(U, names, return_std=True)
    values = dict(mean)
    if include_model_uncertainty:
        rng = np.random.default_rng(np.random.SeedSequence(seed).spawn(2)[1])
        values = {m: mean[m] + std[m] * rng.standard_normal(len(U)) for m in names}
    passes = spec_pass(values, specs)
    # where the metric did not exist at the nearest study point, the design fails its spec
    nulls = {m: surrogate.null_nearby(m, U) for m in names}
    for m in names:
        passes[m] &= ~nulls[m]
    ok = np.logical_and.reduce(list(passes.values()))
    n_pass = int(ok.sum())
    lo, hi = wilson_interval(n_pass, n_draws, confidence)
    fail = {m: float(1.0 - p.mean()) for m, p in passes.items()}
    worst = max(fail, key=lambda m: fail[m]) if max(fail.values()) > 0 else None
    outside = np.zeros(len(U), dtype=bool)
    j = 0
    for f in surrogate.features:
        if f.kind != "category":
            outside |= (U[:, j] < -1e-9) | (U[:, j] > 1 + 1e-9)
        j += f.n_columns
    if outside.any():
        warns.append(f"{outside.mean():.1%} of the draws fall outside the trained ranges: "
                     "those predictions are EXTRAPOLATED")
    for m in names:
        if nulls[m].any():
            warns.append(f"{m}: {nulls[m].mean():.1%} of the draws lie nearest study points "
                         f"where {m} did not exist; they count as failing its spec")
    u0 = encode(surrogate.features, {k: [v] for k, v in params.items()})
    m0, s0 = surrogate.predict_unit(u0, names)
    nominal_out: dict[str, Any] = dict(params)
    nominal_out["predicted"] = {m: {"value": float(m0[m][0]), "std": float(s0[m][0])}
                                for m in names}
    samples = draws[[t.name for t in tolerances]].copy()
    for m in names:
        samples[m] = values[m]
    samples["pass"] = ok
    return YieldResult(
        share=n_pass / n_draws, ci_low=lo, ci_high=hi, confidence=confidence,
        n_draws=n_draws, n_pass=n_pass, fail_share=fail, worst=worst, nominal=nominal_out,
        specs=dict(specs), tolerances=list(tolerances), outside_share=float(outside.mean()),
        include_model_uncertainty=include_model_uncertainty, warnings=warns, samples=samples,
    )


def plot_yield(result: YieldResult, path: str | Path) -> Path:
    """Histograms of each spec metric over the draws with the spec limits (PNG, Agg)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    path = Path(path)
    names = list(result.specs)
    fig = Figure(figsize=(max(5.5, 4.0 * len(names)), 3.6))
    s = result.samples
    for i, m in enumerate(names):
        ax = fig.add_subplot(1, len(names), i + 1)
        if s is not None:
            ax.hist(s[m], bins=60, color="C0", alpha=0.8)
        lo, hi = result.specs[m]
        for b in (lo, hi):
            if math.isfinite(b):
                ax.axvline(b, color="C3", ls="--")
        u = unit_of(m)
        ax.set_xlabel(f"{m} ({u})" if u else m)
        ax.set_title(f"fails {result.fail_share[m]:.1%}", fontsize=9)
    fig.suptitle(f"Yield {result.share:.1%} (95% CI {result.ci_low:.1%}-{result.ci_high:.1%}, "
                 f"{result.n_draws} draws)" if result.confidence == 0.95 else
                 f"Yield {result.share:.1%}")
    fig.tight_layout()
    FigureCanvasAgg(fig).print_png(str(path))
    return path
