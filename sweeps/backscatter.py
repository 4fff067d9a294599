"""Backscatter quantities of a two-state tag: reflection, modulation, differential RCS, range.

A battery-free, circuit-free tag changes the load across its antenna gap between two switch
states (:class:`sweeps.design.SwitchStates`). The reader hears the *difference* between the two
reflections. This module holds the formulas; :mod:`sweeps.metrics` assembles them into the named
metrics. All quantities are SI (Hz, ohm, m, m^2, W); dB only where the name says so.

Conventions: time dependence ``e^{j omega t}``; ``Z_a`` is the antenna's input impedance at the
gap, ``Z_L`` the load the switch presents there.

Power-wave reflection (K. Kurokawa, "Power waves and the scattering matrix", IEEE Trans. MTT
13(2), 194-202, 1965)::

    Gamma = (Z_L - conj(Z_a)) / (Z_L + Z_a)

It is zero for the conjugate match ``Z_L = conj(Z_a)`` and ``|Gamma| <= 1`` for any passive load
on an antenna with ``Re Z_a > 0``, because ``|Z_L - Z_a*|^2 - |Z_L + Z_a|^2 = -4 R_L R_a``.

Modulation (J. D. Griffin and G. D. Durgin, "Complete link budgets for backscatter-radio and
RFID systems", IEEE AP Magazine 51(2), 11-25, 2009)::

    modulation depth   m = |Gamma_A - Gamma_B| / 2         (0 ... 1)
    modulation factor  M = |Gamma_A - Gamma_B|^2 / 4       (0 ... 1)

Differential radar cross-section (P. V. Nikitin, K. V. S. Rao and R. D. Martinez,
"Differential RCS of RFID tag", Electronics Letters 43(8), 431-432, 2007)::

    delta_sigma = lambda^2 G^2 |Gamma_A - Gamma_B|^2 / (4 pi)

with ``G`` the tag antenna's gain (IEEE gain: directivity times radiation efficiency) towards
the reader in the reader's polarisation. This is the convention filamant reports. Another
convention in use divides it by 4: the modulated power of two equiprobable states
(N. Barbot, O. Rance and E. Perret, IEEE Trans. AP 69(9), 2021); compare numbers only after
checking which one a source uses.

Why only the difference matters: with the method-of-moments matrix ``Z``, port vector ``e``
and a load ``Z_L`` in the gap, the plane-wave currents are (Sherman-Morrison)
``I(Z_L) = I_sc - I_1 (e^T I_sc) Z_a Z_L / (Z_a + Z_L)`` where ``I_sc`` are the short-circuit
currents and ``I_1 = Z^-1 e`` the transmit currents for 1 V. The load-independent (structural)
part cancels in ``I(Z_A) - I(Z_B) = -I_1 (e^T I_sc) Z_a^2 (Gamma_A - Gamma_B) / (2 R_a)``, and
reciprocity (``e^T I_sc = p . A_1``, the transmit radiation vector) turns the scattered-field
difference into the formula above exactly. ``tests/sweeps/test_backscatter_mom.py`` checks it
against full plane-wave scattering.

Switch loads. Each state is a series R-L-C (:class:`sweeps.design.SwitchLoad`), evaluated
as a complex impedance at every frequency of the band. The defaults of
:class:`sweeps.design.SwitchStates` are common practice, not measurements:

- closed: ``20 ohm + 1 nH``. A pressed contact between two printed conductive-filament
  surfaces has tens of ohms of contact resistance (the filament's resistivity and the small
  real contact area); 1 nH is the order of a millimetre-scale current path (about 6 ohm of
  reactance at 915 MHz).
- open: ``1 ohm + 0.1 pF``. An open gap of about a millimetre between trace ends is a small
  capacitance: the parallel-plate value of two 3 mm x 0.4 mm end faces 1 mm apart is only
  0.01 pF, fringing fields through the air and the print's plastic raise it to some 0.03 to
  0.1 pF; 0.1 pF (about -j1.7 kohm at 915 MHz) is the pessimistic end, which makes the open
  state less open. The 1 ohm stands for the trace stubs' loss.

Measure your own contacts (a one-port measurement of each state across the gap) and put them
in ``[switch]``.

Read range: see :func:`read_range`. A reader is a radio transmitter: its power, band and duty
are set by local regulations, and RF exposure limits apply (:data:`READ_RANGE_CAUTION`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sweeps.design import Reader
from sweeps.errors import ConfigError
from sweeps.materials import C0

__all__ = [
    "READ_RANGE_CAUTION",
    "ReadRange",
    "backscatter_power_w",
    "carrier_floor_w",
    "differential_rcs_m2",
    "modulation_depth",
    "modulation_factor",
    "power_wave_gamma",
    "read_range",
]

#: The caution to show next to any read range (README, ``evaluate`` output, reports).
READ_RANGE_CAUTION = (
    "Read range is an engineering estimate, not a certification. A reader is a radio "
    "transmitter: its power, antenna gain, band and duty cycle are set by local regulations "
    "(for example 47 CFR 15.247 in the US 902-928 MHz band, ETSI EN 302 208 in Europe; check "
    "the rules where you operate), RF exposure limits apply (ICNIRP 2020, IEEE C95.1-2019), and "
    "tags on medical or safety items need the applicable codes and licensed practice."
)


def power_wave_gamma(z_load_ohm: ArrayLike, z_antenna_ohm: ArrayLike) -> NDArray[np.complex128]:
    """Power-wave reflection coefficient of a load on an antenna (Kurokawa 1965).

    Parameters
    ----------
    z_load_ohm : array_like, complex
        Load impedance across the gap in ohm.
    z_antenna_ohm : array_like, complex
        Antenna input impedance in ohm (broadcast against ``z_load_ohm``).

    Returns
    -------
    ndarray, complex
        ``(Z_L - conj(Z_a)) / (Z_L + Z_a)`` (dimensionless). ``|Gamma| <= 1`` when
        ``Re Z_L >= 0`` and ``Re Z_a > 0``.
    """
    zl = np.asarray(z_load_ohm, dtype=complex)
    za = np.asarray(z_antenna_ohm, dtype=complex)
    return (zl - np.conj(za)) / (zl + za)


def modulation_depth(gamma_a: ArrayLike, gamma_b: ArrayLike) -> NDArray[np.float64]:
    """Modulation depth ``|Gamma_A - Gamma_B| / 2`` of the complex reflection coefficients.

    Between 0 and 1 for passive loads (each ``|Gamma| <= 1``). Griffin & Durgin 2009.
    """
    return np.abs(np.asarray(gamma_a) - np.asarray(gamma_b)) / 2.0


def modulation_factor(gamma_a: ArrayLike, gamma_b: ArrayLike) -> NDArray[np.float64]:
    """Modulation factor ``M = |Gamma_A - Gamma_B|^2 / 4`` (Griffin & Durgin 2009, 0 ... 1)."""
    return np.abs(np.asarray(gamma_a) - np.asarray(gamma_b)) ** 2 / 4.0


def differential_rcs_m2(
    f_hz: ArrayLike, gain: ArrayLike, gamma_a: ArrayLike, gamma_b: ArrayLike
) -> NDArray[np.float64]:
    """Differential RCS ``lambda^2 G^2 |Gamma_A - Gamma_B|^2 / (4 pi)`` in m^2.

    Nikitin, Rao & Martinez, Electronics Letters 43(8), 2007 (no factor 1/4; see the module
    docstring for the other convention).

    Parameters
    ----------
    f_hz : array_like
        Frequency in Hz.
    gain : array_like
        Tag antenna gain towards the reader (linear, not dBi), co-polarised with the reader.
    gamma_a, gamma_b : array_like, complex
        Power-wave reflection coefficients of the two switch states.

    Returns
    -------
    ndarray
        Differential RCS in m^2.
    """
    lam = C0 / np.asarray(f_hz, dtype=float)
    g = np.asarray(gain, dtype=float)
    return lam**2 * g**2 * np.abs(np.asarray(gamma_a) - np.asarray(gamma_b)) ** 2 / (4.0 * np.pi)


def backscatter_power_w(
    distance_m: ArrayLike,
    f_hz: float,
    delta_rcs_m2: float,
    tx_power_w: float,
    reader_gain: float,
) -> NDArray[np.float64]:
    """Modulated backscatter power at a monostatic reader, by the radar equation.

    ``P_R = P_T G_T G_R lambda^2 delta_sigma / ((4 pi)^3 d^4)`` with one reader antenna for
    transmit and receive (``G_T = G_R = reader_gain``), free space, matched polarisation
    (radar equation: C. A. Balanis, *Antenna Theory*, 3rd ed., section 2.17; M. I. Skolnik,
    *Introduction to Radar Systems* — from memory).

    Parameters
    ----------
    distance_m : array_like
        Reader-to-tag distance in m.
    f_hz : float
        Carrier frequency in Hz.
    delta_rcs_m2 : float
        Differential RCS of the tag in m^2 (:func:`differential_rcs_m2`).
    tx_power_w : float
        Conducted transmit power in W.
    reader_gain : float
        Reader antenna gain, linear.

    Returns
    -------
    ndarray
        Received modulated power in W.
    """
    lam = C0 / f_hz
    d = np.asarray(distance_m, dtype=float)
    return tx_power_w * reader_gain**2 * lam**2 * delta_rcs_m2 / ((4.0 * np.pi) ** 3 * d**4)


def carrier_floor_w(reader: Reader) -> float:
    """Residual carrier at the reader's receiver after cancellation, in W.

    ``P_T 10^(-cancellation_db/10)``: ``cancellation_db`` is the total suppression of the
    reader's own carrier at its receiver, relative to the conducted transmit power (antenna and
    coupler isolation plus active cancellation). This is filamant's model; see
    :func:`read_range`.
    """
    _check_reader(reader)
    return reader.tx_power_w * 10.0 ** (-reader.cancellation_db / 10.0)


@dataclass(frozen=True)
class ReadRange:
    """Result of :func:`read_range`.

    Attributes
    ----------
    range_m : float
        Largest distance at which the modulated tag signal reaches the receiver floor, in m.
    floor_w : float
        The floor that applies: the larger of sensitivity and residual carrier, in W.
    limited_by : {"sensitivity", "carrier"}
        Which floor sets the range.
    """

    range_m: float
    floor_w: float
    limited_by: Literal["sensitivity", "carrier"]


def _check_reader(reader: Reader) -> None:
    checks = (
        ("reader.tx_power_dbm", reader.tx_power_w, reader.tx_power_w > 0),
        ("reader.sensitivity_dbm", reader.sensitivity_w, reader.sensitivity_w > 0),
        ("reader.antenna_gain_dbi", reader.antenna_gain_dbi, True),
        ("reader.cancellation_db", reader.cancellation_db, True),
    )
    for key, value, ok in checks:
        if not (ok and math.isfinite(value)):
            raise ConfigError(f"{key}: must be a finite number (power > 0) (got {value!r})")


def read_range(f_hz: float, delta_rcs_m2: float, reader: Reader) -> ReadRange:
    """Read range of a monostatic backscatter link (filamant's model).

    The model, stated so it can be checked and changed:

    1. The reader transmits ``P_T`` (conducted) through one antenna of gain ``G`` that also
       receives. The tag, at distance ``d`` in free space, in its peak-gain direction and
       co-polarised with the reader, returns the modulated power of the radar equation
       (:func:`backscatter_power_w`): ``P_R(d) = P_T G^2 lambda^2 delta_sigma / ((4 pi)^3 d^4)``.
       A circularly polarised reader antenna and a linear tag lose 3 dB each way: lower
       ``antenna_gain_dbi`` by 3 dB to account for it.
    2. The tag is battery-free and has no chip, so there is no forward-link (power-up)
       threshold: the return link alone sets the range.
    3. The signal must exceed two floors: the receiver sensitivity ``S`` and the residual
       carrier ``P_T 10^(-C/10)`` left after the reader's carrier cancellation ``C``
       (:func:`carrier_floor_w`). Requiring the sideband to exceed the residual carrier is a
       conservative rule of thumb (common practice): the leaked carrier's phase noise and the
       receiver's dynamic range bury weaker sidebands.

    So ``d_max = (P_T G^2 lambda^2 delta_sigma / ((4 pi)^3 max(S, P_T 10^(-C/10))))^(1/4)``;
    it scales as ``delta_sigma^(1/4)``.

    Parameters
    ----------
    f_hz : float
        Carrier frequency in Hz.
    delta_rcs_m2 : float
        Differential RCS in m^2 (> 0).
    reader : Reader

    Returns
    -------
    ReadRange

    Notes
    -----
    An engineering estimate, not a certification; see :data:`READ_RANGE_CAUTION`.
    """
    _check_reader(reader)
    if not (delta_rcs_m2 > 0 and math.isfinite(delta_rcs_m2)):
        raise ConfigError(f"read range needs a differential RCS > 0 m^2 (got {delta_rcs_m2!r})")
    g = 10.0 ** (reader.antenna_gain_dbi / 10.0)
    carrier = carrier_floor_w(reader)
    if carrier > reader.sensitivity_w:
        floor, limited_by = carrier, "carrier"
    else:
        floor, limited_by = reader.sensitivity_w, "sensitivity"
    lam = C0 / f_hz
    d4 = reader.tx_power_w * g**2 * lam**2 * delta_rcs_m2 / ((4.0 * np.pi) ** 3 * floor)
    return ReadRange(range_m=float(d4**0.25), floor_w=float(floor), limited_by=limited_by)
