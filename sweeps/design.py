"""The description of one tag design and its sweep band, in SI units.

These are plain frozen dataclasses: the configuration layer (:mod:`studies.config`) converts the
user's mm/MHz values into them, and :func:`sweeps.evaluate.evaluate` turns one into results. A
design evaluation is a pure function of ``(Design, Band, SolverSettings)``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Literal, get_args

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sweeps.errors import ConfigError
from sweeps.geometry import CrossSection

__all__ = ["ShapeName", "SwitchLoad", "SwitchStates", "Band", "Reader", "Design", "WireSpec"]

ShapeName = Literal["dipole", "meander", "folded", "loop", "wires"]


@dataclass(frozen=True)
class SwitchLoad:
    """One state of the switch: a series R-L-C across the feed gap.

    ``Z(f) = r_ohm + j omega l_h + 1/(j omega c_f)``; ``c_f = inf`` means no series capacitor.
    """

    r_ohm: float = 0.0
    l_h: float = 0.0
    c_f: float = math.inf

    def __post_init__(self) -> None:
        if self.r_ohm < 0 or self.l_h < 0 or not self.c_f > 0:
            raise ConfigError(
                f"switch load needs r >= 0, l >= 0, c > 0 (got r={self.r_ohm} ohm, "
                f"l={self.l_h} H, c={self.c_f} F)"
            )

    def impedance(self, f_hz: ArrayLike) -> NDArray[np.complex128]:
        """Series impedance in ohm at ``f_hz`` (Hz)."""
        w = 2.0 * np.pi * np.asarray(f_hz, dtype=float)
        z = self.r_ohm + 1j * w * self.l_h + 0j
        if math.isfinite(self.c_f):
            z = z + 1.0 / (1j * w * self.c_f)
        return z


@dataclass(frozen=True)
class SwitchStates:
    """The two loads the printed switch presents at the gap.

    Defaults (common practice for printed contacts, no published source): a closed printed
    contact of conductive filament has tens of ohms of contact resistance and a little series
    inductance (``20 ohm``, ``1 nH``); an open gap of a millimetre or so between trace ends is a
    small capacitance (``0.1 pF``) with a little series resistance. Measure your own.
    """

    closed: SwitchLoad = field(default_factory=lambda: SwitchLoad(r_ohm=20.0, l_h=1e-9))
    open: SwitchLoad = field(default_factory=lambda: SwitchLoad(r_ohm=1.0, c_f=0.1e-12))


@dataclass(frozen=True)
class Band:
    """A uniform frequency sweep and the target frequency where point metrics are reported."""

    start_hz: float
    stop_hz: float
    points: int
    target_hz: float

    def __post_init__(self) -> None:
        if not (0 < self.start_hz < self.stop_hz):
            raise ConfigError(
                f"band: need 0 < start < stop (got {self.start_hz / 1e6:g} MHz to "
                f"{self.stop_hz / 1e6:g} MHz)"
            )
        if self.points < 2:
            raise ConfigError(f"band: points must be >= 2 (got {self.points})")
        if not (self.start_hz <= self.target_hz <= self.stop_hz):
            raise ConfigError(
                f"band: target {self.target_hz / 1e6:g} MHz must lie within "
                f"{self.start_hz / 1e6:g}-{self.stop_hz / 1e6:g} MHz"
            )

    @property
    def f_hz(self) -> NDArray[np.float64]:
        """The sweep frequencies in Hz, shape (points,)."""
        return np.linspace(self.start_hz, self.stop_hz, self.points)


@dataclass(frozen=True)
class Reader:
    """The reader of a monostatic backscatter link (for ``read_range_m``).

    Parameters
    ----------
    tx_power_w : float
        Conducted transmit power in W.
    antenna_gain_dbi : float
        Reader antenna gain (transmit and receive, one antenna) in dBi.
    sensitivity_w : float
        Smallest detectable modulated backscatter power at the receiver in W.
    cancellation_db : float
        Self-interference (carrier) cancellation in dB; sets a second, carrier-limited floor.
    """

    tx_power_w: float = 1.0
    antenna_gain_dbi: float = 6.0
    sensitivity_w: float = 1e-11  # -80 dBm
    cancellation_db: float = 60.0


@dataclass(frozen=True)
class WireSpec:
    """A free polyline for ``shape = "wires"``: points in m and its own cross-section."""

    points: tuple[tuple[float, float, float], ...]
    section: CrossSection


@dataclass(frozen=True)
class Design:
    """One tag design (SI units).

    Parameters
    ----------
    shape : {"dipole", "meander", "folded", "loop", "wires"}
    dimensions : mapping
        Shape parameters in SI with the unit in the key (``length_m``, ``pitch_m``,
        ``spacing_m``, ``circumference_m``) or plain counts (``turns``).
    section : CrossSection
        Cross-section of the antenna trace.
    conductivity_s_per_m : float
        Conductivity in S/m; ``math.inf`` for a perfect conductor.
    gap_m : float
        Width of the feed/switch gap (0: delta gap).
    feed_offset_m : float
        Position of the gap along the antenna measured from its centre (0: centred).
    z0_ohm : float
        Reference impedance for S11 and Touchstone.
    switch : SwitchStates
    segments : int, optional
        Total segment count; by default the solver's rule.
    wires : tuple of WireSpec
        Polylines for ``shape = "wires"``; the feed sits at ``feed_point_m``.
    feed_point_m : tuple, optional
        Feed position for ``shape = "wires"``.
    """

    shape: ShapeName
    dimensions: Mapping[str, float]
    section: CrossSection
    conductivity_s_per_m: float = math.inf
    gap_m: float = 0.0
    feed_offset_m: float = 0.0
    z0_ohm: float = 50.0
    switch: SwitchStates = field(default_factory=SwitchStates)
    segments: int | None = None
    wires: tuple[WireSpec, ...] = ()
    feed_point_m: tuple[float, float, float] | None = None

    def __post_init__(self) -> None:
        if self.shape not in get_args(ShapeName):
            raise ConfigError(
                f"antenna.shape: unknown shape {self.shape!r}; expected one of "
                f"{', '.join(get_args(ShapeName))}"
            )
        if not self.z0_ohm > 0:
            raise ConfigError(f"feed.z0_ohm must be > 0 (got {self.z0_ohm})")
        object.__setattr__(self, "dimensions", dict(self.dimensions))
