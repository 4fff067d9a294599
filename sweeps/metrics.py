"""Antenna and backscatter metrics from a swept input impedance (and fields where available).

Every metric has the name used in DESIGN.md, the config, ``evaluate --json`` and the study
tables. A metric that does not exist for a design (no zero crossing of the reactance in the
band, a quantity that needs fields when only S-parameters are known) is ``None`` with a reason
in :attr:`MetricSet.reasons`, never 0 or NaN.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

__all__ = ["MetricSet", "METRIC_UNITS", "compute_metrics", "s11_from_z", "resonances_hz"]

#: Unit of every metric (for tables and reports).
METRIC_UNITS: dict[str, str] = {
    "resonance_mhz": "MHz",
    "match_mhz": "MHz",
    "s11_db": "dB",
    "zin_re_ohm": "ohm",
    "zin_im_ohm": "ohm",
    "efficiency": "1",
    "gain_dbi": "dBi",
}


@dataclass
class MetricSet:
    """Scalar metrics with reasons for the missing ones, and band arrays for plots and the API."""

    values: dict[str, float | None] = field(default_factory=dict)
    reasons: dict[str, str] = field(default_factory=dict)
    arrays: dict[str, NDArray] = field(default_factory=dict)

    def set(self, name: str, value: float | None, reason: str = "") -> None:
        if value is None or not np.isfinite(value):
            self.values[name] = None
            self.reasons[name] = reason or "not defined for this design"
        else:
            self.values[name] = float(value)
            self.reasons.pop(name, None)


def s11_from_z(zin: NDArray[np.complex128], z0_ohm: float) -> NDArray[np.complex128]:
    """Reflection coefficient against a real reference ``z0_ohm``: ``(Z - Z0)/(Z + Z0)``."""
    return (zin - z0_ohm) / (zin + z0_ohm)


def resonances_hz(f_hz: NDArray[np.float64], zin: NDArray[np.complex128]) -> NDArray[np.float64]:
    """Frequencies where ``Im Zin`` changes sign, linearly interpolated between samples."""
    x = np.imag(zin)
    idx = np.nonzero(np.signbit(x[:-1]) != np.signbit(x[1:]))[0]
    f0, f1 = f_hz[idx], f_hz[idx + 1]
    x0, x1 = x[idx], x[idx + 1]
    return f0 - x0 * (f1 - f0) / (x1 - x0)


def _interp(f_hz: NDArray[np.float64], values: NDArray, at_hz: float) -> complex:
    return complex(np.interp(at_hz, f_hz, np.real(values))
                   + 1j * np.interp(at_hz, f_hz, np.imag(values)))


def _match(f_hz: NDArray[np.float64], mag: NDArray[np.float64]) -> float:
    """Frequency of the smallest |S11|, refined by a parabola through the three lowest samples."""
    i = int(np.argmin(mag))
    if i == 0 or i == len(mag) - 1:
        return float(f_hz[i])
    y0, y1, y2 = mag[i - 1], mag[i], mag[i + 1]
    denom = y0 - 2 * y1 + y2
    if denom <= 0:
        return float(f_hz[i])
    h = f_hz[i + 1] - f_hz[i]
    return float(f_hz[i] + 0.5 * h * (y0 - y2) / denom)


def compute_metrics(
    f_hz: NDArray[np.float64],
    zin: NDArray[np.complex128],
    *,
    target_hz: float,
    z0_ohm: float = 50.0,
    efficiency: NDArray[np.float64] | None = None,
    gain_dbi: float | None = None,
) -> MetricSet:
    """Metrics of one design at ``target_hz`` from its swept input impedance.

    Parameters
    ----------
    f_hz : ndarray, shape (F,)
        Increasing frequencies in Hz.
    zin : ndarray, shape (F,)
        Input impedance of the antenna port in ohm.
    target_hz : float
        Frequency of the point metrics in Hz (within the sweep).
    z0_ohm : float
        Reference impedance of S11.
    efficiency : ndarray, shape (F,), optional
        Radiation efficiency over the band (needs currents; ``None`` for S-parameter data).
    gain_dbi : float, optional
        Peak gain at ``target_hz`` in dBi (needs fields).

    Returns
    -------
    MetricSet
    """
    ms = MetricSet()
    s11 = s11_from_z(zin, z0_ohm)
    mag = np.abs(s11)
    ms.arrays.update(f_hz=f_hz, zin=zin, s11=s11)

    res = resonances_hz(f_hz, zin)
    if len(res):
        ms.set("resonance_mhz", float(res[np.argmin(np.abs(res - target_hz))]) / 1e6)
    else:
        ms.set("resonance_mhz", None, "Im Zin does not cross zero inside the band")
    ms.set("match_mhz", _match(f_hz, mag) / 1e6)
    zt = _interp(f_hz, zin, target_hz)
    st = (zt - z0_ohm) / (zt + z0_ohm)
    ms.set("s11_db", 20.0 * np.log10(max(abs(st), 1e-300)))
    ms.set("zin_re_ohm", zt.real)
    ms.set("zin_im_ohm", zt.imag)
    if efficiency is None:
        ms.set("efficiency", None, "efficiency needs currents (not available from S-parameters)")
    else:
        ms.arrays["efficiency"] = efficiency
        ms.set("efficiency", float(np.interp(target_hz, f_hz, efficiency)))
    if gain_dbi is None:
        ms.set("gain_dbi", None, "gain needs fields (not available from S-parameters)")
    else:
        ms.set("gain_dbi", gain_dbi)
    return ms
