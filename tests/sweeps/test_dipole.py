"""Thin dipoles: closed forms, the one-mode Galerkin reduction, resonance and convergence."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from sweeps.closedform import induced_emf_dipole, short_dipole_resistance
from sweeps.geometry import CrossSection, Port, Structure, Wire
from sweeps.materials import C0
from sweeps.mom.solve import Solver, SolverSettings

F0 = 300e6
LAM = C0 / F0


def dipole(length, radius, segments=None, sigma=math.inf, gap=0.0):
    w = Wire(np.array([[0, 0, -length / 2], [0, 0, length / 2]]), CrossSection.round_wire(radius),
             sigma, segments=segments)
    return Structure([w], ports=[Port([0, 0, 0], gap_m=gap)])


def test_induced_emf_closed_form_half_wave():
    # Balanis 3rd ed. eqs. 8-60, 8-61 (memory): 73.079 + j42.515 ohm with eta0 (REFERENCES.md)
    z = induced_emf_dipole(LAM / 2, 1e-3 * LAM, LAM)
    assert z.real == pytest.approx(73.079, abs=5e-4)
    assert z.imag == pytest.approx(42.515, abs=5e-4)


@pytest.mark.parametrize("length_l", [0.1, 0.3, 0.5])
def test_one_mode_galerkin_reduction_reproduces_induced_emf(length_l):
    # With a single sinusoidal current mode I(z) = sin(k(l/2 - |z|)) expanded in the triangle
    # bases, the Rayleigh quotient I^T Z I / I(0)^2 of the MoM matrix IS the induced-EMF method
    # (filament current, field on the surface = the reduced kernel). It must reproduce Balanis
    # eqs. 8-60/8-61 up to the O(delta^2) error of interpolating the sinusoid linearly.
    length, a = length_l * LAM, 1e-3 * LAM
    solver = Solver(dipole(length, a, segments=40), F0,
                    SolverSettings(kernel="reduced", end_caps=False))
    z_mat = solver.fill.efie_direct(np.array([F0]))[0]
    zn = solver.mesh.nodes[solver.mesh.basis_node][:, 2]
    k = 2 * math.pi / LAM
    cur = np.sin(k * (length / 2 - np.abs(zn)))
    z1 = cur @ z_mat @ cur / math.sin(k * length / 2) ** 2
    ref = induced_emf_dipole(length, a, LAM)
    assert z1.real == pytest.approx(ref.real, rel=2e-3)  # R: insensitive to the kernel details
    assert z1.imag == pytest.approx(ref.imag, rel=1.5e-2, abs=0.5)  # X: 40 segments, O(delta^2)


def test_short_dipole_radiation_resistance_finite_gap():
    # R = 20 pi^2 (l/lambda)^2 for the triangular current of a short dipole (Balanis eq. 4-37,
    # memory). A finite feed gap (here 0.005 lambda, resolved by the mesh) keeps the gap
    # capacitance finite; the remaining difference is the departure of the real current from the
    # triangle on a wire of finite radius (Omega = 2 ln(l/a) = 9.2): within 4 %.
    length = 0.1 * LAM
    ref = short_dipole_resistance(length, LAM) * (376.730313 / (120 * math.pi))
    for n in (40, 80):
        z = Solver(dipole(length, 1e-3 * LAM, segments=n, gap=0.005 * LAM), F0).solve([F0]).z
        assert z[0, 0, 0].real == pytest.approx(ref, rel=0.04)


def test_short_dipole_delta_gap_approaches_formula_as_wire_thins():
    # With a delta gap the feed's capacitive current does not radiate; its share falls as the
    # wire thins, so the deviation from 20 pi^2 (l/lambda)^2 must shrink with Omega = 2 ln(l/a)
    # (King's thin-wire theory, corrections in powers of 1/Omega; from memory).
    length = 0.1 * LAM
    ref = short_dipole_resistance(length, LAM) * (376.730313 / (120 * math.pi))
    dev = []
    for a_l in (1e-4, 1e-5, 1e-6, 1e-7):
        z = Solver(dipole(length, a_l * LAM, segments=20), F0).solve([F0]).z[0, 0, 0]
        dev.append(abs(z.real / ref - 1))
    assert all(d1 < d0 for d0, d1 in zip(dev, dev[1:], strict=False))
    assert dev[-1] < 0.03


def resonance(structure, f_lo, f_hi, settings=None):
    solver = Solver(structure, f_hi, settings)

    def x(f):
        return solver.solve([f]).z[0, 0, 0].imag

    f_res = brentq(x, f_lo, f_hi, xtol=1e-3 * 1e-6 * F0)
    return f_res, solver.solve([f_res]).z[0, 0, 0].real


def test_resonant_length_of_thin_half_wave_dipole():
    # 0.47-0.48 lambda (common practice; the induced-EMF form gives 0.4775 lambda at
    # a = 1e-3 lambda, computed in REFERENCES.md).
    f_res, r_res = resonance(dipole(0.5 * LAM, 1e-3 * LAM), 0.85 * F0, 1.05 * F0)
    length_over_lambda = 0.5 * f_res / F0
    assert 0.47 <= length_over_lambda <= 0.48
    # at resonance a thin dipole presents about 70 ohm (common practice; 65-75 ohm)
    assert 65 < r_res < 75


@pytest.mark.slow
def test_convergence_under_refinement():
    # Resonance of the same dipole at 20, 40, ..., 320 segments (exact kernel, end caps). We see
    # the successive differences fall by 3x-6x per doubling until the delta gap's logarithmic
    # capacitance takes over near 300 segments (Delta ~ 1.5 a): resonance is converged to
    # 0.02 % from 40 segments (80 per wavelength) on; the default (40 per wavelength at the top
    # of the band) is within 0.1 %.
    s = dipole(0.5 * LAM, 1e-3 * LAM)
    f = [resonance(dipole(0.5 * LAM, 1e-3 * LAM, segments=n), 0.85 * F0, 1.05 * F0)[0]
         for n in (20, 40, 80, 160)]
    d = np.abs(np.diff(f))
    assert d[1] < d[0] / 2.5 and d[2] < 1e-4 * F0
    reference = f[-1]
    assert abs(f[1] / reference - 1) < 2e-4
    f_default = resonance(s, 0.85 * F0, 1.05 * F0)[0]
    assert abs(f_default / reference - 1) < 1e-3


def reference_settings():
    return SolverSettings(segments_per_wavelength=160, static_far=6, dynamic=5, near_outer=16,
                          near_phi=16)


def test_done_when_pec_dipole_150mm_against_converged_reference():
    # Issue 2 "done when": a PEC dipole of 150 mm and 0.3 mm radius resonates within 0.5 % of a
    # converged reference and its input resistance at resonance agrees within 3 %. Reference:
    # 4x finer mesh and higher quadrature orders (the refinement study above shows 0.02 %).
    s = dipole(0.150, 0.3e-3)
    f_def, r_def = resonance(s, 8e8, 1.1e9)
    f_ref, r_ref = resonance(s, 8e8, 1.1e9, reference_settings())
    assert abs(f_def / f_ref - 1) < 0.005
    assert abs(r_def / r_ref - 1) < 0.03


def test_done_when_lossy_dipole_efficiency_against_converged_reference():
    # 1e4 S/m version: radiation efficiency at 1 GHz within 0.02 of a converged reference.
    s = dipole(0.150, 0.3e-3, sigma=1e4)
    eff_def = Solver(s, 1.1e9).solve([1e9]).efficiency[0, 0]
    eff_ref = Solver(s, 1.1e9, reference_settings()).solve([1e9]).efficiency[0, 0]
    assert 0.3 < eff_ref < 0.95  # a lossy filament dipole: well below 1 (sanity)
    assert abs(eff_def - eff_ref) < 0.02


@pytest.mark.parametrize("gap_l", [0.0, 0.004])
def test_interpolated_sweep_matches_direct_fills(gap_l):
    # Newman-style frequency interpolation (IEEE TAP 36(12), 1988) must agree with direct
    # fills: issue 8 target 0.5 %, we hold 1e-5 on Zin over a 2:1 band.
    solver = Solver(dipole(0.5 * LAM, 1e-3 * LAM, sigma=3e4, gap=gap_l * LAM), 1.4 * F0)
    f = np.linspace(0.7 * F0, 1.4 * F0, 61)
    e = solver.mesh.port_vectors[:, 0]
    extra = solver.fill.loss(f)
    zin = []
    for mat in (solver.fill.efie_direct(f), solver.fill.efie(f, interpolate=True)):
        cur = np.linalg.solve(mat + extra, np.broadcast_to(e, (len(f), len(e)))[..., None])
        zin.append(1 / (cur[..., 0] @ e))
    np.testing.assert_allclose(zin[1], zin[0], rtol=1e-5)
