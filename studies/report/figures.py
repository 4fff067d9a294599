"""The report's figure record, PNG rendering on the Agg canvas, and the band plots of the best
designs: |S11| over frequency, the Smith chart (scikit-rf) and the input impedance.

Every figure is drawn on a :class:`matplotlib.figure.Figure` with the Agg canvas (no display,
no global pyplot state of ours). Axis labels carry their units: MHz, dB, ohm, dBi, dBsm.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = ["FigureEntry", "Response", "Unavailable", "new_figure", "png_bytes",
           "s11_figure", "smith_figure", "impedance_figure", "TITLES"]

#: Title of every figure of the report, by key (the PNG file stem).
TITLES: dict[str, str] = {
    "s11": "|S11| over frequency",
    "smith": "Smith chart",
    "impedance": "Input impedance",
    "pattern": "Radiation pattern",
    "efficiency_conductivity": "Efficiency against conductivity",
    "switch_loads": "Modulation and differential RCS against the switch loads",
    "tradeoff": "Trade-off front",
    "sensitivity": "Parameter sensitivity",
    "yield": "Yield under print tolerances",
}


class Unavailable(Exception):
    """A figure that cannot be drawn for this study; the message says why (shown on the page)."""


@dataclass
class FigureEntry:
    """One figure of the report.

    Attributes
    ----------
    key : str
        File stem of the PNG (``s11`` -> ``s11.png``), one of :data:`TITLES`.
    title, caption : str
    png : bytes or None
        The rendered image; ``None`` when the figure could not be made.
    reason : str or None
        Why the figure is missing (``png is None``).
    data : dict
        The plotted numbers (SI inside, as arrays), for tests and scripts.
    """

    key: str
    title: str
    caption: str = ""
    png: bytes | None = None
    reason: str | None = None
    data: dict[str, Any] = field(default_factory=dict)

    @property
    def available(self) -> bool:
        return self.png is not None


@dataclass(frozen=True)
class Response:
    """The stored response of one ranked design.

    Attributes
    ----------
    rank : int
    point_id : str
    label : str
        Legend text.
    f_hz : ndarray, shape (F,)
    zin : ndarray, shape (F,)
        Port-1 input impedance in ohm.
    z0_ohm : float
        Reference impedance of S11.
    """

    rank: int
    point_id: str
    label: str
    f_hz: NDArray[np.float64]
    zin: NDArray[np.complex128]
    z0_ohm: float

    @property
    def s11(self) -> NDArray[np.complex128]:
        """``(Z - Z0) / (Z + Z0)`` against the real reference ``z0_ohm``."""
        return (self.zin - self.z0_ohm) / (self.zin + self.z0_ohm)


def new_figure(width_in: float = 6.4, height_in: float = 4.2) -> Any:
    """A matplotlib Figure attached to the Agg canvas."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), dpi=100)
    FigureCanvasAgg(fig)
    return fig


def png_bytes(fig: Any) -> bytes:
    """Render ``fig`` to PNG bytes (tight layout, 100 dpi)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", bbox_inches="tight")
    return buf.getvalue()


def _need(responses: Sequence[Response]) -> None:
    if not responses:
        raise Unavailable("no best design has a stored response (no finished point yet)")


def s11_figure(responses: Sequence[Response], target_mhz: float) -> tuple[Any, dict]:
    """|S11| in dB over frequency in MHz for each design, with the -10 dB line and the target."""
    _need(responses)
    fig = new_figure()
    ax = fig.add_subplot(1, 1, 1)
    data: dict[str, Any] = {}
    for r in responses:
        db = 20.0 * np.log10(np.maximum(np.abs(r.s11), 1e-12))
        ax.plot(r.f_hz / 1e6, db, label=r.label)
        data[r.point_id] = {"f_hz": r.f_hz, "s11_db": db}
    ax.axhline(-10.0, color="0.5", ls="--", lw=1, label="-10 dB")
    ax.axvline(target_mhz, color="C3", ls=":", lw=1, label=f"target {target_mhz:g} MHz")
    ax.set_xlabel("frequency (MHz)")
    ax.set_ylabel(f"|S11| (dB, Z0 = {responses[0].z0_ohm:g} ohm)")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8, loc="best")
    return fig, data


def smith_figure(responses: Sequence[Response], target_mhz: float) -> tuple[Any, dict]:
    """S11 of each design on a Smith chart (scikit-rf's plotting), the target marked."""
    _need(responses)
    import skrf

    fig = new_figure(6.0, 6.0)
    ax = fig.add_subplot(1, 1, 1)
    data: dict[str, Any] = {}
    for i, r in enumerate(responses):
        freq = skrf.Frequency.from_f(r.f_hz, unit="hz")
        net = skrf.Network.from_z(r.zin.reshape(-1, 1, 1), frequency=freq, z0=r.z0_ohm,
                                  name=r.label)
        net.plot_s_smith(ax=ax, draw_labels=(i == 0), label=r.label, color=f"C{i}")
        s = net.s[:, 0, 0]
        k = int(np.argmin(np.abs(r.f_hz - target_mhz * 1e6)))
        ax.plot([s[k].real], [s[k].imag], "o", color=f"C{i}", ms=5)
        data[r.point_id] = {"f_hz": r.f_hz, "s11": s}
    ax.set_title(f"S11 (Z0 = {responses[0].z0_ohm:g} ohm); dots: nearest sample to "
                 f"{target_mhz:g} MHz", fontsize=9)
    ax.legend(fontsize=8, loc="lower left")
    return fig, data


def impedance_figure(responses: Sequence[Response], target_mhz: float) -> tuple[Any, dict]:
    """Input resistance and reactance in ohm over frequency in MHz."""
    _need(responses)
    fig = new_figure(6.4, 5.2)
    ax_r = fig.add_subplot(2, 1, 1)
    ax_x = fig.add_subplot(2, 1, 2, sharex=ax_r)
    data: dict[str, Any] = {}
    for i, r in enumerate(responses):
        ax_r.plot(r.f_hz / 1e6, r.zin.real, color=f"C{i}", label=r.label)
        ax_x.plot(r.f_hz / 1e6, r.zin.imag, color=f"C{i}")
        data[r.point_id] = {"f_hz": r.f_hz, "r_ohm": r.zin.real, "x_ohm": r.zin.imag}
    for ax in (ax_r, ax_x):
        ax.axvline(target_mhz, color="C3", ls=":", lw=1)
        ax.grid(True, alpha=0.3)
    ax_x.axhline(0.0, color="0.5", lw=1)
    ax_r.set_ylabel("resistance R (ohm)")
    ax_x.set_ylabel("reactance X (ohm)")
    ax_x.set_xlabel("frequency (MHz)")
    ax_r.legend(fontsize=8, loc="best")
    return fig, data
