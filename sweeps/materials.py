"""Conductor models: skin depth, internal impedance per unit length, equivalent radius.

All quantities are SI: frequency in Hz, lengths in m, conductivity in S/m, impedance per unit
length in ohm/m. A perfect conductor is written ``conductivity = math.inf`` (the config value
``"pec"``); its internal impedance is zero.

Two radii are kept for a flat printed trace (see ``../shared/REFERENCES.md``): the electrostatic
*equivalent radius* used by the thin-wire kernel, and the true cross-section (width x thickness)
used for the conductor loss.

References
----------
- S. Ramo, J. R. Whinnery, T. Van Duzer, *Fields and Waves in Communication Electronics*,
  3rd ed., Wiley 1994, ch. 5 (internal impedance of a round wire; from memory).
- C. A. Balanis, *Antenna Theory*, 3rd ed., Wiley 2005, Table 9.3 (equivalent radii; from memory).
- T. A. Driscoll, L. N. Trefethen, *Schwarz-Christoffel Mapping*, Cambridge 2002 (exterior
  maps of polygons; the logarithmic capacity of a polygon is the leading coefficient of its
  exterior map).
- E. O. Hammerstad, "Equations for microstrip circuit design", Proc. 5th European Microwave
  Conf., 1975 (thickness correction of a thin strip, after H. A. Wheeler).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import integrate, optimize, special

from sweeps.errors import GeometryError

__all__ = [
    "MU0",
    "EPS0",
    "ETA0",
    "C0",
    "skin_depth",
    "surface_resistance",
    "round_wire_impedance",
    "rect_trace_impedance",
    "strip_equivalent_radius",
    "rect_equivalent_radius",
    "hammerstad_equivalent_radius",
    "FILAMENT_PRESETS",
]

# Physical constants (scipy.constants, CODATA 2018); eta0 = sqrt(mu0/eps0) = 376.730313 ohm.
from scipy.constants import c as C0  # noqa: E402
from scipy.constants import epsilon_0 as EPS0  # noqa: E402
from scipy.constants import mu_0 as MU0  # noqa: E402

ETA0 = math.sqrt(MU0 / EPS0)

#: Typical bulk conductivities of printable conductive filaments in S/m. Typical values only:
#: printing raises the resistivity and makes it anisotropic, so measure your own prints
#: (T. Barsi Palmic et al., Sensors 20(16) 4542, 2020, give 1e4-1e5 S/m for metal-filled and
#: 10-100 S/m for carbon-filled filaments).
FILAMENT_PRESETS: dict[str, float] = {
    "copper": 5.8e7,
    "metal_filled": 3.0e4,
    "carbon_filled": 30.0,
}


def _check_sigma(conductivity: float) -> None:
    if not conductivity > 0:
        raise GeometryError(
            f"conductivity must be positive (got {conductivity!r} S/m); use math.inf for a perfect "
            "conductor"
        )


def skin_depth(f_hz: ArrayLike, conductivity: float, mu_r: float = 1.0) -> NDArray[np.float64]:
    """Skin depth ``delta = 1 / sqrt(pi f mu sigma)``.

    Parameters
    ----------
    f_hz : array_like
        Frequency in Hz (> 0).
    conductivity : float
        Conductivity in S/m (``math.inf`` gives 0).
    mu_r : float
        Relative permeability of the conductor.

    Returns
    -------
    ndarray
        Skin depth in m, shaped like ``f_hz``.
    """
    _check_sigma(conductivity)
    f = np.asarray(f_hz, dtype=float)
    if math.isinf(conductivity):
        return np.zeros_like(f)
    return 1.0 / np.sqrt(np.pi * f * MU0 * mu_r * conductivity)


def surface_resistance(f_hz: ArrayLike, conductivity: float) -> NDArray[np.float64]:
    """Surface resistance ``R_s = 1 / (sigma delta) = sqrt(pi f mu0 / sigma)`` in ohm."""
    _check_sigma(conductivity)
    f = np.asarray(f_hz, dtype=float)
    if math.isinf(conductivity):
        return np.zeros_like(f)
    return np.sqrt(np.pi * f * MU0 / conductivity)


def _gamma(f_hz: NDArray[np.float64], conductivity: float) -> NDArray[np.complex128]:
    """Propagation constant in a good conductor, ``sqrt(j omega mu0 sigma) = (1 + j) / delta``."""
    return (1.0 + 1.0j) * np.sqrt(np.pi * f_hz * MU0 * conductivity)


def round_wire_impedance(
    f_hz: ArrayLike, radius_m: float, conductivity: float
) -> NDArray[np.complex128]:
    """Internal impedance per unit length of a round wire, DC through full skin effect.

    ``Z' = gamma / (2 pi a sigma) * I0(gamma a) / I1(gamma a)``, ``gamma = sqrt(j omega mu sigma)``
    (Ramo, Whinnery & Van Duzer, 3rd ed., ch. 5; from memory). The Bessel ratio is evaluated with
    exponentially scaled functions (``scipy.special.ive``) so that it stays finite when the skin
    depth is far below the radius. Limits: DC ``1/(pi a^2 sigma) + j omega mu/(8 pi)``; high
    frequency ``(1 + j) R_s / (2 pi a)``.

    Parameters
    ----------
    f_hz : array_like
        Frequency in Hz.
    radius_m : float
        Wire radius in m.
    conductivity : float
        Conductivity in S/m; ``math.inf`` gives zero.

    Returns
    -------
    ndarray of complex
        Internal impedance per unit length in ohm/m.
    """
    _check_sigma(conductivity)
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    if math.isinf(conductivity):
        return np.zeros(f.shape, dtype=complex).reshape(np.shape(f_hz))
    g = _gamma(f, conductivity)
    x = g * radius_m
    small = np.abs(x) < 1e-3
    ratio = np.empty_like(x)
    xs = x[~small]
    ratio[~small] = special.ive(0, xs) / special.ive(1, xs)
    # Series for small |x|: I0/I1 = 2/x + x/4 - x^3/96 + ...
    xm = x[small]
    ratio[small] = 2.0 / xm + xm / 4.0 - xm**3 / 96.0
    z = g / (2.0 * np.pi * radius_m * conductivity) * ratio
    return z.reshape(np.shape(f_hz)) if np.ndim(f_hz) else z[0]


def rect_trace_impedance(
    f_hz: ArrayLike, width_m: float, thickness_m: float, conductivity: float
) -> NDArray[np.complex128]:
    """Internal impedance per unit length of a rectangular printed trace.

    Model: an *equivalent slab* whose faces carry the current over the whole perimeter
    ``P = 2 (w + t)`` and whose half-thickness is the hydraulic radius ``h = A / P`` with
    ``A = w t``:

        ``Z' = gamma / (sigma P) * coth(gamma h)``.

    Derivation: the standard plate result for a slab of thickness ``t`` carrying current on both
    faces is ``Z' = gamma / (2 sigma w) * coth(gamma t / 2)`` (field diffusion into a good
    conductor; e.g. Ramo, Whinnery & Van Duzer ch. 5, from memory). Replacing the two faces of
    width ``w`` by the perimeter ``P`` and ``t/2`` by ``A/P`` keeps both limits exact:

    - DC: ``coth(x) -> 1/x`` gives ``Z' -> 1 / (sigma A) = 1 / (sigma w t)``;
    - high frequency: ``coth -> 1`` gives ``Z' -> (1 + j) R_s / P``, the surface resistance over
      the perimeter;

    and for ``t << w`` it reduces to the plate formula. Edge current crowding, which raises the
    true high-frequency resistance of a thin strip (H. A. Wheeler, Proc. IRE 30, 1942, from
    memory), is neglected; for filaments of 10-1e5 S/m at UHF the skin depth is comparable to the
    thickness and the model is close to its DC limit anyway.

    Parameters
    ----------
    f_hz : array_like
        Frequency in Hz.
    width_m, thickness_m : float
        Trace width and thickness in m.
    conductivity : float
        Conductivity in S/m; ``math.inf`` gives zero.

    Returns
    -------
    ndarray of complex
        Internal impedance per unit length in ohm/m.
    """
    _check_sigma(conductivity)
    f = np.asarray(f_hz, dtype=float)
    if math.isinf(conductivity):
        return np.zeros(f.shape, dtype=complex)
    perimeter = 2.0 * (width_m + thickness_m)
    h = width_m * thickness_m / perimeter
    g = _gamma(f, conductivity)
    x = g * h
    # coth(x) = 1/tanh(x); tanh saturates cleanly to 1 for large |x|.
    with np.errstate(over="ignore"):
        coth = 1.0 / np.tanh(x)
    return g / (conductivity * perimeter) * coth


def strip_equivalent_radius(width_m: float) -> float:
    """Equivalent radius of an infinitely thin flat strip, ``a_e = w / 4`` (Balanis Table 9.3)."""
    return 0.25 * width_m


def hammerstad_equivalent_radius(width_m: float, thickness_m: float) -> float:
    """Thin-strip approximation ``a_e = (w + dw) / 4``, ``dw = (t/pi)(1 + ln(4 pi w / t))``.

    The thickness correction of Hammerstad (1975, after Wheeler); good to about 1.3 % for
    ``t/w <= 0.2`` against the exact conformal-map value (computed; see REFERENCES.md).
    """
    if thickness_m <= 0:
        return strip_equivalent_radius(width_m)
    dw = thickness_m / np.pi * (1.0 + np.log(4.0 * np.pi * width_m / thickness_m))
    return 0.25 * (width_m + dw)


def _side_integrals(theta: float) -> tuple[float, float]:
    """Lengths of the two sides of the rectangle image, per unit map coefficient.

    The exterior Schwarz-Christoffel map of the unit disk onto the exterior of a rectangle with
    prevertices at ``+-theta, pi +- theta`` is
    ``f'(z) = C z^-2 sqrt(z^4 - 2 cos(2 theta) z^2 + 1)``;
    on ``|z| = 1``, ``|f'| = |C| sqrt(2 |cos 2 phi - cos 2 theta|)``. ``f(z) ~ C z`` at infinity, so
    ``|C|`` is the logarithmic capacity (the electrostatic equivalent radius).
    """
    c2t = math.cos(2.0 * theta)

    def short(phi: float) -> float:
        return math.sqrt(max(2.0 * (math.cos(2.0 * phi) - c2t), 0.0))

    def long(phi: float) -> float:
        return math.sqrt(max(2.0 * (c2t - math.cos(2.0 * phi)), 0.0))

    s1, _ = integrate.quad(short, 0.0, theta, limit=200, epsabs=0, epsrel=1e-12)
    s2, _ = integrate.quad(long, theta, math.pi / 2, limit=200, epsabs=0, epsrel=1e-12)
    return 2.0 * s1, 2.0 * s2


@lru_cache(maxsize=4096)
def _rect_ratio(aspect: float) -> float:
    """``a_e / w`` for a rectangle of thickness/width ratio ``aspect`` in [0, 1]."""
    if aspect <= 0.0:
        return 0.25
    if aspect >= 1.0:
        aspect = 1.0

    def mismatch(theta: float) -> float:
        s_short, s_long = _side_integrals(theta)
        return s_short / s_long - aspect

    theta = optimize.brentq(mismatch, 1e-12, math.pi / 4, xtol=1e-15, rtol=1e-14)
    _, s_long = _side_integrals(theta)
    return 1.0 / s_long


def rect_equivalent_radius(width_m: float, thickness_m: float) -> float:
    """Electrostatic equivalent radius of a rectangular conductor ``w x t``.

    Computed exactly as the logarithmic capacity of the rectangle through its exterior
    Schwarz-Christoffel map (Driscoll & Trefethen 2002): the map ``f`` of ``|z| > 1`` onto the
    exterior of the rectangle behaves as ``a_e z`` at infinity. Limits: ``w/4`` for a thin strip,
    ``0.590170 s`` for a square (``Gamma(1/4)^2 s / (4 pi^(3/2))``), as in Balanis Table 9.3.

    Parameters
    ----------
    width_m, thickness_m : float
        Sides of the rectangle in m (either may be the larger one).

    Returns
    -------
    float
        Equivalent radius in m.
    """
    if width_m <= 0 or thickness_m < 0:
        raise GeometryError(
            f"trace width must be > 0 and thickness >= 0 (got width {width_m!r} m, thickness "
            f"{thickness_m!r} m)"
        )
    big, small = max(width_m, thickness_m), min(width_m, thickness_m)
    ratio = round(small / big, 12)
    return big * _rect_ratio(ratio)
