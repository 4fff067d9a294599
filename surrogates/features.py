"""Feature specifications and the map between config values and the unit cube.

A surrogate sees each study parameter through a :class:`FeatureSpec`: its dotted config name
(``antenna.width_mm``), its range or its list of values, and whether it is log-scaled. Values
are kept in config units (mm, MHz, S/m, ohm, nH, pF) at this edge; inside, every model works on
the unit cube:

* a range parameter becomes one column ``u = (t(x) - t(min)) / (t(max) - t(min))`` with
  ``t = log10`` where the spec says ``log`` and the identity otherwise;
* a numeric choice (``[values]``) becomes one column scaled the same way over the span of its
  values (so a model can interpolate between levels, which a query flags);
* a non-numeric choice (a preset name) becomes one 0/1 column per level (one-hot).

This module does not import :mod:`studies`; :meth:`FeatureSpec.from_parameter` reads any object
with the attributes of the study config's parameter spec (``name``, ``min``, ``max``, ``log``,
``values``).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from sweeps.errors import ConfigError

__all__ = [
    "FeatureKind",
    "FeatureSpec",
    "unit_of",
    "n_columns",
    "encode",
    "decode",
    "range_warnings",
    "discrete_levels",
    "as_feature_specs",
]

FeatureKind = Literal["range", "levels", "category"]

#: Name suffix -> unit shown in tables and messages (the config convention: unit in the name).
_UNIT_SUFFIXES: tuple[tuple[str, str], ...] = (
    ("_s_per_m", "S/m"),
    ("_mm", "mm"),
    ("_mhz", "MHz"),
    ("_ohm", "ohm"),
    ("_nh", "nH"),
    ("_pf", "pF"),
    ("_dbi", "dBi"),
    ("_dbsm", "dBsm"),
    ("_dbm", "dBm"),
    ("_db", "dB"),
    ("_m", "m"),
)


def unit_of(name: str) -> str:
    """Unit of a config key or metric from its name suffix (``"antenna.width_mm"`` -> ``"mm"``).

    Returns ``""`` for dimensionless names (``efficiency``, ``turns``).
    """
    leaf = name.rsplit(".", 1)[-1]
    for suffix, unit in _UNIT_SUFFIXES:
        if leaf.endswith(suffix):
            return unit
    return ""


def _level_key(v: Any) -> str:
    """Comparable text of a choice level: numbers by their float value (30000 == 3e4)."""
    if _is_number(v):
        return repr(float(v))
    return str(v)


def _is_number(v: Any) -> bool:
    return isinstance(v, int | float | np.integer | np.floating) and not isinstance(v, bool)


@dataclass(frozen=True)
class FeatureSpec:
    """One study parameter as a surrogate feature.

    Parameters
    ----------
    name : str
        Full dotted config path, e.g. ``"antenna.conductivity_s_per_m"``.
    min, max : float, optional
        Range in config units (for a range parameter).
    log : bool
        Scale by ``log10`` (range or numeric levels; needs positive values).
    values : tuple, optional
        The allowed values of a choice parameter (numbers, or strings for presets).
    unit : str, optional
        Unit for display; by default from the name suffix (:func:`unit_of`).
    """

    name: str
    min: float | None = None
    max: float | None = None
    log: bool = False
    values: tuple[float | str, ...] | None = None
    unit: str | None = None

    def __post_init__(self) -> None:
        if not self.name or not isinstance(self.name, str):
            raise ConfigError(f"surrogate feature: a name is required (got {self.name!r})")
        if self.unit is None:
            object.__setattr__(self, "unit", unit_of(self.name))
        if self.values is not None:
            vals = tuple(self.values)
            if len(vals) < 2 or len(set(vals)) != len(vals):
                raise ConfigError(
                    f"space.{self.name}: a surrogate feature needs at least two distinct "
                    f"values (got {list(vals)})"
                )
            if all(_is_number(v) for v in vals):
                vals = tuple(float(v) for v in vals)
                if not all(math.isfinite(v) for v in vals):
                    raise ConfigError(f"space.{self.name}: values must be finite (got {vals})")
                if self.log and min(vals) <= 0:
                    raise ConfigError(
                        f"space.{self.name}: log scaling needs positive values (got {list(vals)})"
                    )
                object.__setattr__(self, "min", min(vals))
                object.__setattr__(self, "max", max(vals))
            else:
                vals = tuple(v if isinstance(v, str) else float(v) for v in vals)
                if len({_level_key(v) for v in vals}) != len(vals):
                    raise ConfigError(f"space.{self.name}: values repeat (got {list(vals)})")
                if self.log:
                    raise ConfigError(
                        f"space.{self.name}: log scaling needs numeric values (got {list(vals)})"
                    )
            object.__setattr__(self, "values", vals)
            return
        if self.min is None or self.max is None:
            raise ConfigError(
                f"space.{self.name}: a range feature needs min and max (got min={self.min}, "
                f"max={self.max})"
            )
        lo, hi = float(self.min), float(self.max)
        if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
            raise ConfigError(
                f"space.{self.name}: min < max must hold, both finite (got min={lo:g}, "
                f"max={hi:g})"
            )
        if self.log and lo <= 0:
            raise ConfigError(f"space.{self.name}: log scaling needs min > 0 (got min={lo:g})")
        object.__setattr__(self, "min", lo)
        object.__setattr__(self, "max", hi)

    @classmethod
    def from_parameter(cls, parameter: Any) -> FeatureSpec:
        """Build from a study parameter spec (duck-typed: ``name, min, max, log, values``)."""
        values = getattr(parameter, "values", None)
        return cls(
            name=str(parameter.name),
            min=None if values else getattr(parameter, "min", None),
            max=None if values else getattr(parameter, "max", None),
            log=bool(getattr(parameter, "log", False) or False),
            values=tuple(values) if values else None,
        )

    @property
    def kind(self) -> FeatureKind:
        """``"range"``, ``"levels"`` (numeric choice) or ``"category"`` (named choice)."""
        if self.values is None:
            return "range"
        return "levels" if all(_is_number(v) for v in self.values) else "category"

    @property
    def discrete(self) -> bool:
        """True for choice features (sampled and solved at their listed values only)."""
        return self.values is not None

    @property
    def n_columns(self) -> int:
        """Number of model input columns this feature takes."""
        return len(self.values) if self.kind == "category" else 1  # type: ignore[arg-type]

    def _t(self, x: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.log10(x) if self.log else x

    def to_unit(self, x: NDArray[np.float64]) -> NDArray[np.float64]:
        """Map config-unit values of a numeric feature to unit-cube coordinates."""
        lo, hi = self._t(np.float64(self.min)), self._t(np.float64(self.max))
        return (self._t(x) - lo) / (hi - lo)

    def from_unit(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        """Map unit-cube coordinates of a numeric feature back to config units."""
        lo, hi = self._t(np.float64(self.min)), self._t(np.float64(self.max))
        t = lo + np.asarray(u, dtype=float) * (hi - lo)
        return 10.0**t if self.log else t

    def describe_range(self) -> str:
        """Human-readable range, e.g. ``"0.5-4 mm"`` or ``"one of 20, 50 ohm"``."""
        unit = f" {self.unit}" if self.unit else ""
        if self.values is not None:
            return "one of " + ", ".join(f"{v:g}" if _is_number(v) else str(v)
                                         for v in self.values) + unit
        return f"{self.min:g}-{self.max:g}{unit}" + (" (log)" if self.log else "")

    def to_json(self) -> dict[str, Any]:
        """Plain-JSON form (for the surrogate file's manifest)."""
        return {"name": self.name, "min": self.min, "max": self.max, "log": self.log,
                "values": list(self.values) if self.values is not None else None,
                "unit": self.unit}

    @classmethod
    def from_json(cls, data: Mapping[str, Any]) -> FeatureSpec:
        """Inverse of :meth:`to_json`."""
        values = data.get("values")
        return cls(name=data["name"], min=None if values else data.get("min"),
                   max=None if values else data.get("max"), log=bool(data.get("log", False)),
                   values=tuple(values) if values else None, unit=data.get("unit"))


def n_columns(features: Sequence[FeatureSpec]) -> int:
    """Total number of model input columns for ``features``."""
    return sum(f.n_columns for f in features)


def _column(values: Any, n: int | None) -> NDArray:
    arr = np.asarray(values.to_numpy() if isinstance(values, pd.Series) else values, dtype=object)
    if arr.ndim == 0:
        arr = arr.reshape(1)
        if n is not None and n > 1:
            arr = np.repeat(arr, n)
    return arr


def encode(
    features: Sequence[FeatureSpec],
    values: pd.DataFrame | Mapping[str, Any],
    *,
    source: str = "query",
) -> NDArray[np.float64]:
    """Map parameter values in config units to model inputs on the unit cube.

    Parameters
    ----------
    features : sequence of FeatureSpec
    values : DataFrame or mapping
        One column (or scalar/array entry) per feature name, in config units.
    source : str
        What the values are, for error messages (``"study table"``, ``"--set"``).

    Returns
    -------
    ndarray, shape (n, n_columns(features))
        Values outside a range are mapped outside ``[0, 1]`` (callers flag them,
        :func:`range_warnings`); unknown category levels raise.

    Raises
    ------
    ConfigError
        A feature is missing, a value is not numeric, a log feature is not positive, or a
        category level is unknown.
    """
    n: int | None = len(values) if isinstance(values, pd.DataFrame) else None
    if n is None:
        lens = [np.size(values[f.name]) for f in features if f.name in values]
        n = max(lens) if lens else 1
    cols: list[NDArray[np.float64]] = []
    for f in features:
        if f.name not in values:
            raise ConfigError(f"{source}: no value for surrogate feature {f.name!r}")
        raw = _column(values[f.name], n)
        if len(raw) != n:
            raise ConfigError(f"{source}: {f.name!r} has {len(raw)} values, expected {n}")
        if f.kind == "category":
            levels = [_level_key(v) for v in f.values]  # type: ignore[union-attr]
            onehot = np.zeros((n, len(levels)))
            for i, v in enumerate(raw):
                try:
                    onehot[i, levels.index(_level_key(v))] = 1.0
                except ValueError:
                    raise ConfigError(
                        f"{source}: {f.name}={v!r} is not one of the studied values "
                        f"{list(f.values)}; the surrogate cannot answer for it"
                    ) from None
            cols.append(onehot)
            continue
        try:
            x = raw.astype(float)
        except (TypeError, ValueError):
            bad = next(v for v in raw if not _is_number(v))
            raise ConfigError(f"{source}: {f.name} must be a number (got {bad!r})") from None
        if not np.all(np.isfinite(x)):
            raise ConfigError(f"{source}: {f.name} must be finite (got {x[~np.isfinite(x)][0]})")
        if f.log and np.any(x <= 0):
            raise ConfigError(
                f"{source}: {f.name} is log-scaled and must be > 0 (got {x[x <= 0][0]:g})"
            )
        cols.append(f.to_unit(x)[:, None])
    return np.hstack(cols) if cols else np.zeros((n, 0))


def decode(features: Sequence[FeatureSpec], u: NDArray[np.float64]) -> dict[str, NDArray]:
    """Map model inputs (unit cube) back to config values, one array per feature name.

    Category columns are decoded by their largest entry; numeric levels are returned as the
    value the column encodes (not snapped).
    """
    u = np.atleast_2d(np.asarray(u, dtype=float))
    out: dict[str, NDArray] = {}
    j = 0
    for f in features:
        if f.kind == "category":
            block = u[:, j:j + f.n_columns]
            out[f.name] = np.asarray(f.values, dtype=object)[np.argmax(block, axis=1)]
        else:
            out[f.name] = f.from_unit(u[:, j])
        j += f.n_columns
    return out


def discrete_levels(feature: FeatureSpec) -> NDArray[np.float64]:
    """Unit-cube encodings of a choice feature's levels, shape (levels, n_columns)."""
    if feature.kind == "category":
        return np.eye(feature.n_columns)
    if feature.kind == "levels":
        return feature.to_unit(np.asarray(feature.values, dtype=float))[:, None]
    raise ConfigError(f"{feature.name} is a range feature, it has no discrete levels")


def range_warnings(
    features: Sequence[FeatureSpec], values: Mapping[str, Any], *, row: int | None = None
) -> list[str]:
    """Warnings for values outside the trained range or between studied levels.

    Parameters
    ----------
    features : sequence of FeatureSpec
    values : mapping
        Feature name -> scalar value in config units.
    row : int, optional
        Row number to mention in the message (for batch queries).

    Returns
    -------
    list of str
        One message per offending value; the answer is then an extrapolation.
    """
    where = f"row {row}: " if row is not None else ""
    msgs: list[str] = []
    for f in features:
        if f.name not in values or f.kind == "category":
            continue
        v = float(values[f.name])
        unit = f" {f.unit}" if f.unit else ""
        tol = 1e-9 * max(abs(f.max), abs(f.min), 1e-300)  # type: ignore[arg-type]
        if v < f.min - tol or v > f.max + tol:  # type: ignore[operator]
            msgs.append(
                f"{where}{f.name}={v:g}{unit} is outside the trained range "
                f"{f.describe_range()}: EXTRAPOLATED, do not rely on this answer"
            )
        elif f.kind == "levels" and not np.any(
            np.isclose(v, np.asarray(f.values, dtype=float), rtol=1e-9, atol=0.0)
        ):
            msgs.append(
                f"{where}{f.name}={v:g}{unit} lies between the studied values "
                f"({f.describe_range()}): interpolated"
            )
    return msgs


def as_feature_specs(items: Iterable[Any]) -> tuple[FeatureSpec, ...]:
    """Feature specs from specs or study parameter specs (duck-typed), in order."""
    out = []
    for it in items:
        out.append(it if isinstance(it, FeatureSpec) else FeatureSpec.from_parameter(it))
    names = [f.name for f in out]
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise ConfigError(f"surrogate features: duplicate names {sorted(dup)}")
    return tuple(out)

