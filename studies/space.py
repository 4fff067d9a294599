"""The parameter space of a study: what may vary, over which range, on which scale.

A study's ``[space]`` section names config keys by their full dotted path
(``antenna.length_mm``) and gives each either a range ``{min, max, log?, steps?}`` or a list of
values. :class:`Parameter` holds one of them in the units of its name (mm, MHz, ohm... exactly as
written in the config); :class:`Space` maps points of the unit hypercube ``[0, 1)^d`` to
parameter values, which is all a sampler needs (:mod:`studies.samplers`).

Mapping rules
-------------
- Linear range: ``v = min + u (max - min)``.
- Log range (``log = true``, needs ``min > 0``): ``v = min (max / min)^u``, so equal steps in
  ``u`` are equal ratios in ``v``.
- Integer range: ``u`` spreads uniformly over the integers ``min ... max`` (each gets an equal
  share of the unit interval; on a log range, an equal share of ``log v``).
- Choice: ``u`` picks ``values[floor(u n)]``, each value an equal share.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any, Literal, get_args

import numpy as np
from numpy.typing import NDArray

from sweeps.errors import ConfigError

__all__ = ["ParameterKind", "Parameter", "Space", "Value"]

ParameterKind = Literal["range", "choice"]

#: A parameter value as stored in a plan: a number or a choice label.
Value = float | int | str | bool


def _plain(value: Any) -> Value:
    """A numpy scalar or Python value as a plain JSON-able Python value."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool | int | float | str):
        return value
    raise ConfigError(f"space: value {value!r} must be a number, a string or a boolean")


@dataclass(frozen=True)
class Parameter:
    """One varied config key.

    Parameters
    ----------
    name : str
        Full dotted config path with its unit, e.g. ``"antenna.length_mm"``.
    kind : {"range", "choice"}
    min, max : float, optional
        Bounds of a range, in the unit of ``name`` (inclusive).
    log : bool
        Sample a range on a logarithmic scale (needs ``min > 0``).
    steps : int, optional
        Number of grid values of a range (grid sampler only).
    values : tuple
        The values of a choice, in config units.
    integer : bool
        The key takes whole numbers (``antenna.segments``, ``antenna.turns``).
    """

    name: str
    kind: ParameterKind
    min: float | None = None
    max: float | None = None
    log: bool = False
    steps: int | None = None
    values: tuple[Value, ...] = field(default_factory=tuple)
    integer: bool = False

    def __post_init__(self) -> None:
        where = f"space.{self.name}"
        if self.kind not in get_args(ParameterKind):
            raise ConfigError(f"{where}: kind must be one of {get_args(ParameterKind)} "
                              f"(got {self.kind!r})")
        if self.kind == "choice":
            vals = tuple(_plain(v) for v in self.values)
            if not vals:
                raise ConfigError(f"{where}: a list of values must not be empty")
            if len(set(vals)) != len(vals):
                raise ConfigError(f"{where}: the list of values repeats a value (got {vals!r})")
            object.__setattr__(self, "values", vals)
            return
        if self.min is None or self.max is None:
            raise ConfigError(f"{where}: a range needs both min and max")
        lo, hi = float(self.min), float(self.max)
        if not (math.isfinite(lo) and math.isfinite(hi)):
            raise ConfigError(f"{where}: min and max must be finite (got {lo!r}, {hi!r})")
        if not lo <= hi:
            raise ConfigError(f"{where}: min <= max must hold (got min={lo:g}, max={hi:g})")
        if self.log and not lo > 0:
            raise ConfigError(f"{where}: a log range needs min > 0 (got min={lo:g})")
        if self.integer and (lo != round(lo) or hi != round(hi)):
            raise ConfigError(f"{where}: an integer range needs whole-number bounds "
                              f"(got {lo:g}..{hi:g})")
        if self.steps is not None:
            if int(self.steps) != self.steps or self.steps < 1:
                raise ConfigError(f"{where}: steps must be a whole number >= 1 "
                                  f"(got {self.steps!r})")
            if self.steps == 1 and lo != hi:
                raise ConfigError(f"{where}: steps = 1 needs min == max (got {lo:g}..{hi:g})")
        object.__setattr__(self, "min", int(lo) if self.integer else lo)
        object.__setattr__(self, "max", int(hi) if self.integer else hi)

    @classmethod
    def from_spec(cls, spec: Any) -> Parameter:
        """Build from any object with the attributes of a config ``ParameterSpec``.

        Attributes read: ``name``, ``kind``, ``min``, ``max``, ``log``, ``steps``, ``values``,
        ``integer`` (missing ones take their defaults).
        """
        if isinstance(spec, Parameter):
            return spec
        get = spec.get if isinstance(spec, Mapping) else lambda k, d=None: getattr(spec, k, d)
        values = get("values") or ()
        return cls(
            name=str(get("name")),
            kind=get("kind") or ("choice" if values else "range"),
            min=get("min"),
            max=get("max"),
            log=bool(get("log", False)),
            steps=get("steps"),
            values=tuple(values),
            integer=bool(get("integer", False)),
        )

    def from_unit(self, u: NDArray[np.float64]) -> list[Value]:
        """Map unit-interval samples ``u`` (shape (n,), values in [0, 1)) to parameter values."""
        u = np.clip(np.asarray(u, dtype=float), 0.0, np.nextafter(1.0, 0.0))
        if self.kind == "choice":
            idx = np.minimum((u * len(self.values)).astype(int), len(self.values) - 1)
            return [self.values[i] for i in idx]
        assert self.min is not None and self.max is not None
        lo, hi = float(self.min), float(self.max)
        if self.integer:
            if self.log:
                a, b = math.log(lo - 0.5), math.log(hi + 0.5)  # lo >= 1 here
                v = np.exp(a + u * (b - a))
            else:
                v = (lo - 0.5) + u * (hi - lo + 1.0)
            return [int(x) for x in np.clip(np.floor(v + 0.5), lo, hi)]
        if self.log:
            v = lo * np.exp(u * math.log(hi / lo))
        else:
            v = lo + u * (hi - lo)
        return [float(x) for x in np.clip(v, lo, hi)]

    def grid_values(self) -> tuple[Value, ...]:
        """The values of this parameter on a grid (``steps`` of a range, or the choice list)."""
        if self.kind == "choice":
            return self.values
        assert self.min is not None and self.max is not None
        if self.steps is None:
            raise ConfigError(
                f"space.{self.name}: the grid sampler needs steps for a range "
                f"(e.g. {{min = {self.min:g}, max = {self.max:g}, steps = 5}}) or a list of values"
            )
        lo, hi, n = float(self.min), float(self.max), int(self.steps)
        v = np.geomspace(lo, hi, n) if self.log else np.linspace(lo, hi, n)
        if self.integer:
            return tuple(dict.fromkeys(int(x) for x in np.round(v)))
        return tuple(float(x) for x in v)

    def contains(self, value: Value) -> bool:
        """Whether ``value`` is a legal value of this parameter."""
        if self.kind == "choice":
            return value in self.values
        if isinstance(value, bool) or not isinstance(value, int | float):
            return False
        if self.integer and value != round(value):
            return False
        assert self.min is not None and self.max is not None
        return bool(self.min <= value <= self.max)

    def describe(self) -> str:
        """Short human description, e.g. ``"100..200 (log)"`` or ``"one of 'pla', 'petg'"``."""
        if self.kind == "choice":
            return "one of " + ", ".join(repr(v) for v in self.values)
        scale = " (log)" if self.log else ""
        return f"{self.min:g}..{self.max:g}{scale}"


@dataclass(frozen=True)
class Space:
    """An ordered set of parameters; dimension ``d`` of the unit hypercube is ``parameters[d]``.

    The order is the config's order, so the same config always gives the same plan.
    """

    parameters: tuple[Parameter, ...]

    def __post_init__(self) -> None:
        names = [p.name for p in self.parameters]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise ConfigError(f"space: parameter(s) given twice: {', '.join(dup)}")

    @classmethod
    def from_specs(cls, specs: Iterable[Any]) -> Space:
        """Build from config ``ParameterSpec`` objects (or :class:`Parameter`, or mappings)."""
        return cls(tuple(Parameter.from_spec(s) for s in specs))

    @property
    def names(self) -> list[str]:
        return [p.name for p in self.parameters]

    @property
    def dim(self) -> int:
        return len(self.parameters)

    def __getitem__(self, name: str) -> Parameter:
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(name)

    def from_unit(self, u: NDArray[np.float64]) -> list[dict[str, Value]]:
        """Map samples ``u`` of shape (n, d) in [0, 1) to ``n`` parameter dicts."""
        u = np.asarray(u, dtype=float)
        if u.ndim != 2 or u.shape[1] != self.dim:
            raise ValueError(f"expected samples of shape (n, {self.dim}), got {u.shape}")
        cols = [p.from_unit(u[:, j]) for j, p in enumerate(self.parameters)]
        return [dict(zip(self.names, row, strict=True)) for row in zip(*cols, strict=True)] \
            if cols else [{} for _ in range(u.shape[0])]

    def validate(self, params: Mapping[str, Any], where: str = "point") -> dict[str, Value]:
        """Check a parameter dict against the space; return it with plain values.

        Raises
        ------
        ConfigError
            Naming ``where``, the parameter and the legal range when a value is missing, unknown
            or out of range.
        """
        missing = [n for n in self.names if n not in params]
        if missing:
            raise ConfigError(f"{where}: missing parameter(s) {', '.join(missing)}")
        unknown = [n for n in params if n not in self.names]
        if unknown:
            raise ConfigError(f"{where}: {', '.join(unknown)} not in the study's [space] "
                              f"(which has {', '.join(self.names) or 'no parameters'})")
        out: dict[str, Value] = {}
        for p in self.parameters:
            v = _plain(params[p.name])
            if not p.contains(v):
                raise ConfigError(f"{where}: {p.name} = {v!r} is outside the study's space "
                                  f"({p.describe()})")
            out[p.name] = v
        return out

