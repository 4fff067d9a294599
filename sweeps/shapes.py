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
