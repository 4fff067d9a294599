"""Parsing the small value languages of the query verbs: ranges, goals and tolerances.

Nothing here is evaluated as code: each form is matched by a fixed pattern.

* range ``lo:hi`` (either side may be empty: ``900:`` is "at least 900");
* goal ``max`` or ``min``;
* tolerance ``±value`` / ``+-value`` (absolute, config units) or ``±value%`` (of the nominal),
  optionally followed by ``,normal`` or ``,uniform``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal, get_args

from sweeps.errors import ConfigError

__all__ = ["Goal", "Distribution", "Tolerance", "parse_range", "parse_goal", "parse_tolerance",
           "parse_assignments"]

Goal = Literal["max", "min"]
Distribution = Literal["normal", "uniform"]

_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_TOL = re.compile(rf"^\s*(?:±|\+-|\+/-)?\s*({_NUM})\s*(%?)\s*(?:,\s*(\w+))?\s*$")


def _number(text: str, where: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise ConfigError(f"{where}: {text!r} is not a number") from None
    if not math.isfinite(v):
        raise ConfigError(f"{where}: {text!r} must be finite")
    return v


def parse_range(text: str, where: str = "--spec") -> tuple[float, float]:
    """``"lo:hi"`` -> ``(lo, hi)``; an empty side is unbounded (``-inf`` / ``inf``)."""
    if text.count(":") != 1:
        raise ConfigError(f"{where}: expected lo:hi (e.g. 900:930 or 0.5:), got {text!r}")
    a, b = (s.strip() for s in text.split(":"))
    lo = _number(a, where) if a else -math.inf
    hi = _number(b, where) if b else math.inf
    if not a and not b:
        raise ConfigError(f"{where}: give at least one bound (got {text!r})")
    if lo > hi:
        raise ConfigError(f"{where}: lo <= hi must hold (got {text!r})")
    return lo, hi


def parse_goal(text: str, where: str = "--objective") -> Goal:
    """``"max"`` or ``"min"``."""
    g = text.strip().lower()
    if g not in get_args(Goal):
        raise ConfigError(f"{where}: goal must be max or min (got {text!r})")
    return g  # type: ignore[return-value]


@dataclass(frozen=True)
class Tolerance:
    """A manufacturing tolerance on one parameter.

    Parameters
    ----------
    name : str
        Dotted config key.
    value : float
        The ``±`` half-width: config units, or percent of the nominal if ``percent``.
    percent : bool
    distribution : {"normal", "uniform"}
        ``normal``: the ``±`` value is three standard deviations (about 99.7 % of prints
        inside; common practice for process tolerances), not truncated. ``uniform``: every
        value within ``±`` equally likely.
    """

    name: str
    value: float
    percent: bool = False
    distribution: Distribution = "normal"

    def __post_init__(self) -> None:
        if not (self.value >= 0 and math.isfinite(self.value)):
            raise ConfigError(f"--tolerance {self.name}: must be >= 0 (got {self.value:g})")
        if self.distribution not in get_args(Distribution):
            raise ConfigError(
                f"--tolerance {self.name}: distribution must be normal or uniform "
                f"(got {self.distribution!r})"
            )

    def half_width(self, nominal: float) -> float:
        """The ``±`` half-width in config units around ``nominal``."""
        return abs(nominal) * self.value / 100.0 if self.percent else self.value


def parse_tolerance(name: str, text: str, default: Distribution = "normal") -> Tolerance:
    """Parse ``"±0.1"``, ``"+-5%"``, ``"0.2,uniform"`` into a :class:`Tolerance`."""
    m = _TOL.match(text)
    if not m:
        raise ConfigError(
            f"--tolerance {name}: expected ±value or ±percent% (optionally ,normal or "
            f",uniform), got {text!r}"
        )
    dist = (m.group(3) or default).lower()
    return Tolerance(name=name, value=abs(float(m.group(1))), percent=bool(m.group(2)),
                     distribution=dist)  # type: ignore[arg-type]


def parse_assignments(items: Iterable[str], flag: str) -> dict[str, str]:
    """``["a.b=1", ...]`` -> ``{"a.b": "1"}``; each item must be ``key=value``, keys unique."""
    out: dict[str, str] = {}
    for it in items:
        if "=" not in it:
            raise ConfigError(f"{flag}: expected key=value, got {it!r}")
        k, v = it.split("=", 1)
        k, v = k.strip(), v.strip()
        if not k or not v:
            raise ConfigError(f"{flag}: expected key=value, got {it!r}")
        if k in out:
            raise ConfigError(f"{flag}: {k} given twice")
        out[k] = v
    return out
