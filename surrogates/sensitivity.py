"""Parameter sensitivity from the surrogate: variance-based (Sobol') indices.

For a model ``y = f(x)`` with independent inputs, the first-order index ``S_i`` is the share of
``Var y`` explained by ``x_i`` alone and the total index ``ST_i`` the share involving ``x_i``
at all (I. M. Sobol', Math. Model. Comput. Exp. 1(4), 1993). Estimators (A. Saltelli et al.,
"Variance based sensitivity analysis of model output. Design and estimator for the total
sensitivity index", Computer Physics Communications 181(2), 259-270, 2010, Table 2):
matrices ``A``, ``B`` of ``N`` quasi-random rows and ``A_B^(i)`` (``A`` with column ``i`` from
``B``);

* ``S_i  = mean(f(B) (f(A_B^(i)) - f(A))) / V``   (Saltelli 2010, Table 2 (b));
* ``ST_i = mean((f(A) - f(A_B^(i)))^2) / (2 V)``  (Jansen 1999, Table 2 (f));

with ``V`` the variance of ``f`` over ``A`` and ``B`` together; ``N (d + 2)`` evaluations.
Confidence half-widths come from bootstrapping the rows (95 %).

Through a surrogate the inputs are uniform over each feature's trained range in its own scale
(log-uniform for log features; choice features uniform over their levels), and the indices
describe the surrogate's mean.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from surrogates.sampling import FeatureSampler, sobol_points
from surrogates.surrogate import Surrogate
from sweeps.errors import ConfigError

__all__ = ["sobol_indices", "surrogate_sobol", "plot_sensitivity"]


def sobol_indices(
    f: Callable[[NDArray[np.float64]], NDArray[np.float64]],
    d: int,
    *,
    n: int = 4096,
    seed: int = 0,
    n_bootstrap: int = 200,
) -> dict[str, NDArray[np.float64]]:
    """First-order and total Sobol' indices of ``f`` over ``[0, 1)^d`` (Saltelli 2010).

    Parameters
    ----------
    f : callable
        Maps an array of shape (m, d) to values of shape (m,).
    d : int
        Input dimension.
    n : int
        Base sample size ``N`` (rounded up to a power of two).
    seed : int
    n_bootstrap : int
        Bootstrap resamples for the confidence half-widths.

    Returns
    -------
    dict
        ``first_order``, ``total``, ``first_order_conf``, ``total_conf`` (arrays of shape
        (d,)) and ``variance`` (scalar array).
    """
    if d < 1:
        raise ConfigError("sensitivity: need at least one free parameter")
    AB = sobol_points(2 * d, n, seed)
    A, B = AB[:, :d], AB[:, d:]
    N = len(A)
    stacked = [A, B] + [np.where(np.arange(d) == i, B, A) for i in range(d)]
    y = np.asarray(f(np.vstack(stacked)), dtype=float)
    # centring does not change the indices but removes the estimators' sensitivity to a large
    # mean (Saltelli et al. 2010, section 4)
    y = y - np.mean(y[:2 * len(A)])
    fA, fB = y[:N], y[N:2 * N]
    fAB = y[2 * N:].reshape(d, N)

    def est(rows: NDArray[np.intp]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        a, b, ab = fA[rows], fB[rows], fAB[:, rows]
        v = np.var(np.concatenate([a, b]))
        if not v > 0:
            return np.zeros(d), np.zeros(d)
        s1 = np.mean(b[None, :] * (ab - a[None, :]), axis=1) / v
        st = 0.5 * np.mean((a[None, :] - ab) ** 2, axis=1) / v
        return s1, st

    s1, st = est(np.arange(N))
    rng = np.random.default_rng(seed)
    boots = [est(rng.integers(0, N, N)) for _ in range(n_bootstrap)]
    b1 = np.array([b[0] for b in boots])
    bt = np.array([b[1] for b in boots])
    q = (2.5, 97.5)
    return {
        "first_order": s1, "total": st,
        "first_order_conf": 0.5 * np.diff(np.percentile(b1, q, axis=0), axis=0)[0],
        "total_conf": 0.5 * np.diff(np.percentile(bt, q, axis=0), axis=0)[0],
        "variance": np.asarray(np.var(np.concatenate([fA, fB]))),
    }


def surrogate_sobol(
    surrogate: Surrogate,
    target: str,
    *,
    fixed: Mapping[str, Any] | None = None,
    n: int = 4096,
    seed: int = 0,
) -> pd.DataFrame:
    """Sobol' indices of one target's surrogate mean over the free features.

    Returns
    -------
    DataFrame
        Columns ``feature``, ``first_order``, ``total``, ``first_order_conf``,
        ``total_conf``; one row per free feature.
    """
    surrogate.target(target)
    sampler = FeatureSampler(surrogate, fixed)

    def f(raw: NDArray[np.float64]) -> NDArray[np.float64]:
        mean, _ = surrogate.predict_unit(sampler.to_inputs(raw), [target], return_std=False)
        return mean[target]

    r = sobol_indices(f, sampler.d, n=n, seed=seed)
    return pd.DataFrame({"feature": sampler.names, "first_order": r["first_order"],
                         "total": r["total"], "first_order_conf": r["first_order_conf"],
                         "total_conf": r["total_conf"]})


def plot_sensitivity(indices: Mapping[str, pd.DataFrame], path: str | Path) -> Path:
    """Bar charts of first-order and total indices, one panel per target (PNG, Agg)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    path = Path(path)
    k = max(1, len(indices))
    fig = Figure(figsize=(4.2 * k, 3.6))
    for i, (target, df) in enumerate(indices.items()):
        ax = fig.add_subplot(1, k, i + 1)
        x = np.arange(len(df))
        ax.bar(x - 0.2, df["first_order"], 0.4, yerr=df["first_order_conf"], label="first order")
        ax.bar(x + 0.2, df["total"], 0.4, yerr=df["total_conf"], label="total")
        ax.set_xticks(x, [n.rsplit(".", 1)[-1] for n in df["feature"]], rotation=30,
                      ha="right", fontsize=8)
        ax.set_ylim(0, 1.05)
        ax.set_title(target, fontsize=10)
        if i == 0:
            ax.set_ylabel("Sobol' index")
            ax.legend(fontsize=8)
    fig.suptitle("Parameter sensitivity (Sobol' indices of the surrogate)")
    fig.tight_layout()
    FigureCanvasAgg(fig).print_png(str(path))
    return path
