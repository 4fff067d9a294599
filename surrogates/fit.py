"""Fitting surrogates: k-fold cross-validation, the ``auto`` choice and the final refit.

``model = "auto"`` picks, per target, the kind with the highest cross-validated R²; kinds within
``R2_TIE`` of the best are then ranked by their largest out-of-fold error (a surrogate that is
good on average but badly wrong somewhere is the worse tool for inverse and yield questions).
Scores are pooled over folds (every row predicted once, by a model that did not see it).
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
from sklearn.model_selection import KFold

from surrogates.dataset import Dataset
from surrogates.kinds import MODEL_CLASSES, check_model_choice, make_model
from surrogates.surrogate import CVScores, Surrogate, TargetModel
from sweeps.errors import ConfigError

__all__ = ["cv_scores", "fit_surrogate", "R2_TIE", "DEFAULT_FOLDS"]

logger = logging.getLogger(__name__)

#: Two kinds whose CV R² differ by less than this are ranked by max error instead.
R2_TIE = 1e-3
DEFAULT_FOLDS = 5


def _scores(y: np.ndarray, pred: np.ndarray, folds: int) -> CVScores:
    err = np.abs(pred - y)
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - float(np.sum(err**2)) / ss_tot if ss_tot > 0 else float("nan")
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = err / np.abs(y)
    finite = np.all(np.isfinite(rel)) and np.all(np.abs(y) > 0)
    return CVScores(
        r2=r2, mean_abs_error=float(err.mean()), max_abs_error=float(err.max()),
        mean_rel_error=float(rel.mean()) if finite else float("nan"),
        max_rel_error=float(rel.max()) if finite else float("nan"), folds=folds,
    )


def cv_scores(
    kind: str, X: np.ndarray, y: np.ndarray, *, folds: int = DEFAULT_FOLDS, seed: int = 0,
    params: Mapping[str, Any] | None = None,
) -> CVScores:
    """Pooled k-fold cross-validation scores of model ``kind`` on ``(X, y)``.

    Parameters
    ----------
    kind : {"gp", "boosting"}
    X : ndarray, shape (n, p)
    y : ndarray, shape (n,)
    folds : int
        Number of folds (at most ``n``); rows are shuffled with ``seed``.
    seed : int
    params : mapping, optional
        Extra model settings.
    """
    k = max(2, min(int(folds), len(y)))
    pred = np.empty_like(y, dtype=float)
    for train, test in KFold(n_splits=k, shuffle=True, random_state=seed).split(X):
        model = make_model(kind, seed, **dict(params or {})).fit(X[train], y[train])
        pred[test] = model.predict(X[test])
    return _scores(y, pred, k)


def _fold_params(kind: str, full: Any) -> dict[str, Any]:
    """Settings for the CV folds of ``kind`` given the model fitted on all rows.

    A Gaussian process re-tunes its hyper-parameters on every fold, starting from those
    learned on all rows instead of from random restarts (each fold still fits its own; this
    only saves the restarts).
    """
    if kind == "gp":
        return {"initial": (full.constant_, tuple(full.length_scale_), full.noise_),
                "n_restarts_optimizer": 0}
    return {}


def _choose(cands: dict[str, CVScores]) -> str:
    def r2(s: CVScores) -> float:
        return s.r2 if np.isfinite(s.r2) else -np.inf

    best = max(r2(s) for s in cands.values())
    close = [k for k, s in cands.items() if r2(s) >= best - R2_TIE]
    return min(close, key=lambda k: (cands[k].max_abs_error, k))


def fit_surrogate(
    dataset: Dataset,
    model: str | Mapping[str, str] = "auto",
    *,
    folds: int = DEFAULT_FOLDS,
    seed: int = 0,
    params: Mapping[str, Mapping[str, Any]] | None = None,
    plan_fingerprint: str | None = None,
    meta: Mapping[str, Any] | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> Surrogate:
    """Cross-validate, choose and fit one model per target of ``dataset``.

    Parameters
    ----------
    dataset : Dataset
        From :func:`surrogates.dataset.build_dataset`.
    model : {"auto", "gp", "boosting"} or mapping of target to one of them
        ``auto`` picks per target by k-fold CV (R², then max error).
    folds : int
        k of the k-fold cross-validation.
    seed : int
        Seed of the fold split, the optimizer restarts and the bootstrap.
    params : mapping, optional
        Extra settings per kind, e.g. ``{"gp": {"n_restarts_optimizer": 2}}``.
    plan_fingerprint : str, optional
        The study config's plan fingerprint, stored for the file check on load.
    meta : mapping, optional
        Extra provenance to keep (study name, ...).
    progress : callable, optional
        ``progress(done, total, message)`` before each model fit (a fit and its
        cross-validation) and ``progress(total, total, "")`` at the end, for a progress bar.

    Returns
    -------
    Surrogate
    """
    params = params or {}
    for k in params:
        if k not in MODEL_CLASSES:
            raise ConfigError(f"surrogate: settings given for unknown model kind {k!r}")
    targets: dict[str, TargetModel] = {}
    plan: dict[str, list[str]] = {}
    for name in dataset.targets:
        choice = model.get(name, "auto") if isinstance(model, Mapping) else model
        check_model_choice(choice)
        plan[name] = list(MODEL_CLASSES) if choice == "auto" else [choice]
    total, done = sum(len(k) for k in plan.values()), 0
    for name, td in dataset.targets.items():
        kinds = plan[name]
        cands: dict[str, CVScores] = {}
        fitted: dict[str, Any] = {}
        for kind in kinds:
            if progress:
                progress(done, total, f"{name}: {kind} on {len(td.y)} points")
            done += 1
            kp = dict(params.get(kind, {}))
            fitted[kind] = make_model(kind, seed, **kp).fit(td.X, td.y)
            cands[kind] = cv_scores(kind, td.X, td.y, folds=folds, seed=seed,
                                    params={**kp, **_fold_params(kind, fitted[kind])})
        kind = _choose(cands)
        est = fitted[kind]
        for note in getattr(est, "fit_warnings_", []):
            logger.info("%s (%s): %s", name, kind, note)
        s = cands[kind]
        logger.info("%s: %s chosen, CV R2 %.5f, mean |err| %.4g, max |err| %.4g",
                    name, kind, s.r2, s.mean_abs_error, s.max_abs_error)
        targets[name] = TargetModel(
            name=name, kind=kind, model=est, cv=s, candidates=cands, n_train=len(td.y),
            n_dropped=td.n_dropped, y_min=float(td.y.min()), y_max=float(td.y.max()),
            y_std=float(np.std(td.y)) or 1.0, X_null=td.X_null,
        )
    if progress:
        progress(total, total, "")
    info = {"model": dict(model) if isinstance(model, Mapping) else model, "folds": folds,
            "seed": seed, "n_rows": dataset.n_rows}
    info.update(meta or {})
    return Surrogate(features=dataset.features, targets=targets, X_train=dataset.X,
                     training_sha256=dataset.sha256, plan_fingerprint=plan_fingerprint,
                     meta=info)
