"""Training sets from study tables: features on the unit cube, one target vector per metric.

A study table is a pandas DataFrame with one row per evaluated point: ``point_id``, one column
per parameter (full dotted config path, config units) and one column per metric (nullable:
a metric that does not exist for a design is null). :func:`build_dataset` turns it into model
inputs (:func:`surrogates.features.encode`) and, for every target, the rows where that target
is known, counting the rows it had to drop.
"""

from __future__ import annotations

import hashlib
import json
import logging
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from surrogates.features import FeatureSpec, as_feature_specs, encode
from sweeps.errors import ConfigError

__all__ = ["TargetData", "Dataset", "build_dataset", "training_sha256", "MIN_ROWS"]

logger = logging.getLogger(__name__)

#: Fewest non-null rows a target needs before a model is fitted to it.
MIN_ROWS = 8


@dataclass(frozen=True)
class TargetData:
    """Training data of one target metric.

    Attributes
    ----------
    name : str
        Metric name (``resonance_mhz``).
    X : ndarray, shape (n, p)
        Unit-cube inputs of the rows where the metric is known.
    y : ndarray, shape (n,)
        The metric in its table units.
    point_ids : tuple
        ``point_id`` of each kept row (row numbers if the table has none).
    n_dropped : int
        Rows dropped because the metric is null (or not finite).
    X_null : ndarray, shape (n_dropped, p)
        Unit-cube inputs of the dropped rows (a query near them is flagged).
    """

    name: str
    X: NDArray[np.float64]
    y: NDArray[np.float64]
    point_ids: tuple[Any, ...]
    n_dropped: int
    X_null: NDArray[np.float64]


@dataclass(frozen=True)
class Dataset:
    """Features, per-target training data and the hash identifying the training set."""

    features: tuple[FeatureSpec, ...]
    targets: dict[str, TargetData]
    X: NDArray[np.float64]
    sha256: str
    n_rows: int
    notes: list[str] = field(default_factory=list)

    @property
    def feature_names(self) -> list[str]:
        return [f.name for f in self.features]

    def summary(self) -> list[str]:
        """One line per target: rows used and rows dropped."""
        return [
            f"{t.name}: {len(t.y)} of {self.n_rows} rows"
            + (f" ({t.n_dropped} dropped: metric null)" if t.n_dropped else "")
            for t in self.targets.values()
        ]


def _sorted(table: pd.DataFrame) -> pd.DataFrame:
    if "point_id" in table.columns:
        return table.sort_values("point_id", kind="mergesort").reset_index(drop=True)
    return table.reset_index(drop=True)


def training_sha256(
    table: pd.DataFrame, features: Sequence[FeatureSpec], targets: Sequence[str]
) -> str:
    """SHA-256 of the columns a surrogate is trained on, independent of row order.

    The digest covers the feature and target names and their values (float64 bytes, null as
    NaN; category levels as text), rows sorted by ``point_id``. Two tables give the same digest
    exactly when a refit would see the same data.
    """
    t = _sorted(table)
    h = hashlib.sha256()
    names = [f.name for f in features] + list(targets)
    h.update(json.dumps({"columns": names, "rows": len(t)}, sort_keys=True).encode())
    if "point_id" in t.columns:
        h.update(json.dumps([str(p) for p in t["point_id"]]).encode())
    for f in features:
        col = t[f.name]
        if f.kind == "category":
            h.update(json.dumps([str(v) for v in col]).encode())
        else:
            h.update(np.ascontiguousarray(pd.to_numeric(col), dtype="<f8").tobytes())
    for name in targets:
        y = pd.to_numeric(t[name], errors="coerce").astype(float).to_numpy(dtype="<f8")
        h.update(np.ascontiguousarray(y).tobytes())
    return h.hexdigest()


def build_dataset(
    table: pd.DataFrame,
    features: Iterable[Any],
    targets: Sequence[str],
    *,
    source: str = "study table",
) -> Dataset:
    """Build model inputs and per-target training data from a study table.

    Parameters
    ----------
    table : DataFrame
        One row per point; parameter columns by dotted config name, metric columns by name.
    features : iterable of FeatureSpec (or study parameter specs)
        The study's ``[space]`` parameters, in order.
    targets : sequence of str
        Metric names to model (``[surrogate] targets``).
    source : str
        Name of the table for messages (e.g. the store file).

    Returns
    -------
    Dataset

    Raises
    ------
    ConfigError
        A column is missing, a target is not numeric, or a target has fewer than
        :data:`MIN_ROWS` non-null rows.
    """
    specs = as_feature_specs(features)
    if not specs:
        raise ConfigError(f"{source}: the surrogate needs at least one [space] parameter")
    if not targets:
        raise ConfigError(f"{source}: [surrogate] targets is empty; name at least one metric")
    if len(set(targets)) != len(targets):
        raise ConfigError(f"{source}: [surrogate] targets lists a metric twice ({list(targets)})")
    if len(table) == 0:
        raise ConfigError(f"{source}: the study has no evaluated points yet; run it first")
    for f in specs:
        if f.name not in table.columns:
            raise ConfigError(
                f"{source}: no column for parameter {f.name!r} (columns: "
                f"{', '.join(map(str, table.columns))})"
            )
    for name in targets:
        if name not in table.columns:
            raise ConfigError(
                f"{source}: [surrogate] targets: no metric {name!r} in the study table "
                f"(available: {', '.join(c for c in map(str, table.columns) if '.' not in c)})"
            )
    t = _sorted(table)
    X = encode(specs, t, source=source)
    ids = tuple(t["point_id"]) if "point_id" in t.columns else tuple(range(len(t)))
    out: dict[str, TargetData] = {}
    for name in targets:
        col = t[name]
        y = pd.to_numeric(col, errors="coerce").astype(float).to_numpy()
        bad = col.notna().to_numpy() & np.isnan(y)
        if bad.any():
            raise ConfigError(
                f"{source}: metric {name!r} has non-numeric values (e.g. {col[bad].iloc[0]!r})"
            )
        ok = np.isfinite(y)
        n_ok = int(ok.sum())
        if n_ok < MIN_ROWS:
            raise ConfigError(
                f"{source}: metric {name!r} is known for only {n_ok} of {len(t)} points; a "
                f"surrogate needs at least {MIN_ROWS} (run more points or drop the target)"
            )
        out[name] = TargetData(
            name=name, X=X[ok], y=y[ok],
            point_ids=tuple(i for i, k in zip(ids, ok, strict=True) if k),
            n_dropped=int((~ok).sum()), X_null=X[~ok],
        )
        if (~ok).any():
            logger.info("%s: %s null for %d of %d points; those rows are dropped",
                        source, name, int((~ok).sum()), len(t))
    ds = Dataset(features=specs, targets=out, X=X, sha256=training_sha256(t, specs, targets),
                 n_rows=len(t))
    ds.notes.extend(ds.summary())
    return ds
