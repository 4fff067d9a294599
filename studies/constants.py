"""Every string option of the configuration as a ``Literal`` alias, plus the metric names.

One place for the words a config may contain, validated with :func:`typing.get_args` (the habit
of scikit-rf's ``constants.py``). The metric names are the user-facing contract of DESIGN.md:
config keys, ``evaluate --json`` keys and study table columns.
"""

from __future__ import annotations

from typing import Literal, get_args

from sweeps.design import ShapeName
from sweeps.metrics import METRIC_NAMES as _SWEEPS_METRIC_NAMES

__all__ = [
    "ShapeName",
    "SamplerMethod",
    "OptimizeAlgorithm",
    "Goal",
    "JobqueueSystem",
    "SurrogateModel",
    "ParameterKind",
    "METRIC_NAMES",
    "SHAPE_NAMES",
    "SHAPE_KEYS",
    "SHAPE_SPECIFIC_KEYS",
    "INTEGER_KEYS",
    "VARIABLE_KEYS",
]

SamplerMethod = Literal["grid", "sobol", "lhs", "random", "optimize"]
OptimizeAlgorithm = Literal["tpe", "nsga2", "gp"]
Goal = Literal["max", "min"]
JobqueueSystem = Literal["slurm", "pbs", "sge", "lsf", "htcondor", "moab", "oar"]
SurrogateModel = Literal["auto", "gp", "boosting"]
ParameterKind = Literal["range", "choice"]

SHAPE_NAMES: tuple[str, ...] = get_args(ShapeName)

#: The metric names of DESIGN.md, in its order: the one list lives in :mod:`sweeps.metrics`.
METRIC_NAMES: tuple[str, ...] = _SWEEPS_METRIC_NAMES

#: Shape-specific ``[antenna]`` keys of each shape: (required, optional). A shape-specific key
#: that is not listed for the chosen shape is an error.
SHAPE_KEYS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "dipole": (("length_mm",), ()),
    "meander": (("length_mm", "turns", "pitch_mm", "height_mm"), ()),
    "folded": (("length_mm", "spacing_mm"), ()),
    "loop": (("circumference_mm",), ("sides",)),
    "wires": (("wires", "feed_point_mm"), ()),
}

#: Every key that belongs to some shape only.
SHAPE_SPECIFIC_KEYS: tuple[str, ...] = tuple(
    sorted({k for req, opt in SHAPE_KEYS.values() for k in (*req, *opt)})
)

#: Parameters that take whole numbers (canonical dotted names).
INTEGER_KEYS: frozenset[str] = frozenset({"antenna.turns", "antenna.sides", "antenna.segments"})

#: Keys a ``[space]`` entry may vary, by section (``switch.closed`` and ``switch.open`` are the
#: two switch states). ``antenna.shape``, ``antenna.wires`` and ``antenna.feed_point_mm`` are
#: structural and cannot be varied: run one study per shape.
VARIABLE_KEYS: dict[str, tuple[str, ...]] = {
    "antenna": (
        "length_mm",
        "width_mm",
        "thickness_mm",
        "radius_mm",
        "conductivity_s_per_m",
        "segments",
        "turns",
        "pitch_mm",
        "height_mm",
        "spacing_mm",
        "circumference_mm",
        "sides",
    ),
    "feed": ("gap_mm", "z0_ohm", "feed_offset_mm"),
    "switch.closed": ("r_ohm", "l_nh", "c_pf"),
    "switch.open": ("r_ohm", "l_nh", "c_pf"),
}
