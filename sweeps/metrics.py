"""Antenna and backscatter metrics of one design from its swept input impedance.

Every metric has the name used in DESIGN.md, the config, ``evaluate --json`` and the study
tables; :data:`METRIC_NAMES` is the one ordered list everybody uses and :data:`METRIC_UNITS`
gives the unit of each. A metric that does not exist for a design (no zero crossing of the
reactance in the band, no -10 dB band, a quantity that needs fields when only S-parameters are
known) is ``None`` with a reason in :attr:`MetricSet.reasons`, never 0 or NaN.

Definitions (``Z = R + jX`` is the input impedance of the antenna port, ``S11`` its reflection
against the real reference ``z0_ohm``):

``resonance_mhz``
    ``Im Z = 0`` nearest the target, linearly interpolated between samples.
``match_mhz``
    Frequency of the smallest ``|S11|``, refined by a parabola through the three lowest samples.
``s11_db``, ``zin_re_ohm``, ``zin_im_ohm``
    At the target frequency (cubic-spline interpolation of ``Z`` between samples).
``bandwidth_mhz``, ``fractional_bandwidth``
    The contiguous ``|S11| <= -10 dB`` span that contains the match, its edges interpolated
    linearly in dB between samples; divided by the match frequency for the fractional one.
``q_factor``
    Yaghjian-Best ``Q_Z`` at ``resonance_mhz`` (:func:`yaghjian_best_q`).
``chu_ratio``
    ``q_factor`` over the Chu bound in McLean's form for the smallest sphere enclosing the
    antenna (:func:`chu_bound`). The bound holds for lossless antennas; conductor loss lowers
    Q (roughly ``Q ~ efficiency x Q_lossless``), so a lossy filament may show a ratio below 1.
``efficiency``, ``gain_dbi``
    Radiated over accepted power; peak IEEE gain at the target (from the solver).
``gamma_closed``, ``gamma_open``
    ``|Gamma|`` of each switch load against the antenna (power waves, Kurokawa 1965).
``modulation_depth``, ``modulation_factor``
    ``|Gamma_closed - Gamma_open| / 2`` and its square (Griffin & Durgin 2009).
``delta_rcs_dbsm``
    ``10 log10(lambda^2 G^2 |Gamma_closed - Gamma_open|^2 / (4 pi) / 1 m^2)`` with the peak
    gain (Nikitin, Rao & Martinez 2007; no factor 1/4, see :mod:`sweeps.backscatter`).
``read_range_m``
    Monostatic backscatter link range with the reader of the design
    (:func:`sweeps.backscatter.read_range`). An estimate; regulatory and exposure cautions in
    :data:`sweeps.backscatter.READ_RANGE_CAUTION`.

Band arrays (:attr:`MetricSet.arrays`, all shape (F,)): ``f_hz``, ``zin`` (ohm), ``s11``,
``z_closed``, ``z_open`` (switch loads, ohm), ``gamma_closed``, ``gamma_open`` (complex),
``modulation_depth``, ``modulation_factor`` and, from the solver, ``efficiency``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from sweeps import backscatter
from sweeps.design import Reader, SwitchStates
from sweeps.errors import ConfigError
from sweeps.materials import C0

__all__ = [
    "ARRAY_NAMES",
    "METRIC_NAMES",
    "METRIC_UNITS",
    "MetricSet",
    "band_edges",
    "chu_bound",
    "compute_metrics",
    "impedance_slope",
    "resonances_hz",
    "s11_from_z",
    "yaghjian_best_q",
]

#: Every metric, in the order of DESIGN.md (JSON keys, table columns).
METRIC_NAMES: tuple[str, ...] = (
    "resonance_mhz",
    "match_mhz",
    "s11_db",
    "bandwidth_mhz",
    "fractional_bandwidth",
    "q_factor",
    "chu_ratio",
    "efficiency",
    "gain_dbi",
    "zin_re_ohm",
    "zin_im_ohm",
    "gamma_closed",
    "gamma_open",
    "modulation_depth",
    "modulation_factor",
    "delta_rcs_dbsm",
    "read_range_m",
)

#: Unit of every metric (for tables and reports); "1" means dimensionless.
METRIC_UNITS: dict[str, str] = {
    "resonance_mhz": "MHz",
    "match_mhz": "MHz",
    "s11_db": "dB",
    "bandwidth_mhz": "MHz",
    "fractional_bandwidth": "1",
    "q_factor": "1",
    "chu_ratio": "1",
    "efficiency": "1",
    "gain_dbi": "dBi",
    "zin_re_ohm": "ohm",
    "zin_im_ohm": "ohm",
    "gamma_closed": "1",
    "gamma_open": "1",
    "modulation_depth": "1",
    "modulation_factor": "1",
    "delta_rcs_dbsm": "dBsm",
    "read_range_m": "m",
}

#: Names of the band arrays in :attr:`MetricSet.arrays` (``efficiency`` only from the solver).
ARRAY_NAMES: tuple[str, ...] = (
    "f_hz", "zin", "s11", "z_closed", "z_open", "gamma_closed", "gamma_open",
    "modulation_depth", "modulation_factor", "efficiency",
)

#: Largest estimated relative error of the impedance slope accepted for ``q_factor``.
Q_SLOPE_TOLERANCE = 0.02

#: The -10 dB threshold of ``bandwidth_mhz``.
BANDWIDTH_S11_DB = -10.0


@dataclass
class MetricSet:
    """Scalar metrics with reasons for the missing ones, and band arrays for plots and the API.

    Attributes
    ----------
    values : dict
        Metric name -> float, or ``None`` when the metric does not exist for the design.
    reasons : dict
        Metric name -> why it is ``None`` (only for ``None`` values).
    notes : dict
        Metric name -> a remark on a value that exists (what limits the read range, the
        estimated accuracy of Q).
    arrays : dict
        Band arrays, see :data:`ARRAY_NAMES`.
    """

    values: dict[str, float | None] = field(default_factory=dict)
    reasons: dict[str, str] = field(default_factory=dict)
    arrays: dict[str, NDArray] = field(default_factory=dict)
    notes: dict[str, str] = field(default_factory=dict)

    def set(self, name: str, value: float | None, reason: str = "") -> None:
        """Store ``value`` (``None`` or non-finite become ``None`` with ``reason``)."""
        if value is None or not np.isfinite(value):
            self.values[name] = None
            self.reasons[name] = reason or "not defined for this design"
            self.notes.pop(name, None)
        else:
            self.values[name] = float(value)
            self.reasons.pop(name, None)

    def ordered(self) -> dict[str, float | None]:
        """The values in :data:`METRIC_NAMES` order (names not computed are ``None``)."""
        return {name: self.values.get(name) for name in METRIC_NAMES}


# --------------------------------------------------------------------------- helpers


def s11_from_z(zin: NDArray[np.complex128], z0_ohm: float) -> NDArray[np.complex128]:
    """Reflection coefficient against a real reference ``z0_ohm``: ``(Z - Z0)/(Z + Z0)``."""
    return (zin - z0_ohm) / (zin + z0_ohm)


class _GridSpline:
    """scipy's not-a-knot ``CubicSpline`` of band data, as the linear map it is.

    The spline's piecewise coefficients are a linear function of the data, so the map from data
    to coefficients is built once per frequency grid (as the spline of the identity matrix) and
    each band array then costs a small matrix product. Same spline as
    ``scipy.interpolate.CubicSpline(f_hz, y)`` up to rounding
    (``tests/sweeps/test_spline_map.py``).
    """

    def __init__(self, x: NDArray[np.float64], y: NDArray, maps: NDArray[np.float64]) -> None:
        self.x = x
        self.y = y
        self._maps = maps  # (4, F-1, F): coefficient k of interval i = maps[k, i] @ y

    @property
    def c(self) -> NDArray:
        """Coefficients (4, F-1), highest power first, as ``CubicSpline.c``."""
        return self._maps @ self.y

    def coefficients(self, intervals: NDArray[np.int64]) -> NDArray:
        """Coefficients (4, len(intervals)) of the given intervals only."""
        return self._maps[:, intervals, :] @ self.y

    def __call__(self, t: float) -> complex:
        i = min(max(int(np.searchsorted(self.x, t, side="right")) - 1, 0), len(self.x) - 2)
        c = self._maps[:, i, :] @ self.y
        s = t - self.x[i]
        return c[3] + c[2] * s + c[1] * (s * s) + c[0] * (s * s * s)


@lru_cache(maxsize=16)
def _spline_maps(grid: bytes) -> NDArray[np.float64]:
    from scipy.interpolate import CubicSpline

    x = np.frombuffer(grid, dtype=float)
    maps = CubicSpline(x, np.eye(len(x))).c  # (4, F-1, F)
    maps.setflags(write=False)
    return maps


def _zin_spline(f_hz: NDArray[np.float64], zin: NDArray[np.complex128]) -> _GridSpline | None:
    """Cubic spline (not-a-knot, scipy) of a complex band array, or ``None`` below 4 samples.

    The spline is linear in the data, so its imaginary part is the spline of ``Im Zin``: one
    spline serves the resonance search and the values at the target.
    """
    if len(f_hz) < 4:
        return None
    x = np.ascontiguousarray(f_hz, dtype=float)
    return _GridSpline(x, zin, _spline_maps(x.tobytes()))


def resonances_hz(
    f_hz: NDArray[np.float64], zin: NDArray[np.complex128], *, spline: object | None = None
) -> NDArray[np.float64]:
    """Frequencies where ``Im Zin`` changes sign between samples.

    Each root is found between the two samples that bracket it on a cubic spline of the
    reactance (with 4 or more samples), otherwise by linear interpolation. The spline passes
    through the samples, so the bracket holds and the root stays between them. ``spline`` is
    the complex spline of ``zin`` if already built (:func:`_zin_spline`).
    """
    x = np.imag(zin)
    idx = np.nonzero(np.signbit(x[:-1]) != np.signbit(x[1:]))[0]
    f0, f1 = f_hz[idx], f_hz[idx + 1]
    x0, x1 = x[idx], x[idx + 1]
    linear = f0 - x0 * (f1 - f0) / (x1 - x0)
    if len(f_hz) < 4 or not len(idx):
        return linear
    from scipy.optimize import brentq

    if spline is None:
        spline = _zin_spline(f_hz, zin)
    if isinstance(spline, _GridSpline):
        coef = spline.coefficients(idx).imag  # the cubic of each bracket
    else:
        coef = spline.c[:, idx, ...].imag.reshape(4, len(idx))
    roots = linear.copy()
    for k, (a, b, xa, xb) in enumerate(zip(f0, f1, x0, x1, strict=True)):
        if xa == 0.0:
            roots[k] = a
            continue
        if xb == 0.0:
            roots[k] = b
            continue
        c3, c2, c1, c0 = (float(v) for v in coef[:, k])

        def piece(t: float, a: float = a, b: float = b, xb: float = xb, c0: float = c0,
                  c1: float = c1, c2: float = c2, c3: float = c3) -> float:
            # the spline between the samples a and b (at b itself: the sample, as the spline is
            # evaluated there), summed in the order scipy's PPoly uses
            if t == b:
                return xb
            s = t - a
            return c0 + c1 * s + c2 * (s * s) + c3 * (s * s * s)

        if np.signbit(piece(a)) != np.signbit(piece(b)):  # round-off can spoil the bracket
            roots[k] = brentq(piece, a, b, xtol=1e-9 * b, rtol=1e-14)
    return roots


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


def _at(f_hz: NDArray[np.float64], values: NDArray[np.complex128], at_hz: float,
        spline: object | None = None) -> complex:
    """Cubic-spline value of a complex band array at ``at_hz`` (exact on the samples).

    ``spline`` is the spline of ``values`` if already built (:func:`_zin_spline`).
    """
    if len(f_hz) < 4:
        return complex(np.interp(at_hz, f_hz, values.real) + 1j * np.interp(at_hz, f_hz,
                                                                             values.imag))
    if spline is None:
        spline = _zin_spline(f_hz, values)
    return complex(spline(at_hz))


def band_edges(
    f_hz: NDArray[np.float64], level_db: NDArray[np.float64], threshold_db: float, index: int
) -> tuple[float, float] | str:
    """Edges of the contiguous span where ``level_db <= threshold_db`` that contains ``index``.

    The edges are interpolated linearly in dB between the last sample inside and the first
    outside.

    Parameters
    ----------
    f_hz : ndarray, shape (F,)
        Increasing frequencies in Hz.
    level_db : ndarray, shape (F,)
        The level in dB (for example ``20 log10 |S11|``).
    threshold_db : float
    index : int
        A sample inside the span (the match).

    Returns
    -------
    (f_low_hz, f_high_hz) or str
        The edges, or the reason why there is no closed span (the sample is above the
        threshold, or the span runs into an end of the sweep).
    """
    if not level_db[index] <= threshold_db:
        return (f"|S11| never reaches {threshold_db:g} dB in the band "
                f"(best {level_db[index]:.2f} dB)")
    n = len(f_hz)
    lo = index
    while lo > 0 and level_db[lo - 1] <= threshold_db:
        lo -= 1
    hi = index
    while hi < n - 1 and level_db[hi + 1] <= threshold_db:
        hi += 1
    if lo == 0 or hi == n - 1:
        end = f_hz[0] if lo == 0 else f_hz[-1]
        return (f"the {threshold_db:g} dB band runs past the sweep edge at "
                f"{end / 1e6:g} MHz; widen the band")

    def cross(i_in: int, i_out: int) -> float:
        y_in, y_out = level_db[i_in], level_db[i_out]
        t = (threshold_db - y_in) / (y_out - y_in)
        return float(f_hz[i_in] + t * (f_hz[i_out] - f_hz[i_in]))

    return cross(lo, lo - 1), cross(hi, hi + 1)


def impedance_slope(
    f_hz: NDArray[np.float64], z: NDArray[np.complex128], at_hz: float, points: int = 7
) -> tuple[complex, complex, float]:
    """``Z`` and ``dZ/d omega`` at ``at_hz`` from the sampled impedance, with an error estimate.

    The slope comes from a least-squares cubic through the ``points`` samples nearest
    ``at_hz`` (the window moves inward at the band edges), in the scaled variable
    ``u = (omega - omega_at) / h`` for conditioning. A cubic rather than an interpolating
    polynomial keeps some smoothing for measured (noisy) data. For smooth ``Z`` sampled at
    spacing ``h`` its error falls as ``h^3`` (``h^4`` when ``at_hz`` sits on a sample in the
    middle of the window). The error is estimated as the difference from a quintic through the
    same samples, whose own error is of higher order: on a shorted-stub impedance
    ``j Zc tan(omega tau)`` the estimate is within a few per cent of the true error of the cubic
    from 4 % down to 0.25 % steps (``tests/sweeps/test_metrics_q.py``). Noise in the data
    shows up in the estimate too.

    Parameters
    ----------
    f_hz : ndarray, shape (F,), increasing, F >= 3
    z : ndarray, shape (F,), complex, ohm
    at_hz : float
    points : int
        Samples in the fit window (at least 5; 7 lets the quintic estimate work fully).

    Returns
    -------
    z_at : complex
        Fitted impedance at ``at_hz`` (ohm).
    dz_domega : complex
        Slope in ohm s/rad.
    rel_error : float
        Estimated relative error of the slope.
    """
    n = len(f_hz)
    w = 2.0 * np.pi * np.asarray(f_hz, dtype=float)
    w_at = 2.0 * np.pi * at_hz
    m = min(points, n)
    idx = np.sort(np.argsort(np.abs(w - w_at), kind="stable")[:m])
    w_win = w[idx]
    h = float((w_win[1:] - w_win[:-1]).sum() / (m - 1))  # the mean spacing
    u = (w_win - w_at) / h
    z_win = np.asarray(z)[idx]
    # the powers of u once for both fits (np.vander's columns are the same for any degree)
    powers = np.vander(u, min(5, m - 1) + 1, increasing=True)

    def fit(degree: int) -> tuple[complex, complex]:
        deg = min(degree, m - 1)
        vander = np.ascontiguousarray(powers[:, : deg + 1])
        if m > deg + 1:  # least squares by the normal equations (u is scaled: well conditioned)
            coef = np.linalg.solve(vander.T @ vander, vander.T @ z_win)
        else:
            coef, *_ = np.linalg.lstsq(vander, z_win, rcond=None)
        return complex(coef[0]), complex(coef[1] / h)

    z_at, slope = fit(3)
    _, slope_high = fit(5)
    rel = abs(slope - slope_high) / max(abs(slope), 1e-300)
    return z_at, slope, float(rel)


def yaghjian_best_q(
    f_hz: NDArray[np.float64], z: NDArray[np.complex128], at_hz: float
) -> tuple[float, float]:
    """Yaghjian-Best quality factor ``Q_Z`` of an antenna at ``at_hz``.

    ``Q_Z(omega0) = (omega0 / 2R) sqrt(R'^2 + (X' + |X|/omega0)^2)`` with ``' = d/d omega``, from
    the untuned input impedance (A. D. Yaghjian and S. R. Best, "Impedance, bandwidth, and Q of
    antennas", IEEE Trans. AP 53(4), 1298-1324, 2005, section V). At a resonance ``X = 0``; the
    ``|X|/omega0`` term is the series tuning element needed elsewhere. It equals the exact Q of a
    series RLC (``omega0 L / R``) and of a parallel RLC (``omega0 C R``) at resonance.

    Returns
    -------
    q : float
        ``Q_Z`` (dimensionless); ``nan`` when ``R <= 0``.
    rel_error : float
        Estimated relative error from the numerical slope (:func:`impedance_slope`).
    """
    z_at, slope, rel = impedance_slope(f_hz, z, at_hz)
    w0 = 2.0 * np.pi * at_hz
    r, x = z_at.real, z_at.imag
    if not r > 0:
        return math.nan, rel
    q = w0 / (2.0 * r) * math.hypot(slope.real, slope.imag + abs(x) / w0)
    return float(q), rel


def chu_bound(ka: float) -> float:
    """Chu lower bound on Q in McLean's form for one linearly polarised mode.

    ``Q_min = 1/(ka)^3 + 1/(ka)`` for an antenna inside a sphere of radius ``a`` at wavenumber
    ``k`` (L. J. Chu, J. Appl. Phys. 19, 1948; J. S. McLean, "A re-examination of the
    fundamental limits on the radiation Q of electrically small antennas", IEEE Trans. AP 44(5),
    672-676, 1996). Holds for lossless antennas.
    """
    return 1.0 / ka**3 + 1.0 / ka


# --------------------------------------------------------------------------- assembly

_REASON_EFFICIENCY = "efficiency needs currents (not available from S-parameters)"
_REASON_GAIN = "gain needs fields (not available from S-parameters)"
_REASON_RADIUS = ("chu_ratio needs the antenna's size (the sphere enclosing it), which "
                  "S-parameters do not carry")


def _check_inputs(f_hz: NDArray[np.float64], zin: NDArray[np.complex128], target_hz: float,
                  z0_ohm: float) -> None:
    if f_hz.ndim != 1 or zin.shape != f_hz.shape or len(f_hz) < 1:
        raise ConfigError(
            f"metrics: f_hz and zin must be 1-D of equal length (got {f_hz.shape}, {zin.shape})"
        )
    if not (np.isfinite(f_hz).all() and np.isfinite(zin).all()):
        raise ConfigError("metrics: frequencies and impedances must be finite")
    if (f_hz[1:] <= f_hz[:-1]).any() or f_hz[0] <= 0:  # np.diff(f_hz) <= 0
        raise ConfigError("metrics: frequencies must be positive and strictly increasing")
    if not (f_hz[0] * (1 - 1e-12) <= target_hz <= f_hz[-1] * (1 + 1e-12)):
        raise ConfigError(
            f"band.target_mhz: {target_hz / 1e6:g} MHz lies outside the data "
            f"({f_hz[0] / 1e6:g}-{f_hz[-1] / 1e6:g} MHz)"
        )
    if not (z0_ohm > 0 and math.isfinite(z0_ohm)):
        raise ConfigError(f"feed.z0_ohm: must be > 0 (got {z0_ohm!r})")


def compute_metrics(
    f_hz: NDArray[np.float64],
    zin: NDArray[np.complex128],
    *,
    target_hz: float,
    z0_ohm: float = 50.0,
    efficiency: NDArray[np.float64] | None = None,
    gain_dbi: float | None = None,
    enclosing_radius_m: float | None = None,
    switch: SwitchStates | None = None,
    reader: Reader | None = None,
    reasons: Mapping[str, str] | None = None,
) -> MetricSet:
    """Every metric of :data:`METRIC_NAMES` for one design at ``target_hz``.

    Parameters
    ----------
    f_hz : ndarray, shape (F,)
        Positive, strictly increasing frequencies in Hz.
    zin : ndarray, shape (F,)
        Input impedance of the antenna port in ohm.
    target_hz : float
        Frequency of the point metrics in Hz (within the sweep).
    z0_ohm : float
        Real reference impedance of S11 in ohm.
    efficiency : ndarray, shape (F,), optional
        Radiation efficiency over the band (needs currents; ``None`` for S-parameter data).
    gain_dbi : float, optional
        Peak IEEE gain at ``target_hz`` in dBi (needs fields).
    enclosing_radius_m : float, optional
        Radius of the smallest sphere enclosing the antenna in m (for ``chu_ratio``).
    switch : SwitchStates, optional
        The two loads of the switch; without them the switch metrics are ``None``.
    reader : Reader, optional
        The reader of the link; without it ``read_range_m`` is ``None``.
    reasons : mapping, optional
        Reasons to use instead of the defaults for inputs that are missing (keys
        ``"efficiency"``, ``"gain_dbi"``, ``"chu_ratio"``).

    Returns
    -------
    MetricSet
        All of :data:`METRIC_NAMES` in ``values``; the band arrays in ``arrays``.
    """
    f_hz = np.asarray(f_hz, dtype=float)
    zin = np.asarray(zin, dtype=complex)
    _check_inputs(f_hz, zin, target_hz, z0_ohm)
    why = {"efficiency": _REASON_EFFICIENCY, "gain_dbi": _REASON_GAIN,
           "chu_ratio": _REASON_RADIUS}
    why.update(reasons or {})
    ms = MetricSet()
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        s11 = s11_from_z(zin, z0_ohm)
        mag = np.abs(s11)
        ms.arrays.update(f_hz=f_hz, zin=zin, s11=s11)
        spline = _zin_spline(f_hz, zin)
        zt = _at(f_hz, zin, target_hz, spline)
        _impedance_metrics(ms, f_hz, zin, mag, target_hz, z0_ohm, spline, zt)
        _q_metrics(ms, f_hz, zin, enclosing_radius_m, why["chu_ratio"])
        if efficiency is None:
            ms.set("efficiency", None, why["efficiency"])
        else:
            eff = np.asarray(efficiency, dtype=float)
            ms.arrays["efficiency"] = eff
            ms.set("efficiency", float(np.interp(target_hz, f_hz, eff)),
                   "efficiency is not finite (accepted power <= 0)")
        if gain_dbi is None:
            ms.set("gain_dbi", None, why["gain_dbi"])
        else:
            ms.set("gain_dbi", gain_dbi, "gain is not finite (accepted power <= 0)")
        _switch_metrics(ms, f_hz, zin, target_hz, switch, gain_dbi, reader, zt)
    for name in METRIC_NAMES:  # every name present, even if a branch above skipped it
        if name not in ms.values:
            ms.set(name, None, "not computed")
    return ms


def _impedance_metrics(ms: MetricSet, f_hz: NDArray[np.float64], zin: NDArray[np.complex128],
                       mag: NDArray[np.float64], target_hz: float, z0_ohm: float,
                       spline: object | None, zt: complex) -> None:
    res = resonances_hz(f_hz, zin, spline=spline)
    if len(res):
        ms.set("resonance_mhz", float(res[np.argmin(np.abs(res - target_hz))]) / 1e6)
    else:
        ms.set("resonance_mhz", None, "Im Zin does not cross zero inside the band")
    f_match = _match(f_hz, mag)
    ms.set("match_mhz", f_match / 1e6)
    st = (zt - z0_ohm) / (zt + z0_ohm)
    ms.set("s11_db", 20.0 * np.log10(abs(st)) if abs(st) > 0 else None,
           "S11 is exactly 0 at the target (perfect match): no finite dB value")
    ms.set("zin_re_ohm", zt.real)
    ms.set("zin_im_ohm", zt.imag)
    level_db = 20.0 * np.log10(np.maximum(mag, 1e-300))
    edges = band_edges(f_hz, level_db, BANDWIDTH_S11_DB, int(np.argmin(mag)))
    if isinstance(edges, str):
        ms.set("bandwidth_mhz", None, edges)
        ms.set("fractional_bandwidth", None, edges)
    else:
        bw = edges[1] - edges[0]
        ms.set("bandwidth_mhz", bw / 1e6)
        ms.set("fractional_bandwidth", bw / f_match)
        ms.notes["bandwidth_mhz"] = (f"|S11| <= {BANDWIDTH_S11_DB:g} dB from "
                                     f"{edges[0] / 1e6:.3f} to {edges[1] / 1e6:.3f} MHz")


def _q_metrics(ms: MetricSet, f_hz: NDArray[np.float64], zin: NDArray[np.complex128],
               radius_m: float | None, no_radius: str) -> None:
    f0_mhz = ms.values.get("resonance_mhz")
    if f0_mhz is None:
        reason = "q_factor is defined at resonance_mhz, and Im Zin does not cross zero in the band"
        ms.set("q_factor", None, reason)
        ms.set("chu_ratio", None, reason)
        return
    if len(f_hz) < 5:
        reason = f"q_factor needs at least 5 samples around the resonance (got {len(f_hz)})"
        ms.set("q_factor", None, reason)
        ms.set("chu_ratio", None, reason)
        return
    f0 = f0_mhz * 1e6
    q, rel = yaghjian_best_q(f_hz, zin, f0)
    if not np.isfinite(q):
        reason = f"Re Zin <= 0 at the resonance {f0_mhz:.6g} MHz: Q_Z is not defined"
        ms.set("q_factor", None, reason)
        ms.set("chu_ratio", None, reason)
        return
    if rel > Q_SLOPE_TOLERANCE:
        reason = (f"the slope of Zin at the resonance {f0_mhz:.6g} MHz is uncertain by "
                  f"{100 * rel:.1f} % (band too coarse or data noisy): Q would be unreliable; "
                  "add points near the resonance")
        ms.set("q_factor", None, reason)
        ms.set("chu_ratio", None, reason)
        return
    ms.set("q_factor", q)
    ms.notes["q_factor"] = f"estimated relative error of the slope {rel:.1e}"
    if radius_m is None:
        ms.set("chu_ratio", None, no_radius)
        return
    if not (radius_m > 0 and math.isfinite(radius_m)):
        ms.set("chu_ratio", None, f"the enclosing radius must be > 0 m (got {radius_m!r})")
        return
    ka = 2.0 * np.pi * f0 / C0 * radius_m
    ms.set("chu_ratio", q / chu_bound(ka))
    ms.notes["chu_ratio"] = (f"ka = {ka:.4g} at the resonance, Chu-McLean Q_min = "
                             f"{chu_bound(ka):.4g}")


def _switch_metrics(ms: MetricSet, f_hz: NDArray[np.float64], zin: NDArray[np.complex128],
                    target_hz: float, switch: SwitchStates | None, gain_dbi: float | None,
                    reader: Reader | None, za: complex) -> None:
    names = ("gamma_closed", "gamma_open", "modulation_depth", "modulation_factor",
             "delta_rcs_dbsm", "read_range_m")
    if switch is None:
        for name in names:
            ms.set(name, None, "needs the two switch loads ([switch] closed/open)")
        return
    z_closed = switch.closed.impedance(f_hz)
    z_open = switch.open.impedance(f_hz)
    g_closed = backscatter.power_wave_gamma(z_closed, zin)
    g_open = backscatter.power_wave_gamma(z_open, zin)
    ms.arrays.update(
        z_closed=z_closed, z_open=z_open, gamma_closed=g_closed, gamma_open=g_open,
        modulation_depth=backscatter.modulation_depth(g_closed, g_open),
        modulation_factor=backscatter.modulation_factor(g_closed, g_open),
    )
    if not za.real > 0:
        reason = (f"Re Zin = {za.real:.4g} ohm <= 0 at the target: power-wave reflection "
                  "coefficients need a positive antenna resistance")
        for name in names:
            ms.set(name, None, reason)
        return
    gc = complex(backscatter.power_wave_gamma(switch.closed.impedance(target_hz), za))
    go = complex(backscatter.power_wave_gamma(switch.open.impedance(target_hz), za))
    ms.set("gamma_closed", abs(gc))
    ms.set("gamma_open", abs(go))
    ms.set("modulation_depth", float(backscatter.modulation_depth(gc, go)))
    ms.set("modulation_factor", float(backscatter.modulation_factor(gc, go)))
    if gain_dbi is None or not math.isfinite(gain_dbi):
        reason = ("delta_rcs_dbsm needs the antenna gain (fields), not available from "
                  "S-parameters")
        ms.set("delta_rcs_dbsm", None, reason)
        ms.set("read_range_m", None, "read_range_m needs delta_rcs_dbsm: " + reason)
        return
    sigma = float(backscatter.differential_rcs_m2(target_hz, 10.0 ** (gain_dbi / 10.0), gc, go))
    if not sigma > 0:
        reason = "the two switch states reflect identically (Gamma_closed = Gamma_open)"
        ms.set("delta_rcs_dbsm", None, reason)
        ms.set("read_range_m", None, reason)
        return
    ms.set("delta_rcs_dbsm", 10.0 * math.log10(sigma))
    if reader is None:
        ms.set("read_range_m", None, "read_range_m needs a reader ([reader] tx_power_dbm, "
                                     "antenna_gain_dbi, sensitivity_dbm, cancellation_db)")
        return
    rr = backscatter.read_range(target_hz, sigma, reader)
    ms.set("read_range_m", rr.range_m)
    floor_dbm = 10.0 * math.log10(rr.floor_w / 1e-3)
    what = "residual carrier after cancellation" if rr.limited_by == "carrier" else \
        "receiver sensitivity"
    # the cautions themselves are sweeps.backscatter.READ_RANGE_CAUTION (shown by the callers)
    ms.notes["read_range_m"] = (f"limited by the {what} ({floor_dbm:.1f} dBm); an estimate: "
                                "see the regulatory and exposure cautions")
