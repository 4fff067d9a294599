"""Differential RCS by two routes through the solver.

Route 1 (metrics): Nikitin, Rao & Martinez, Electronics Letters 43(8), 2007,
``delta_sigma = lambda^2 G^2 |Gamma_closed - Gamma_open|^2 / (4 pi)`` with the power-wave
reflection coefficients (Kurokawa, IEEE Trans. MTT 13(2), 1965) and the co-polarised gain
towards the reader.

Route 2 (full scattering): a 1 V/m plane wave arrives from the peak-gain direction r_hat
(k_hat = -r_hat) polarised along the transmit field p; the MoM solves for the currents with
each switch load in the gap (``Solver.scatter(port_loads_ohm=...)``) and the monostatic
co-polarised scattered fields are subtracted:
``delta_sigma = 4 pi r^2 |E_s,closed - E_s,open|^2 / |E_i|^2
             = (eta k)^2 / (4 pi) |p . (A_closed - A_open)|^2``
(far field E = -j omega mu e^{-jkr}/(4 pi r) A_perp, omega mu = eta k).

Why they agree: with the MoM matrix Z and port vector e, the loaded currents are
``I(Z_L) = I_sc - I_1 (e^T I_sc) Z_a Z_L / (Z_a + Z_L)`` (Sherman-Morrison), so the structural
mode I_sc cancels in the difference, leaving ``-I_1 (e^T I_sc) Z_a^2 (G_c - G_o) / (2 R_a)``.
Reciprocity (symmetric Galerkin matrix, same quadrature for excitation and radiation) gives
``e^T I_sc = p . A_1``, and the co-polarised gain is ``eta k^2 |p . A_1|^2 |Z_a|^2 /
(4 pi R_a)``; substituting turns route 2 into route 1 exactly. The only differences left are
round-off, so the 1 % tolerance of the issue is generous; it must also hold with ohmic loss
(IEEE gain includes the efficiency) and with a finite gap.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeps.backscatter import differential_rcs_m2, power_wave_gamma
from sweeps.design import Band, Design, SwitchLoad, SwitchStates
from sweeps.evaluate import evaluate
from sweeps.geometry import CrossSection
from sweeps.materials import C0, ETA0
from sweeps.mom.fields import radiation_vector, rcs

BAND = Band(840e6, 990e6, 7, 915e6)  # 25 MHz steps, 915 MHz on the grid


def printed_dipole(sigma: float, gap_m: float = 0.0,
                   switch: SwitchStates | None = None) -> Design:
    return Design("dipole", {"length_m": 0.150}, CrossSection.trace(3e-3, 0.4e-3),
                  conductivity_s_per_m=sigma, gap_m=gap_m, switch=switch or SwitchStates())


def _two_routes(design: Design, band: Band = BAND) -> tuple[np.ndarray, np.ndarray, object]:
    """Delta sigma over the band from Gamma and gain, and from plane-wave scattering."""
    ev = evaluate(design, band, keep_solver=True)
    solver = ev.solver
    assert solver is not None
    f = ev.f_hz
    r_hat = ev.peak_direction
    sol = solver.solve(f)
    za = sol.z[:, 0, 0]
    z_closed = design.switch.closed.impedance(f)
    z_open = design.switch.open.impedance(f)
    routes_metrics, routes_mom = [], []
    for i, fi in enumerate(f):
        k = 2 * math.pi * fi / C0
        pol = _pol(solver, sol, fi, r_hat)
        # co-polarised gain towards r_hat: 4 pi U_co / P_in, U_co = eta k^2 |p.A|^2/(32 pi^2)
        a1 = radiation_vector(solver.points, sol.currents[i][:, 0], k, r_hat[None])[0, 0]
        u_co = ETA0 * k**2 * abs(np.dot(pol, a1)) ** 2 / (32 * math.pi**2)
        gain = 4 * math.pi * u_co / sol.p_in[i, 0]
        g_c = power_wave_gamma(z_closed[i], za[i])
        g_o = power_wave_gamma(z_open[i], za[i])
        routes_metrics.append(float(differential_rcs_m2(fi, gain, g_c, g_o)))
        # both switch states from one solve (a leading axis of load states)
        states = np.array([z_closed[i:i + 1, None], z_open[i:i + 1, None]])
        cur_c, cur_o = solver.scatter([fi], -r_hat, pol, states)[:, 0]
        routes_mom.append(float(rcs(solver.points, cur_c - cur_o, k, r_hat[None], pol)[0, 0]))
    return np.array(routes_metrics), np.array(routes_mom), ev


def _pol(solver, sol, f_hz, r_hat) -> np.ndarray:
    """Unit co-polarisation of the transmit far field towards r_hat (real for a dipole)."""
    i = int(np.argmin(np.abs(sol.f_hz - f_hz)))
    k = 2 * math.pi * f_hz / C0
    a = radiation_vector(solver.points, sol.currents[i][:, 0], k, r_hat[None])[0, 0]
    a_perp = a - np.dot(a, r_hat) * r_hat
    p = np.real(a_perp * np.exp(-1j * np.angle(a_perp[np.argmax(np.abs(a_perp))])))
    return p / np.linalg.norm(p)


@pytest.mark.parametrize(
    ("sigma", "gap_m"),
    [(math.inf, 0.0), (1e4, 0.0), (1e4, 1e-3)],
    ids=["pec-delta-gap", "1e4-delta-gap", "1e4-1mm-gap"],
)
def test_delta_rcs_two_routes_agree(sigma: float, gap_m: float) -> None:
    # default switch states (common practice values in sweeps.design)
    metrics_route, mom_route, ev = _two_routes(printed_dipole(sigma, gap_m))
    # tolerance: the 1 %; the identity is exact up to round-off (see module docstring)
    np.testing.assert_allclose(metrics_route, mom_route, rtol=0.01)
    np.testing.assert_allclose(metrics_route, mom_route, rtol=1e-6)
    # and the metric itself (peak gain at the target, on the band grid) uses the same formula
    it = int(np.argmin(np.abs(ev.f_hz - 915e6)))
    assert ev.metrics.values["delta_rcs_dbsm"] == pytest.approx(
        10 * math.log10(mom_route[it]), abs=0.01)


def test_delta_rcs_two_routes_reactive_states() -> None:
    """A short against an inductive contact: two states that differ mostly in phase."""
    switch = SwitchStates(closed=SwitchLoad(r_ohm=0.5), open=SwitchLoad(r_ohm=2.0, l_h=30e-9))
    metrics_route, mom_route, _ = _two_routes(printed_dipole(1e4, switch=switch))
    np.testing.assert_allclose(metrics_route, mom_route, rtol=1e-6)


@pytest.mark.parametrize(
    "design",
    [Design("meander", {"length_m": 0.10, "turns": 4, "pitch_m": 4e-3, "height_m": 10e-3},
            CrossSection.trace(1e-3, 0.4e-3), conductivity_s_per_m=1e4),
     Design("loop", {"circumference_m": 0.33}, CrossSection.trace(1e-3, 0.4e-3))],
    ids=["meander-1e4", "loop-pec"],
)
def test_delta_rcs_two_routes_other_shapes(design: Design) -> None:
    """Bent wires: the peak direction and polarisation are not the dipole's broadside x."""
    metrics_route, mom_route, _ = _two_routes(design)
    np.testing.assert_allclose(metrics_route, mom_route, rtol=1e-6)
