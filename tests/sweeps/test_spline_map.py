"""The metrics' cubic spline (a cached linear map of the band grid) against scipy's CubicSpline."""

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

from sweeps.metrics import _zin_spline, resonances_hz


@pytest.mark.parametrize("grid", ["uniform", "random"])
def test_grid_spline_is_scipys_not_a_knot_spline(grid, rng):
    f = (np.linspace(800e6, 1000e6, 101) if grid == "uniform"
         else np.sort(rng.uniform(100e6, 2e9, 37)))
    y = rng.normal(size=len(f)) + 1j * rng.normal(size=len(f))
    ref = CubicSpline(f, y)
    got = _zin_spline(f, y)
    for row in range(4):  # each power's coefficients, relative to their own size
        scale = np.abs(ref.c[row]).max()
        np.testing.assert_allclose(got.c[row], ref.c[row], rtol=0, atol=1e-12 * scale)
    for t in (f[0], f[3], 0.5 * (f[10] + f[11]), f[-1], 0.37 * f[0] + 0.63 * f[-1]):
        assert got(t) == pytest.approx(complex(ref(t)), rel=1e-13, abs=1e-14)


def test_resonances_agree_with_a_fresh_scipy_spline(rng):
    # Im Z of a series RLC, 2 ohm + 30 nH + 1 pF, resonant at 1/(2 pi sqrt(LC)) = 918.9 MHz
    f = np.linspace(800e6, 1000e6, 51)
    w = 2 * np.pi * f
    z = 2.0 + 1j * (w * 30e-9 - 1.0 / (w * 1e-12))
    f0 = 1.0 / (2 * np.pi * np.sqrt(30e-9 * 1e-12))
    roots = resonances_hz(f, z)
    assert roots[0] == pytest.approx(f0, rel=1e-6)
    spline = CubicSpline(f, z.imag)
    assert abs(spline(roots[0])) < 1e-6 * abs(z.imag).max()
