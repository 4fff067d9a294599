"""The fitted surrogate of a study: one model per target metric over the study's features.

:class:`Surrogate` is what :func:`surrogates.fit.fit_surrogate` returns, what
:mod:`surrogates.store` saves and loads, and what the query, trade-off, yield, refinement and
sensitivity functions take. Inputs are on the unit cube (see :mod:`surrogates.features`);
:meth:`Surrogate.predict_values` takes config-unit values.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from surrogates.features import FeatureSpec, encode, n_columns, unit_of
from sweeps.errors import ConfigError
from sweeps.metrics import METRIC_UNITS

__all__ = ["CVScores", "TargetModel", "Surrogate", "nearest_distance"]


@dataclass(frozen=True)
class CVScores:
    """k-fold cross-validation scores of one model on one target (pooled out-of-fold).

    Attributes
    ----------
    r2 : float
        Coefficient of determination of the out-of-fold predictions.
    mean_abs_error, max_abs_error : float
        Mean and largest absolute out-of-fold error, in the target's unit.
    mean_rel_error, max_rel_error : float
        The same relative to ``|y|`` (``nan`` where the target crosses zero).
    folds : int
    """

    r2: float
    mean_abs_error: float
    max_abs_error: float
    mean_rel_error: float
    max_rel_error: float
    folds: int

    def to_json(self) -> dict[str, float | int]:
        return {k: (None if isinstance(v, float) and not np.isfinite(v) else v)
                for k, v in self.__dict__.items()}

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> CVScores:
        return cls(**{k: (float("nan") if d[k] is None else d[k])
                      for k in cls.__dataclass_fields__})


@dataclass
class TargetModel:
    """A fitted model for one target metric and how well it did in cross-validation.

    Attributes
    ----------
    name : str
        Metric name.
    kind : {"gp", "boosting"}
    model : estimator
        Fitted model on unit-cube inputs.
    cv : CVScores
        Scores of the chosen kind.
    candidates : dict
        Scores of every kind tried (``model = "auto"``).
    n_train, n_dropped : int
        Rows used, rows dropped because the metric was null.
    y_min, y_max, y_std : float
        Range and spread of the training values (for scaling inverse-query residuals).
    X_null : ndarray, shape (n_dropped, p)
        Unit-cube inputs where the metric did not exist.
    """

    name: str
    kind: str
    model: Any
    cv: CVScores
    candidates: dict[str, CVScores]
    n_train: int
    n_dropped: int
    y_min: float
    y_max: float
    y_std: float
    X_null: NDArray[np.float64]

    @property
    def unit(self) -> str:
        """Unit of the metric (``sweeps.metrics.METRIC_UNITS``, else from its name)."""
        u = METRIC_UNITS.get(self.name, "") or unit_of(self.name)
        return "" if u == "1" else u


@dataclass
class Surrogate:
    """Per-target models over the study's features, with their provenance.

    Attributes
    ----------
    features : tuple of FeatureSpec
    targets : dict of str to TargetModel
    X_train : ndarray, shape (n, p)
        Unit-cube inputs of every training row (null-target rows included).
    training_sha256 : str
        Digest of the training columns (:func:`surrogates.dataset.training_sha256`).
    plan_fingerprint : str or None
        Fingerprint of the study config's plan this surrogate was trained for.
    meta : dict
        Free-form provenance (study name, creation time, versions, fit settings).
    """

    features: tuple[FeatureSpec, ...]
    targets: dict[str, TargetModel]
    X_train: NDArray[np.float64]
    training_sha256: str
    plan_fingerprint: str | None = None
    meta: dict[str, Any] = field(default_factory=dict)

    @property
    def feature_names(self) -> list[str]:
        return [f.name for f in self.features]

    @property
    def target_names(self) -> list[str]:
        return list(self.targets)

    @property
    def n_columns(self) -> int:
        return n_columns(self.features)

    def feature(self, name: str) -> FeatureSpec:
        """The feature spec called ``name``; :class:`ConfigError` naming the choices if none."""
        for f in self.features:
            if f.name == name:
                return f
        raise ConfigError(
            f"{name!r} is not a surrogate feature; features: {', '.join(self.feature_names)}"
        )

    def target(self, name: str) -> TargetModel:
        """The model of target ``name``; :class:`ConfigError` naming the choices if none."""
        try:
            return self.targets[name]
        except KeyError:
            raise ConfigError(
                f"{name!r} is not a surrogate target; targets: {', '.join(self.targets)} "
                "(add it to [surrogate] targets and fit again)"
            ) from None

    def predict_unit(
        self, U: NDArray[np.float64], names: Sequence[str] | None = None,
        *, return_std: bool = True,
    ) -> tuple[dict[str, NDArray[np.float64]], dict[str, NDArray[np.float64]]]:
        """Predict targets at unit-cube inputs.

        Parameters
        ----------
        U : ndarray, shape (n, n_columns)
        names : sequence of str, optional
            Targets to predict (default all).
        return_std : bool
            Also return standard deviations (else the second dict is empty).

        Returns
        -------
        mean, std : dict of str to ndarray, shape (n,)
            In each target's unit; ``std`` is one predictive standard deviation.
        """
        U = np.atleast_2d(np.asarray(U, dtype=float))
        if U.shape[1] != self.n_columns:
            raise ConfigError(
                f"surrogate input has {U.shape[1]} columns, expected {self.n_columns}"
            )
        mean: dict[str, NDArray[np.float64]] = {}
        std: dict[str, NDArray[np.float64]] = {}
        for name in names if names is not None else self.targets:
            tm = self.target(name)
            if return_std:
                mean[name], std[name] = tm.model.predict(U, return_std=True)
            else:
                mean[name] = tm.model.predict(U)
        return mean, std

    def predict_values(
        self, values: pd.DataFrame | Mapping[str, Any], names: Sequence[str] | None = None
    ) -> pd.DataFrame:
        """Predict targets for parameter values in config units.

        Returns a DataFrame with one column per target and ``<target>_std`` for its standard
        deviation. No range checks here: :func:`surrogates.query.forward` flags extrapolation.
        """
        U = encode(self.features, values)
        mean, std = self.predict_unit(U, names)
        out = pd.DataFrame(mean)
        for k, v in std.items():
            out[f"{k}_std"] = v
        return out

    def null_nearby(self, name: str, U: NDArray[np.float64]) -> NDArray[np.bool_]:
        """True where the nearest training row to ``U`` had no value of target ``name``.

        A surrogate always returns a number; where the solver found that the metric does not
        exist (e.g. no resonance in the band), the number stands for nothing. This flags it.
        """
        tm = self.target(name)
        U = np.atleast_2d(U)
        if len(tm.X_null) == 0:
            return np.zeros(len(U), dtype=bool)
        d_all = nearest_distance(U, self.X_train)
        d_null = nearest_distance(U, tm.X_null)
        return d_null <= d_all * (1 + 1e-12)


def nearest_distance(U: NDArray[np.float64], X: NDArray[np.float64]) -> NDArray[np.float64]:
    """Distance from each row of ``U`` to its nearest row of ``X`` (unit-cube metric)."""
    out = np.empty(len(U))
    step = max(1, 4_000_000 // max(1, len(X) * U.shape[1]))
    for s in range(0, len(U), step):
        d = U[s:s + step, None, :] - X[None, :, :]
        out[s:s + step] = np.sqrt(np.min(np.einsum("ijk,ijk->ij", d, d), axis=1))
    return out
