"""The surrogate model kinds: names, default construction and rebuilding from arrays + JSON.

A model kind is a scikit-learn regressor whose ``predict(X, return_std=True)`` returns a mean
and a standard deviation, and which can be written as JSON parameters plus numeric arrays
(``to_state``) and rebuilt from them (``from_state``) without running code from the file.
To add one: implement those three methods, add it to :data:`MODEL_CLASSES`, and run the shared
conformance tests in ``tests/surrogates/test_models.py`` on it.
"""

from __future__ import annotations

from typing import Any, Literal, Protocol, get_args

import numpy as np
from numpy.typing import ArrayLike, NDArray

from surrogates.boosting import BoostingSurrogate
from surrogates.gp import GPSurrogate
from sweeps.errors import ConfigError

__all__ = ["ModelKind", "ModelChoice", "SurrogateModel", "MODEL_CLASSES", "make_model",
           "check_model_choice"]

ModelKind = Literal["gp", "boosting"]
ModelChoice = Literal["auto", "gp", "boosting"]


class SurrogateModel(Protocol):
    """What :mod:`surrogates` needs of a fitted model (units: those of the target)."""

    n_features_in_: int

    def fit(self, X: ArrayLike, y: ArrayLike) -> SurrogateModel: ...

    def predict(self, X: ArrayLike, return_std: bool = False) -> Any: ...

    def to_state(self) -> tuple[dict[str, Any], dict[str, NDArray]]: ...


MODEL_CLASSES: dict[str, type] = {"gp": GPSurrogate, "boosting": BoostingSurrogate}


def check_model_choice(choice: str, where: str = "surrogate.model") -> str:
    """Validate a model choice (``auto``, ``gp``, ``boosting``) and return it."""
    if choice not in get_args(ModelChoice):
        raise ConfigError(
            f"{where}: unknown model {choice!r}; expected one of {', '.join(get_args(ModelChoice))}"
        )
    return choice


def make_model(kind: str, seed: int = 0, **params: Any) -> Any:
    """A fresh, unfitted model of ``kind`` with a seed and optional settings."""
    check_model_choice(kind)
    if kind == "auto":
        raise ConfigError("surrogate.model: 'auto' is a selection rule, not a model kind")
    return MODEL_CLASSES[kind](random_state=seed, **params)


def rebuild(kind: str, params: dict[str, Any], arrays: dict[str, NDArray[np.float64]]) -> Any:
    """Rebuild a fitted model from its stored state (only the kinds listed here)."""
    if kind not in MODEL_CLASSES:
        raise ValueError(f"unknown model kind {kind!r}")
    return MODEL_CLASSES[kind].from_state(params, arrays)
