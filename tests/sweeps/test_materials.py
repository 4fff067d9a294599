"""Conductor models against published formulas, limits and the REFERENCES.md check values."""

import math

import numpy as np
import pytest
from scipy.constants import mu_0
from scipy.special import gamma

from sweeps import materials as m
from sweeps.errors import GeometryError


def test_skin_depth_and_surface_resistance_of_copper():
    # delta = 1/sqrt(pi f mu sigma), R_s = 1/(sigma delta): copper (5.8e7 S/m) at 1 GHz gives
    # 2.0898 um and 8.250 mohm (REFERENCES.md, computed).
    assert m.skin_depth(1e9, 5.8e7) == pytest.approx(2.0898e-6, rel=1e-4)
    assert m.surface_resistance(1e9, 5.8e7) == pytest.approx(8.250e-3, rel=1e-4)
    assert m.skin_depth(1e9, math.inf) == 0.0


@pytest.mark.parametrize(
    "sigma, expected",
    [(1e4, 225.466 + 186.749j), (100.0, 12734.6 + 287.43j)],
)
def test_round_wire_check_values(sigma, expected):
    # Bessel form Z' = gamma/(2 pi a sigma) I0/I1 (Ramo, Whinnery & Van Duzer 3rd ed. ch. 5,
    # from memory); a = 0.5 mm at 915 MHz, values from REFERENCES.md (computed). 1e-5 relative:
    # the values are quoted to 6 significant figures.
    z = m.round_wire_impedance(915e6, 0.5e-3, sigma)
    assert z.real == pytest.approx(expected.real, rel=1e-5)
    assert z.imag == pytest.approx(expected.imag, rel=1e-5)


def test_round_wire_agrees_with_unscaled_bessel_where_that_is_finite():
    # Independent route: scipy.special.iv without exponential scaling (finite for |gamma a| < ~600)
    from scipy.special import iv

    f, a, sigma = np.array([1e3, 1e6, 1e8, 1e9]), 0.3e-3, 3e4
    g = (1 + 1j) * np.sqrt(np.pi * f * mu_0 * sigma)
    direct = g / (2 * np.pi * a * sigma) * iv(0, g * a) / iv(1, g * a)
    np.testing.assert_allclose(m.round_wire_impedance(f, a, sigma), direct, rtol=1e-10)


def test_round_wire_limits():
    a, sigma = 0.4e-3, 2e4
    # DC: 1/(pi a^2 sigma) + j omega mu/(8 pi) (internal inductance; Ramo et al., memory)
    f = 1.0
    z = m.round_wire_impedance(f, a, sigma)
    assert z.real == pytest.approx(1 / (math.pi * a * a * sigma), rel=1e-9)
    assert z.imag == pytest.approx(2 * math.pi * f * mu_0 / (8 * math.pi), rel=1e-6)
    # high frequency: (1 + j) R_s / (2 pi a) once delta << a (here a/delta ~ 900); the leading
    # correction, from I0(x)/I1(x) = 1 + 1/(2x) + ..., is of relative order delta/a.
    f = 1e12
    rs = m.surface_resistance(f, sigma)
    z = m.round_wire_impedance(f, a, sigma)
    delta = m.skin_depth(f, sigma)
    assert z.real == pytest.approx(rs / (2 * math.pi * a), rel=delta / a)
    assert z.imag == pytest.approx(rs / (2 * math.pi * a), rel=delta / a)


def test_rect_trace_limits_and_plate_formula():
    w, t, sigma = 3e-3, 0.4e-3, 1e4
    # DC limit 1/(sigma w t)
    assert m.rect_trace_impedance(1.0, w, t, sigma).real == pytest.approx(1 / (sigma * w * t),
                                                                          rel=1e-9)
    # high-frequency limit: surface resistance over the perimeter 2 (w + t)
    f = 1e13
    rs = m.surface_resistance(f, sigma)
    z = m.rect_trace_impedance(f, w, t, sigma)
    assert z.real == pytest.approx(rs / (2 * (w + t)), rel=1e-6)
    assert z.imag == pytest.approx(rs / (2 * (w + t)), rel=1e-6)
    # for t << w the model approaches the plate formula gamma/(2 sigma w) coth(gamma t/2)
    # (REFERENCES.md: 97.665 + j76.347 ohm/m at w = 3 mm, t = 0.4 mm, 915 MHz, 1e4 S/m)
    g = (1 + 1j) * math.sqrt(math.pi * 915e6 * mu_0 * sigma)
    plate = g / (2 * sigma * w) / np.tanh(g * t / 2)
    assert plate.real == pytest.approx(97.665, rel=1e-4)
    assert plate.imag == pytest.approx(76.347, rel=1e-4)
    for ratio in (0.1, 0.01, 0.001):
        tt = ratio * w
        pl = g / (2 * sigma * w) / np.tanh(g * tt / 2)
        model = m.rect_trace_impedance(915e6, w, tt, sigma)
        # the perimeter and hydraulic radius differ from the plate's by O(t/w)
        assert abs(model / pl - 1) < 2.5 * ratio


# a_e/w for t/w = 1, 0.5, 0.3, 0.2, 0.1, 0.05, 0.02, 0.01, 0 (REFERENCES.md, Schwarz-Christoffel,
# computed there independently; quoted to 5 figures)
TABLE = [(1.0, 0.59017), (0.5, 0.43738), (0.3, 0.37126), (0.2, 0.33593), (0.1, 0.29765),
         (0.05, 0.27632), (0.02, 0.26191), (0.01, 0.25649), (0.0, 0.25)]


@pytest.mark.parametrize("aspect, ratio", TABLE)
def test_rect_equivalent_radius_table(aspect, ratio):
    assert m.rect_equivalent_radius(1.0, aspect) == pytest.approx(ratio, abs=6e-6)


def test_equivalent_radius_limits():
    # square: Gamma(1/4)^2 s / (4 pi^(3/2)) (Balanis Table 9.3, memory)
    s = 2e-3
    assert m.rect_equivalent_radius(s, s) == pytest.approx(
        gamma(0.25) ** 2 * s / (4 * math.pi**1.5), rel=1e-10)
    assert m.strip_equivalent_radius(3e-3) == 0.75e-3
    # orientation does not matter
    assert m.rect_equivalent_radius(1e-3, 3e-3) == m.rect_equivalent_radius(3e-3, 1e-3)


@pytest.mark.parametrize("aspect", [0.01, 0.05, 0.1, 0.2])
def test_hammerstad_thin_strip_within_published_accuracy(aspect):
    # REFERENCES.md: (w + dw)/4 within 1.3 % for t/w <= 0.2
    exact = m.rect_equivalent_radius(1.0, aspect)
    assert abs(m.hammerstad_equivalent_radius(1.0, aspect) / exact - 1) < 0.013


def test_bad_material_input():
    with pytest.raises(GeometryError, match="conductivity"):
        m.skin_depth(1e9, -1.0)
    with pytest.raises(GeometryError, match="width"):
        m.rect_equivalent_radius(0.0, 1e-3)
