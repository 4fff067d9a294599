"""Sobol' indices (Saltelli 2010 estimators) against the Ishigami function's analytic values."""

from __future__ import annotations

import numpy as np
import pytest

from surrogates.sensitivity import plot_sensitivity, sobol_indices, surrogate_sobol


def _ishigami_indices(a: float, b: float):
    """Analytic Sobol' indices of f = sin x1 + a sin^2 x2 + b x3^4 sin x1, x ~ U(-pi, pi)^3
    (T. Ishigami & T. Homma, Proc. ISUMA 1990; variances as in A. Saltelli et al., *Global
    Sensitivity Analysis: The Primer*, Wiley 2008, from memory; re-derived here)."""
    pi4, pi8 = np.pi**4, np.pi**8
    v1 = 0.5 * (1 + b * pi4 / 5) ** 2
    v2 = a * a / 8
    v13 = b * b * pi8 * (1 / 18 - 1 / 50)
    v = v1 + v2 + v13
    return np.array([v1, v2, 0.0]) / v, np.array([v1 + v13, v2, v13]) / v


def test_ishigami_indices():
    a, b = 7.0, 0.1

    def f(u):
        x = -np.pi + 2 * np.pi * u
        return np.sin(x[:, 0]) + a * np.sin(x[:, 1]) ** 2 + b * x[:, 2] ** 4 * np.sin(x[:, 0])

    r = sobol_indices(f, 3, n=2**14, seed=1)
    s1, st = _ishigami_indices(a, b)
    # S1 = 0.3139, 0.4424, 0; ST = 0.5576, 0.4424, 0.2437. With N = 16384 the estimators'
    # error is ~0.01; allow 0.02, and the bootstrap half-widths must cover the error
    np.testing.assert_allclose(r["first_order"], s1, atol=0.02)
    np.testing.assert_allclose(r["total"], st, atol=0.02)
    assert np.all(np.abs(r["first_order"] - s1) < 3 * r["first_order_conf"] + 0.005)
    assert np.all(r["first_order_conf"] > 0) and np.all(r["total_conf"] > 0)


def test_additive_function_has_equal_first_order_and_total():
    r = sobol_indices(lambda u: 3 * u[:, 0] + u[:, 1] ** 2 + 1000.0, 3, n=2**13, seed=0)
    # Var(3u) = 0.75, Var(u^2) = 4/45; third input unused
    v = np.array([0.75, 4 / 45, 0.0])
    np.testing.assert_allclose(r["first_order"], v / v.sum(), atol=0.01)
    np.testing.assert_allclose(r["total"], v / v.sum(), atol=0.01)


def test_surrogate_sobol_on_the_analytic_surrogate(analytic_surrogate, tmp_path):
    df = surrogate_sobol(analytic_surrogate, "resonance_mhz", n=2**11)
    assert list(df["feature"]) == [f.name for f in analytic_surrogate.features]
    by = df.set_index("feature")
    # resonance depends on length (most) and filament (a 15 MHz step) only
    assert by.loc["antenna.length_mm", "total"] > 0.9
    assert by.loc["antenna.conductivity_s_per_m", "total"] < 0.01
    # the filament's share: Var(15 c) = 56.25 (c ~ Bernoulli 1/2) over that plus the length
    # term's variance, Var(-400 x + 10 sin 3x) for x ~ U(0, 1) (midpoint quadrature)
    x = (np.arange(100_000) + 0.5) / 100_000
    v_len = np.var(-400 * x + 10 * np.sin(3 * x))
    assert by.loc["antenna.filament", "total"] == pytest.approx(56.25 / (56.25 + v_len),
                                                                abs=0.002)
    fixed = surrogate_sobol(analytic_surrogate, "efficiency", n=2**10,
                            fixed={"antenna.filament": "metal"})
    assert "antenna.filament" not in set(fixed["feature"])
    png = plot_sensitivity({"resonance_mhz": df, "efficiency": fixed}, tmp_path / "s.png")
    assert png.stat().st_size > 5_000
