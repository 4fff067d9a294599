"""Space-filling samples of a surrogate's feature space (Sobol points on the unit cube).

:class:`FeatureSampler` maps raw points of ``[0, 1)^d`` — one coordinate per free feature — to
model inputs: a range feature takes the coordinate as is (uniform in its scale: log-uniform for
a log feature), a choice feature picks one of its levels with equal probability, and held
features keep their encoded value. Sobol points come from :class:`scipy.stats.qmc.Sobol`
(scrambled, seeded).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy.stats import qmc

from surrogates.features import FeatureSpec, decode, discrete_levels, encode
from surrogates.surrogate import Surrogate

__all__ = ["FeatureSampler", "sobol_points"]


def sobol_points(d: int, n: int, seed: int) -> NDArray[np.float64]:
    """``n`` scrambled Sobol points in ``[0, 1)^d`` (``n`` rounded up to a power of two)."""
    m = max(0, math.ceil(math.log2(max(1, n))))
    return qmc.Sobol(d, scramble=True, seed=seed).random_base2(m)


class FeatureSampler:
    """Map raw unit-cube points over the free features to surrogate inputs.

    Parameters
    ----------
    surrogate : Surrogate
    fixed : mapping, optional
        Features held at a value (config units); the others are free.
    """

    def __init__(self, surrogate: Surrogate, fixed: Mapping[str, Any] | None = None) -> None:
        fixed = dict(fixed or {})
        for k in fixed:
            surrogate.feature(k)
        self.surrogate = surrogate
        self.features: tuple[FeatureSpec, ...] = surrogate.features
        self.fixed = fixed
        self.free: list[FeatureSpec] = [f for f in self.features if f.name not in fixed]
        base = {f.name: fixed.get(f.name, f.values[0] if f.values else f.min)
                for f in self.features}
        self._base = encode(self.features, {k: [v] for k, v in base.items()}, source="--set")[0]
        self._cols: dict[str, tuple[int, int]] = {}
        j = 0
        for f in self.features:
            self._cols[f.name] = (j, j + f.n_columns)
            j += f.n_columns

    @property
    def names(self) -> list[str]:
        """Names of the free features (the raw coordinates, in order)."""
        return [f.name for f in self.free]

    @property
    def d(self) -> int:
        return len(self.free)

    def to_inputs(self, raw: NDArray[np.float64]) -> NDArray[np.float64]:
        """Model inputs, shape (n, n_columns), for raw points, shape (n, d)."""
        raw = np.atleast_2d(raw)
        U = np.repeat(self._base[None, :], len(raw), axis=0)
        for i, f in enumerate(self.free):
            a, b = self._cols[f.name]
            if f.discrete:
                levels = discrete_levels(f)
                k = np.minimum((raw[:, i] * len(levels)).astype(int), len(levels) - 1)
                U[:, a:b] = levels[k]
            else:
                U[:, a] = raw[:, i]
        return U

    def sample(self, n: int, seed: int = 0) -> NDArray[np.float64]:
        """``n`` (rounded up to a power of two) Sobol-distributed model inputs."""
        if self.d == 0:
            return self._base[None, :].copy()
        return self.to_inputs(sobol_points(self.d, n, seed))

    def values(self, U: NDArray[np.float64]) -> pd.DataFrame:
        """Config-unit parameter values of model inputs; choice levels snapped exactly."""
        cols = decode(self.features, U)
        out = pd.DataFrame(cols)
        for f in self.features:
            if f.kind == "levels":
                lv = np.asarray(f.values, dtype=float)
                out[f.name] = lv[np.argmin(np.abs(cols[f.name][:, None] - lv[None, :]), axis=1)]
        return out

    def columns_of(self, names: Sequence[str]) -> list[int]:
        """First model-input column of each named feature."""
        return [self._cols[n][0] for n in names]
