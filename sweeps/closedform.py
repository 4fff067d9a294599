"""Closed-form antenna results used as quick estimates and as checks of the solver.

All inputs SI; impedances in ohm. ``eta`` defaults to ``sqrt(mu0/eps0)`` = 376.730313 ohm.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import sici

from sweeps.materials import ETA0

__all__ = [
    "induced_emf_dipole",
    "short_dipole_resistance",
    "small_loop_resistance",
    "chu_mclean_q",
]

EULER_GAMMA = 0.5772156649015329


def induced_emf_dipole(
    length_m: float, radius_m: float, wavelength_m: float, eta: float = ETA0,
    at_input: bool = True,
) -> complex:
    """Input impedance of a centre-fed thin dipole by the induced-EMF method (Carter 1932).

    Sinusoidal current ``I(z) = I_m sin(k (l/2 - |z|))`` on the axis, field on the surface:
    C. A. Balanis, *Antenna Theory*, 3rd ed., Wiley 2005, eqs. 8-60a (radiation resistance)
    and 8-61a (reactance), referred to the current maximum; referred to the input by dividing by
    ``sin^2(k l / 2)`` (eqs. 8-60b, 8-61b; equation numbers from memory).

    Parameters
    ----------
    length_m, radius_m, wavelength_m : float
    eta : float
        Wave impedance in ohm.
    at_input : bool
        Refer to the input terminals (default) or to the current maximum.

    Returns
    -------
    complex
        Impedance in ohm; ``l = lambda/2`` gives ``73.079 + j42.515`` with eta0 (REFERENCES.md).
    """
    k = 2.0 * math.pi / wavelength_m
    kl = k * length_m
    si1, ci1 = sici(kl)
    si2, ci2 = sici(2.0 * kl)
    _, ci_a = sici(2.0 * k * radius_m**2 / length_m)
    r = eta / (2.0 * math.pi) * (
        EULER_GAMMA + math.log(kl) - ci1
        + 0.5 * math.sin(kl) * (si2 - 2.0 * si1)
        + 0.5 * math.cos(kl) * (EULER_GAMMA + math.log(kl / 2.0) + ci2 - 2.0 * ci1)
    )
    x = eta / (4.0 * math.pi) * (
        2.0 * si1 + math.cos(kl) * (2.0 * si1 - si2)
        - math.sin(kl) * (2.0 * ci1 - ci2 - ci_a)
    )
    z = complex(r, x)
    if at_input:
        z /= math.sin(kl / 2.0) ** 2
    return z


def short_dipole_resistance(length_m: float, wavelength_m: float) -> float:
    """Radiation resistance of a short dipole with triangular current, ``20 pi^2 (l/lambda)^2``.

    Balanis, *Antenna Theory*, 3rd ed., eq. 4-37 (from memory); uses ``eta = 120 pi``.
    """
    return 20.0 * math.pi**2 * (length_m / wavelength_m) ** 2


def small_loop_resistance(area_m2: float, wavelength_m: float) -> float:
    """Radiation resistance of an electrically small loop, ``(8 pi^3 / 3) eta (A/lambda^2)^2``.

    With ``eta = 120 pi`` this is ``31171 (A/lambda^2)^2 = 20 pi^2 (C/lambda)^4`` for a circle
    (Balanis eq. 5-24, from memory; Kraus, *Antennas*). Uses eta0 here.
    """
    return 8.0 * math.pi**3 / 3.0 * ETA0 * (area_m2 / wavelength_m**2) ** 2


def chu_mclean_q(ka: float | np.ndarray) -> float | np.ndarray:
    """Chu lower bound on Q in McLean's form for linear polarisation, ``1/(ka)^3 + 1/(ka)``.

    L. J. Chu, J. Appl. Phys. 19, 1948; J. S. McLean, IEEE Trans. AP 44(5), 1996.
    """
    return 1.0 / ka**3 + 1.0 / ka
