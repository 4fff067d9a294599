"""Parametric builders: a :class:`~sweeps.design.Design` becomes a wire :class:`Structure`.

Every printed shape lies in the ``z = 0`` plane (the print bed) with its main axis along ``x``;
broadside is ``+z``. The feed (switch) gap is the structure's only port. Each builder checks its
own parameters and names the offending config key in its error.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from sweeps.design import Design
from sweeps.errors import ConfigError
from sweeps.geometry import Port, Structure, Wire

__all__ = ["build_structure", "BUILDERS", "register_shape"]

Builder = Callable[[Design], Structure]
BUILDERS: dict[str, Builder] = {}


def register_shape(name: str) -> Callable[[Builder], Builder]:
    """Decorator registering a builder under a shape name (see DEVELOPERS.md, "Add a shape")."""

    def deco(fn: Builder) -> Builder:
        BUILDERS[name] = fn
        return fn

    return deco


def _need(design: Design, key: str, config_key: str) -> float:
    try:
        value = float(design.dimensions[key])
    except KeyError:
        raise ConfigError(f"antenna.{config_key}: required for shape {design.shape!r}") from None
    if not (value > 0 and np.isfinite(value)):
        raise ConfigError(f"antenna.{config_key}: must be > 0 (got {value:g})")
    return value


def _check_feed(design: Design, half_length_m: float, config_key: str = "feed_offset_mm") -> None:
    if abs(design.feed_offset_m) + 0.5 * design.gap_m >= half_length_m:
        raise ConfigError(
            f"feed.{config_key}: the gap at {design.feed_offset_m * 1e3:g} mm from the centre "
            f"does not fit on the {2 * half_length_m * 1e3:g} mm antenna"
        )


@register_shape("dipole")
def dipole(design: Design) -> Structure:
    """Straight printed dipole of ``length_m`` along x, fed at ``feed_offset_m`` from its centre."""
    length = _need(design, "length_m", "length_mm")
    half = 0.5 * length
    _check_feed(design, half)
    wire = Wire(
        np.array([[-half, 0.0, 0.0], [half, 0.0, 0.0]]),
        design.section,
        design.conductivity_s_per_m,
        segments=design.segments,
        name="antenna",
    )
    port = Port([design.feed_offset_m, 0.0, 0.0], gap_m=design.gap_m, name="feed")
    return Structure([wire], ports=[port])


def _check_clearance(design: Design, spacing_m: float, key: str) -> None:
    """Parallel runs ``spacing_m`` apart (axis to axis) must not touch: spacing > trace width."""
    size = design.section.width_m if design.section.kind == "rect" else 2 * design.section.radius_m
    if spacing_m <= size:
        what = "antenna.width_mm" if design.section.kind == "rect" else "2 x antenna.radius_mm"
        raise ConfigError(
            f"antenna.{key}: traces {spacing_m * 1e3:g} mm apart (axis to axis) would touch; "
            f"it must exceed {what} = {size * 1e3:g} mm"
        )


def meander_arm(half_length_m: float, turns: int, pitch_m: float, height_m: float
                ) -> np.ndarray:
    """Polyline of one meander arm from the feed (x = 0) to the tip (x = half_length_m).

    A straight lead runs from the feed to ``x0 = half_length - 2 turns pitch``; each turn then
    rises by ``height``, advances ``pitch``, falls back to ``y = 0`` and advances ``pitch``, so
    neighbouring vertical runs are ``pitch`` apart (axis to axis).
    """
    x0 = half_length_m - 2 * turns * pitch_m
    pts = [(0.0, 0.0), (x0, 0.0)]
    x = x0
    for _ in range(turns):
        pts += [(x, height_m), (x + pitch_m, height_m), (x + pitch_m, 0.0),
                (x + 2 * pitch_m, 0.0)]
        x += 2 * pitch_m
    arr = np.asarray(pts)
    return np.column_stack([arr, np.zeros(len(arr))])


@register_shape("meander")
def meander(design: Design) -> Structure:
    """Meander-line dipole: ``length_m`` end to end along x, ``turns`` per arm.

    Keys: ``length_m``, ``turns`` (per arm), ``pitch_m`` (axis-to-axis spacing of neighbouring
    vertical runs), ``height_m`` (rise of each meander in +y from the trace axis). The arms are
    mirror images through the y-axis; the feed gap sits at the centre.
    """
    length = _need(design, "length_m", "length_mm")
    pitch = _need(design, "pitch_m", "pitch_mm")
    height = _need(design, "height_m", "height_mm")
    turns_f = _need(design, "turns", "turns")
    turns = int(round(turns_f))
    if abs(turns - turns_f) > 1e-9 or turns < 1:
        raise ConfigError(f"antenna.turns: must be a whole number >= 1 (got {turns_f:g})")
    half = 0.5 * length
    _check_clearance(design, pitch, "pitch_mm")
    _check_clearance(design, height, "height_mm")
    lead = half - 2 * turns * pitch
    if design.feed_offset_m != 0.0:
        raise ConfigError("feed.feed_offset_mm: the meander is fed at its centre only")
    if lead <= 0.5 * design.gap_m + design.section.half_extent_m:
        raise ConfigError(
            f"antenna.turns, antenna.pitch_mm: {turns} turns of {pitch * 1e3:g} mm pitch need "
            f"{4 * turns * pitch * 1e3:g} mm of the {length * 1e3:g} mm length and leave no "
            "straight lead at the feed; use fewer turns, a smaller pitch or a longer antenna"
        )
    right = meander_arm(half, turns, pitch, height)
    left = right * np.array([-1.0, 1.0, 1.0])
    pts = np.vstack([left[::-1], right[1:]])
    wire = Wire(pts, design.section, design.conductivity_s_per_m, segments=design.segments,
                name="antenna")
    return Structure([wire], ports=[Port([0.0, 0.0, 0.0], gap_m=design.gap_m, name="feed")])


@register_shape("folded")
def folded(design: Design) -> Structure:
    """Folded dipole: two parallel traces of ``length_m`` ``spacing_m`` apart, joined at the ends.

    The feed gap sits on the lower trace (``y = 0``) at ``feed_offset_m`` from its centre.
    """
    length = _need(design, "length_m", "length_mm")
    spacing = _need(design, "spacing_m", "spacing_mm")
    _check_clearance(design, spacing, "spacing_mm")
    half = 0.5 * length
    _check_feed(design, half)
    pts = np.array([[-half, 0, 0], [half, 0, 0], [half, spacing, 0], [-half, spacing, 0],
                    [-half, 0, 0]], dtype=float)
    wire = Wire(pts, design.section, design.conductivity_s_per_m, segments=design.segments,
                name="antenna")
    port = Port([design.feed_offset_m, 0.0, 0.0], gap_m=design.gap_m, name="feed")
    return Structure([wire], ports=[port])


@register_shape("loop")
def loop(design: Design) -> Structure:
    """Loop of perimeter ``circumference_m``: a regular polygon of ``sides`` sides (default 24).

    The polygon lies in the ``z = 0`` plane centred on the origin; the feed gap sits at the
    middle of the side crossing the -y axis. Its own perimeter equals ``circumference_m`` (use
    the polygon's area, not the circle's, in small-loop formulas).
    """
    circ = _need(design, "circumference_m", "circumference_mm")
    sides = int(round(float(design.dimensions.get("sides", 24))))
    if sides < 3:
        raise ConfigError(f"antenna.sides: a loop needs at least 3 sides (got {sides})")
    side = circ / sides
    r = side / (2.0 * np.sin(np.pi / sides))  # circumradius
    ang = -0.5 * np.pi + np.pi / sides + 2.0 * np.pi * np.arange(sides + 1) / sides
    pts = np.column_stack([r * np.cos(ang), r * np.sin(ang), np.zeros(sides + 1)])
    # start at the feed, the midpoint of the side between the last and first vertex
    feed = 0.5 * (pts[0] + pts[-2])
    pts = np.vstack([feed, pts[:-1], feed])
    if design.section.half_extent_m * 4 >= r:
        raise ConfigError(
            f"antenna.circumference_mm: a {circ * 1e3:g} mm loop is too small for its trace"
        )
    if 0.5 * design.gap_m >= 0.5 * side:
        raise ConfigError("feed.gap_mm: the gap is longer than a side of the loop")
    wire = Wire(pts, design.section, design.conductivity_s_per_m, segments=design.segments,
                name="antenna")
    return Structure([wire], ports=[Port(feed, gap_m=design.gap_m, name="feed")])


@register_shape("wires")
def free_wires(design: Design) -> Structure:
    """Free polylines from the config, each with its own cross-section; fed at ``feed_point_m``."""
    if not design.wires:
        raise ConfigError("antenna.wires: shape 'wires' needs at least one wire")
    if design.feed_point_m is None:
        raise ConfigError("antenna.feed_point_mm: shape 'wires' needs a feed point")
    wires = [
        Wire(np.asarray(w.points, dtype=float), w.section, design.conductivity_s_per_m,
             name=f"wires[{i}]")
        for i, w in enumerate(design.wires)
    ]
    if design.segments is not None:
        total = sum(w.length_m for w in wires)
        wires = [
            Wire(w.points, w.section, w.conductivity_s_per_m,
                 segments=max(1, round(design.segments * w.length_m / total)), name=w.name)
            for w in wires
        ]
    port = Port(design.feed_point_m, gap_m=design.gap_m, name="feed")
    return Structure(wires, ports=[port])


def build_structure(design: Design) -> Structure:
    """Build the wire structure of ``design`` with the registered builder for its shape."""
    try:
        builder = BUILDERS[design.shape]
    except KeyError:
        raise ConfigError(
            f"antenna.shape: no builder for {design.shape!r}; available: "
            f"{', '.join(sorted(BUILDERS))}"
        ) from None
    return builder(design)
