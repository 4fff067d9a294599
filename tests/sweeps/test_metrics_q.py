"""Q factor, matched-VSWR bandwidth and the Chu bound.

Sources: A. D. Yaghjian and S. R. Best, IEEE Trans. AP 53(4), 1298-1324, 2005 (Q_Z and
FBW ~ (s - 1)/(Q sqrt(s)), section V); L. J. Chu, J. Appl. Phys. 19, 1948 and J. S. McLean,
IEEE Trans. AP 44(5), 1996 (Q_min = 1/(ka)^3 + 1/(ka)); closed forms of RLC circuits.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

from sweeps.design import Band, Design
from sweeps.evaluate import evaluate
from sweeps.geometry import CrossSection
from sweeps.materials import C0
from sweeps.metrics import (
    band_edges,
    chu_bound,
    compute_metrics,
    impedance_slope,
    resonances_hz,
    yaghjian_best_q,
)
from tests.sweeps.circuit_models import F0, parallel_rlc, series_rlc


def test_chu_bound_reference_values() -> None:
    # REFERENCES.md "Q and bandwidth" (computed from McLean's form)
    assert chu_bound(0.5) == pytest.approx(10.000, abs=5e-4)
    assert chu_bound(0.3) == pytest.approx(40.370, abs=5e-4)


@pytest.mark.parametrize("q", [5.0, 30.0, 100.0])
def test_q_series_rlc_exact(q: float) -> None:
    f = np.linspace(0.8 * F0, 1.2 * F0, 41)  # 1 % steps
    z = series_rlc(f, 50.0, q)
    f0 = resonances_hz(f, z)[0]
    assert f0 == pytest.approx(F0, rel=1e-9)
    got, rel = yaghjian_best_q(f, z, f0)
    # closed form Q = w0 L / R; the only error is the numerical slope of 1/w (h^3 or better)
    assert got == pytest.approx(q, rel=1e-5)
    assert rel < 1e-3


@pytest.mark.parametrize("q", [5.0, 20.0])
def test_q_parallel_rlc_exact(q: float) -> None:
    # Q_Z = (w0/2R)|Z'| and Z' = -j 2 C R^2 at resonance -> Q = w0 C R (closed form)
    f = np.linspace(0.8 * F0, 1.2 * F0, 401)  # 0.1 % steps: Z varies on the scale 1/(2Q)
    z = parallel_rlc(f, 2000.0, q)
    f0 = resonances_hz(f, z)[0]
    assert f0 == pytest.approx(F0, rel=1e-7)
    got, _ = yaghjian_best_q(f, z, f0)
    assert got == pytest.approx(q, rel=1e-4)


def test_slope_converges_at_third_order_or_better() -> None:
    """dZ/dw of a shorted line stub Z = 1 + j Zc tan(w tau) (non-polynomial, known slope)."""
    tau = 0.2 / F0
    zc = 100.0

    def stub(f: np.ndarray) -> np.ndarray:
        return 1.0 + 1j * zc * np.tan(2 * math.pi * f * tau)

    for offset, order in ((0.0, 3.5), (0.3, 2.7)):  # on a sample / 0.3 steps off the grid
        errors, estimates = [], []
        for step in (0.02, 0.01, 0.005):
            at = F0 * (1 + offset * step)
            exact = 1j * zc * tau / np.cos(2 * math.pi * at * tau) ** 2
            f = F0 * (1 + step * np.arange(-6, 7))
            _, slope, rel = impedance_slope(f, stub(f), at)
            errors.append(abs(slope - exact) / abs(exact))
            estimates.append(rel)
        rates = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
        # observed: about 4 on a sample (h^4) and 3 off the grid (h^3)
        assert np.all(rates > order), (offset, rates)
        # the error estimate tracks the true error (observed within 4 % at these steps)
        np.testing.assert_allclose(estimates, errors, rtol=0.1)
        assert errors[-1] < 1e-4


def test_q_none_when_band_too_coarse() -> None:
    f = np.linspace(0.8 * F0, 1.2 * F0, 21)  # 2 % steps across a resonance 0.25 % wide
    z = parallel_rlc(f, 2000.0, 200.0)
    ms = compute_metrics(f, z, target_hz=F0, z0_ohm=50.0)
    assert ms.values["q_factor"] is None
    assert "uncertain" in ms.reasons["q_factor"]
    assert ms.values["chu_ratio"] is None


def test_vswr_bandwidth_series_rlc_matches_closed_form() -> None:
    # exact for a series RLC referred to its own R: FBW = (s - 1)/(Q sqrt(s)); R = 50, Q = 30,
    # s = 2 -> 0.023570 (REFERENCES.md, computed)
    f = np.linspace(0.97 * F0, 1.03 * F0, 2000)  # even count: no sample exactly at F0
    z = series_rlc(f, 50.0, 30.0)
    s = 2.0
    gamma = np.abs((z - 50.0) / (z + 50.0))
    edges = band_edges(f, 20 * np.log10(gamma), 20 * math.log10((s - 1) / (s + 1)),
                       int(np.argmin(gamma)))
    assert not isinstance(edges, str)
    fbw = (edges[1] - edges[0]) / F0
    assert fbw == pytest.approx(0.023570, abs=2e-6)  # linear-in-dB edges on 3e-5 steps


def _vswr_fbw(f: np.ndarray, z: np.ndarray, f0: float, s: float) -> float:
    """Matched VSWR-s bandwidth at f0: series-tune X(f0) away, refer to R(f0) (Y&B sec. V)."""
    ff = np.linspace(f[0], f[-1], 8001)
    zz = CubicSpline(f, z)(ff)
    z0 = complex(CubicSpline(f, z)(f0))
    w, w0 = 2 * math.pi * ff, 2 * math.pi * f0
    if z0.imag < 0:  # series inductor L = -X/w0
        zz = zz + 1j * w * (-z0.imag / w0)
    elif z0.imag > 0:  # series capacitor 1/(w0 C) = X
        zz = zz - 1j / (w * (1 / (w0 * z0.imag)))
    gamma = np.abs((zz - z0.real) / (zz + z0.real))
    edges = band_edges(ff, 20 * np.log10(gamma), 20 * math.log10((s - 1) / (s + 1)),
                       int(np.argmin(np.abs(ff - f0))))
    assert not isinstance(edges, str), edges
    return (edges[1] - edges[0]) / f0


@pytest.fixture(scope="module")
def thin_dipole():
    """A 150 mm PEC dipole of 0.1 mm radius (thin: a ~ 3e-4 lambda), 5 MHz steps."""
    design = Design("dipole", {"length_m": 0.150}, CrossSection.round_wire(1e-4))
    ev = evaluate(design, Band(700e6, 1150e6, 91, 950e6))
    return ev


@pytest.mark.parametrize("s", [1.5, 2.0])
def test_thin_dipole_bandwidth_vs_q(thin_dipole, s: float) -> None:
    """FBW ~ (s - 1)/(Q sqrt(s)) (Yaghjian & Best 2005, eq. for matched VSWR bandwidth).

    The issue allows 10 %; the relation is asymptotic in 1/Q and we see about 0.5 % for this
    dipole (Q ~ 8) at s = 2, so 2 % leaves room for solver refinements, not for a wrong Q.
    """
    f, z = thin_dipole.f_hz, thin_dipole.zin
    f0 = thin_dipole.metrics.values["resonance_mhz"] * 1e6
    q = thin_dipole.metrics.values["q_factor"]
    fbw = _vswr_fbw(f, z, f0, s)
    assert fbw == pytest.approx((s - 1) / (q * math.sqrt(s)), rel=0.02)


@pytest.mark.parametrize("fraction", [0.8, 0.9])
def test_thin_dipole_bandwidth_vs_q_tuned_below_resonance(thin_dipole, fraction: float) -> None:
    """Below resonance the dipole is capacitive; Q_Z's |X|/w0 term is the tuning inductor."""
    f, z = thin_dipole.f_hz, thin_dipole.zin
    f0 = fraction * thin_dipole.metrics.values["resonance_mhz"] * 1e6
    q, _ = yaghjian_best_q(f, z, f0)
    assert q > thin_dipole.metrics.values["q_factor"]  # shorter electrically -> higher Q
    assert _vswr_fbw(f, z, f0, 2.0) == pytest.approx(1 / (q * math.sqrt(2)), rel=0.02)


@pytest.mark.parametrize("length_mm", [80.0, 150.0])
@pytest.mark.parametrize("width_mm", [0.5, 2.0, 5.0])
def test_no_dipole_beats_chu_bound(length_mm: float, width_mm: float) -> None:
    """Lossless (PEC) printed dipoles: chu_ratio >= 1 at resonance, and the tuned Q_Z below
    resonance (ka down to about 0.6) stays above Q_min too (Chu 1948, McLean 1996)."""
    f_res = 0.95 * C0 / (2 * length_mm * 1e-3)
    band = Band(0.4 * f_res, 1.15 * f_res, 61, f_res)
    design = Design("dipole", {"length_m": length_mm * 1e-3},
                    CrossSection.trace(width_mm * 1e-3, 0.4e-3))
    ev = evaluate(design, band)
    ratio = ev.metrics.values["chu_ratio"]
    assert ratio is not None and ratio >= 1.0
    a = ev.enclosing_radius_m
    for frac in (0.45, 0.6, 0.8):
        f = frac * f_res
        q, _ = yaghjian_best_q(ev.f_hz, ev.zin, f)
        assert q >= chu_bound(2 * math.pi * f / C0 * a)


@pytest.mark.parametrize("sigma", [1e4, 1e3])
def test_lossy_dipole_respects_efficiency_scaled_bound(sigma: float) -> None:
    """Loss lowers Q: the fair bound for a lossy antenna is efficiency x Q_min (common
    practice, e.g. Yaghjian & Best 2005 discuss Q of lossy antennas; not a strict theorem for
    Q_Z, which is why the metric is documented as a lossless bound)."""
    design = Design("dipole", {"length_m": 0.150}, CrossSection.trace(2e-3, 0.4e-3),
                    conductivity_s_per_m=sigma)
    ev = evaluate(design, Band(700e6, 1150e6, 46, 930e6))
    m = ev.metrics.values
    assert m["chu_ratio"] is not None
    assert m["chu_ratio"] / m["efficiency"] >= 1.0


_SEC = CrossSection.trace(1e-3, 0.4e-3)
_SHAPES = [
    ("meander-2-turns", Design("meander", {"length_m": 0.10, "turns": 2, "pitch_m": 4e-3,
                                           "height_m": 10e-3}, _SEC), Band(500e6, 1600e6, 56, 1e9)),
    ("meander-4-turns", Design("meander", {"length_m": 0.10, "turns": 4, "pitch_m": 4e-3,
                                           "height_m": 10e-3}, _SEC), Band(400e6, 1500e6, 56, 9e8)),
    ("folded", Design("folded", {"length_m": 0.15, "spacing_m": 10e-3}, _SEC),
     Band(700e6, 1200e6, 51, 915e6)),
    ("folded-wide", Design("folded", {"length_m": 0.12, "spacing_m": 20e-3},
                           CrossSection.trace(3e-3, 0.4e-3)), Band(800e6, 1500e6, 51, 1.1e9)),
    ("loop", Design("loop", {"circumference_m": 0.33}, _SEC), Band(600e6, 1300e6, 71, 915e6)),
]


@pytest.mark.parametrize(("design", "band"), [c[1:] for c in _SHAPES],
                         ids=[c[0] for c in _SHAPES])
def test_no_shape_beats_chu_bound(design: Design, band: Band) -> None:
    """The printed shapes of sweeps.shapes, lossless: chu_ratio >= 1 at resonance."""
    ev = evaluate(design, band)
    ratio = ev.metrics.values["chu_ratio"]
    assert ratio is not None, ev.metrics.reasons.get("chu_ratio")
    assert ratio >= 1.0
