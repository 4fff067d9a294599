"""Planned points and their stable ids.

A point id is the first 16 hex digits (64 bits) of the SHA-256 of a canonical JSON document
holding the point's parameter values, the solver settings fingerprint (which includes
``SOLVER_VERSION``) and the plan fingerprint of the study's base config. The same parameters
under the same config and solver always give the same id, on any machine; any change to the
base design, the band or the solver gives new ids, so results of different physics never mix.

Canonical values: floats are rounded to 12 significant digits (``repr`` of the rounded value)
so that a value read back from TOML, JSON or a CSV file maps to the same id; ``-0.0`` becomes
``0.0``; integers, strings and booleans are kept as they are; keys are sorted.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

__all__ = ["Point", "PointSource", "Record", "canonical_value", "canonical_params", "point_id",
           "canonical_json"]

PointSource = Literal["solver", "touchstone", "optimize"]

#: Length of a point id in hex digits.
ID_HEX = 16


def canonical_value(value: Any) -> Any:
    """A parameter value in canonical form (see the module docstring)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool | str) or value is None:
        return value
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"parameter values must be finite (got {value!r})")
        v = float(f"{value:.12g}")
        return 0.0 if v == 0 else v
    if isinstance(value, Mapping):
        return {str(k): canonical_value(v) for k, v in sorted(value.items())}
    if isinstance(value, list | tuple):
        return [canonical_value(v) for v in value]
    raise TypeError(f"cannot canonicalise {type(value).__name__} value {value!r}")


def canonical_params(params: Mapping[str, Any]) -> dict[str, Any]:
    """Parameters with canonical values and sorted keys."""
    return {str(k): canonical_value(params[k]) for k in sorted(params)}


def canonical_json(obj: Any) -> str:
    """Compact, key-sorted JSON of ``obj`` (after :func:`canonical_value`)."""
    return json.dumps(canonical_value(obj), sort_keys=True, separators=(",", ":"),
                      ensure_ascii=True, allow_nan=False)


def point_id(params: Mapping[str, Any], solver_fingerprint: Mapping[str, Any],
             plan_fingerprint: str, *, extra: Mapping[str, Any] | None = None) -> str:
    """Stable id of a point.

    Parameters
    ----------
    params : mapping
        ``{dotted parameter name: value}`` in config units.
    solver_fingerprint : mapping
        ``SolverSettings.fingerprint()`` (includes the solver version).
    plan_fingerprint : str
        The study's plan fingerprint (``Study.plan_fingerprint()``).
    extra : mapping, optional
        Anything else that identifies the result (an imported file's SHA-256, for example).

    Returns
    -------
    str
        16 lower-case hex digits.
    """
    doc = {"params": canonical_params(params), "solver": dict(solver_fingerprint),
           "plan": plan_fingerprint}
    if extra:
        doc["extra"] = dict(extra)
    return hashlib.sha256(canonical_json(doc).encode("ascii")).hexdigest()[:ID_HEX]


@dataclass(frozen=True)
class Point:
    """One point of a study.

    Attributes
    ----------
    point_id : str
    params : dict
        ``{dotted parameter name: value}`` in config units.
    seq : int
        Position in the plan (for stable ordering of tables and work).
    source : {"solver", "touchstone", "optimize"}
    """

    point_id: str
    params: dict[str, Any] = field(default_factory=dict)
    seq: int = 0
    source: PointSource = "solver"


@dataclass
class Record:
    """The outcome of evaluating one point (built on a worker, stored by the client).

    Attributes
    ----------
    point_id : str
    ok : bool
        ``False`` if the evaluation raised; ``reason`` says why.
    metrics : dict
        ``{metric name: value or None}``.
    reasons : dict
        ``{metric name: why it is None}``.
    f_hz : ndarray, shape (F,)
        Frequencies in Hz.
    z : ndarray, shape (F, P, P)
        Port impedance matrix in ohm.
    z0_ohm : ndarray, shape (P,)
        Reference impedance of each port in ohm.
    reason : str
        Failure reason (empty when ``ok``).
    elapsed_s : float
        Wall time of the evaluation in s.
    worker : str
        ``host:pid`` of the process that evaluated it.
    """

    point_id: str
    ok: bool
    metrics: dict[str, float | None] = field(default_factory=dict)
    reasons: dict[str, str] = field(default_factory=dict)
    f_hz: NDArray[np.float64] | None = None
    z: NDArray[np.complex128] | None = None
    z0_ohm: NDArray[np.float64] | None = None
    reason: str = ""
    elapsed_s: float = 0.0
    worker: str = ""

    def __post_init__(self) -> None:
        if self.ok and (self.f_hz is None or self.z is None or self.z0_ohm is None):
            raise ValueError(f"record {self.point_id}: a successful record needs f_hz, z, z0_ohm")
