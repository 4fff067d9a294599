"""Closed-form impedance models shared by the metric tests (not tests themselves).

A series RLC ``Z = R + j(omega L - 1/(omega C))`` has ``Q = omega0 L / R`` and a parallel RLC
``Z = 1/(1/R + j omega C + 1/(j omega L))`` has ``Q = omega0 C R`` (circuit theory).
"""

from __future__ import annotations

import math

import numpy as np

F0 = 915e6
W0 = 2 * math.pi * F0


def series_rlc(f: np.ndarray, r: float, q: float, f0: float = F0) -> np.ndarray:
    """Series RLC resonant at ``f0`` (Hz) with resistance ``r`` (ohm) and ``Q = w0 L / R``."""
    w, w0 = 2 * np.pi * np.asarray(f, dtype=float), 2 * math.pi * f0
    ell = q * r / w0
    c = 1 / (w0**2 * ell)
    return r + 1j * (w * ell - 1 / (w * c))


def parallel_rlc(f: np.ndarray, r: float, q: float, f0: float = F0) -> np.ndarray:
    """Parallel RLC resonant at ``f0`` (Hz) with resistance ``r`` (ohm) and ``Q = w0 C R``."""
    w, w0 = 2 * np.pi * np.asarray(f, dtype=float), 2 * math.pi * f0
    c = q / (w0 * r)
    ell = 1 / (w0**2 * c)
    return 1 / (1 / r + 1j * w * c + 1 / (1j * w * ell))
