"""Parametric shapes: geometry checks, trade facts, default segmentation converged within 0.2 %."""

import math

import numpy as np
import pytest

from sweeps.design import Band, Design
from sweeps.errors import ConfigError
from sweeps.evaluate import evaluate
from sweeps.geometry import CrossSection
from sweeps.metrics import resonances_hz
from sweeps.mom.solve import Solver, SolverSettings
from sweeps.shapes import build_structure

TRACE = CrossSection.trace(1e-3, 0.4e-3)

# printed tags with a 1 mm switch gap (common practice for a printed contact gap)
DESIGNS = {
    "dipole": Design("dipole", {"length_m": 0.15}, CrossSection.trace(3e-3, 0.4e-3), 3e4,
                     gap_m=1e-3),
    "meander": Design("meander", {"length_m": 0.10, "turns": 3, "pitch_m": 4e-3,
                                  "height_m": 12e-3}, TRACE, 3e4, gap_m=1e-3),
    "folded": Design("folded", {"length_m": 0.15, "spacing_m": 6e-3}, TRACE, 3e4, gap_m=1e-3),
    "loop": Design("loop", {"circumference_m": 0.32}, TRACE, 3e4, gap_m=1e-3),
}


def first_resonance(design, band, settings=None, near_hz=None):
    """First zero crossing of Im Zin (or the one nearest ``near_hz``, as resonance_mhz does),
    bracketed on the band grid and refined by root finding with single-frequency solves."""
    from scipy.optimize import brentq

    solver = Solver(build_structure(design), band.stop_hz, settings)
    zin = solver.solve(band.f_hz).z[:, 0, 0]
    res = resonances_hz(band.f_hz, zin)
    guess = float(res[np.argmin(np.abs(res - near_hz))] if near_hz is not None else res[0])
    i = int(np.searchsorted(band.f_hz, guess))
    lo, hi = band.f_hz[max(i - 1, 0)], band.f_hz[min(i, len(band.f_hz) - 1)]
    return brentq(lambda f: solver.solve([f]).z[0, 0, 0].imag, lo, hi, xtol=1e3)


@pytest.mark.slow
@pytest.mark.parametrize("shape", sorted(DESIGNS))
def test_default_segmentation_converged_within_0p2_percent(shape):
    # Issue 2: the automatic segmentation keeps resonance (the zero of Im Zin nearest the
    # target, as resonance_mhz) within 0.2 % of a converged value. Reference: 8x the default
    # segment density; refinement studies at 1x, 2x, 4x, 8x showed successive differences
    # shrinking 2-6x per doubling with a finite feed gap (with a delta gap the gap capacitance
    # grows without bound under refinement and high-impedance shapes never settle). The band is
    # bracketed on a 10 MHz grid and refined by root finding (1 kHz).
    band = Band(600e6, 1200e6, 61, 915e6)
    f_def = first_resonance(DESIGNS[shape], band, near_hz=915e6)
    f_ref = first_resonance(DESIGNS[shape], band, SolverSettings(segments_per_wavelength=320),
                            near_hz=915e6)
    assert abs(f_def / f_ref - 1) < 0.002


def test_folded_dipole_about_four_times_dipole():
    # Folded dipole of equal wires: Zin ~ 4 x the single dipole's near resonance (Balanis
    # section 9.5, from memory). Thin PEC wires, close spacing; within 10 % (the spacing adds a
    # transmission-line term).
    thin = CrossSection.round_wire(0.2e-3)
    band = Band(800e6, 1100e6, 61, 950e6)
    dip = evaluate(Design("dipole", {"length_m": 0.15}, thin, math.inf), band)
    fold = evaluate(Design("folded", {"length_m": 0.15, "spacing_m": 3e-3}, thin, math.inf),
                    band)
    f_res = dip.metrics.values["resonance_mhz"] * 1e6
    r_dip = np.interp(f_res, band.f_hz, dip.zin.real)
    r_fold = np.interp(f_res, band.f_hz, fold.zin.real)
    assert r_fold / r_dip == pytest.approx(4.0, rel=0.10)


def test_meander_resonates_below_straight_dipole_of_same_span():
    # common practice: folding the same end-to-end length into meanders adds wire and
    # inductance, so resonance drops
    band = Band(400e6, 1500e6, 221, 915e6)
    straight = Design("dipole", {"length_m": 0.10}, TRACE, 3e4)
    f_straight = first_resonance(straight, band)
    f_meander = first_resonance(DESIGNS["meander"], band)
    assert f_meander < 0.85 * f_straight


def test_longer_dipole_resonates_lower():
    band = Band(600e6, 1300e6, 141, 915e6)
    f = [first_resonance(Design("dipole", {"length_m": L}, TRACE, 3e4), band)
         for L in (0.13, 0.15, 0.17)]
    assert f[0] > f[1] > f[2]
    # and roughly as 1/length (common practice): within 5 %
    assert f[0] / f[2] == pytest.approx(0.17 / 0.13, rel=0.05)


def test_one_wavelength_loop_resonates_near_one_wavelength():
    # A loop of about one wavelength of perimeter has its first series resonance near
    # C = 1.0-1.1 lambda (common practice; Balanis section 5.7, memory).
    band = Band(600e6, 1300e6, 141, 915e6)
    f = first_resonance(DESIGNS["loop"], band)
    circ_over_lambda = 0.32 * f / 299792458.0
    assert 0.95 < circ_over_lambda < 1.15


@pytest.mark.parametrize(
    "design, match",
    [
        (Design("meander", {"length_m": 0.1, "turns": 3, "pitch_m": 0.8e-3, "height_m": 1e-2},
                TRACE, 3e4), "antenna.pitch_mm.*touch"),
        (Design("meander", {"length_m": 0.05, "turns": 8, "pitch_m": 2e-3, "height_m": 1e-2},
                TRACE, 3e4), "antenna.turns, antenna.pitch_mm"),
        (Design("meander", {"length_m": 0.1, "turns": 2.5, "pitch_m": 3e-3, "height_m": 1e-2},
                TRACE, 3e4), "antenna.turns"),
        (Design("folded", {"length_m": 0.15, "spacing_m": 0.5e-3}, TRACE, 3e4),
         "antenna.spacing_mm"),
        (Design("dipole", {}, TRACE, 3e4), "antenna.length_mm: required"),
        (Design("dipole", {"length_m": -0.1}, TRACE, 3e4), "antenna.length_mm: must be > 0"),
        (Design("dipole", {"length_m": 0.1}, TRACE, 3e4, feed_offset_m=0.06), "feed_offset"),
        (Design("wires", {}, TRACE, 3e4), "antenna.wires"),
    ],
)
def test_builders_name_the_offending_key(design, match):
    with pytest.raises(ConfigError, match=match):
        build_structure(design)


def test_feed_offset_moves_the_port():
    d = Design("dipole", {"length_m": 0.15}, TRACE, 3e4, feed_offset_m=0.03)
    s = build_structure(d)
    assert s.ports[0].position[0] == pytest.approx(0.03)
    mesh = s.mesh(1e9)
    node = mesh.nodes[mesh.port_nodes[0]]
    assert node[0] == pytest.approx(0.03)
