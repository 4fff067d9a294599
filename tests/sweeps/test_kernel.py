"""Segment-pair integrals of the thin-wire kernel against independent quadrature.

Reference: the exact kernel's static part is the ring average
``(1/2pi) int dphi / (4 pi sqrt(z^2 + 4 a^2 sin^2(phi/2)))
  = K(m) / (2 pi^2 sqrt(z^2 + 4 a^2))``, ``m = 4a^2/(z^2 + 4a^2)``
(complete elliptic integral; the substitution psi = phi/2 and the standard form
``int_0^{pi/2} dpsi / sqrt(A + B sin^2 psi) = K(B/(A+B))/sqrt(A+B)``; Abramowitz & Stegun 17.3,
from memory). The reference integrates it with scipy's adaptive quadrature (QUADPACK), a route
independent of the closed-form line integrals and graded Gauss rules of sweeps.mom.kernel.
"""

import warnings

import numpy as np
import pytest
from scipy import integrate, special

from sweeps.mom.kernel import KernelRules, line_integrals, static_integrals


def k_exact_static(z, a):
    z = max(abs(z), 1e-150 * a)
    p = z * z / (z * z + 4 * a * a)
    return special.ellipkm1(p) / (2 * np.pi**2 * np.sqrt(z * z + 4 * a * a))


LAM = [lambda u: 1 - u, lambda u: u]


def reference_collinear(length, offset, a, i, j):
    """int_0^L int_off^(off+L) lam_i lam_j K_exact, adaptive quadrature split at the singularity."""

    def inner(s):
        def f(sp):
            return LAM[j]((sp - offset) / length) * k_exact_static(s - sp, a)

        lo, hi = offset, offset + length
        if lo < s < hi:
            return (integrate.quad(f, lo, s, limit=400, epsabs=0, epsrel=1e-12)[0]
                    + integrate.quad(f, s, hi, limit=400, epsabs=0, epsrel=1e-12)[0])
        return integrate.quad(f, lo, hi, limit=400, epsabs=0, epsrel=1e-12)[0]

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", integrate.IntegrationWarning)
        return integrate.quad(lambda s: LAM[i](s / length) * inner(s), 0, length, limit=400,
                              epsabs=0, epsrel=1e-10)[0]


@pytest.mark.parametrize("length_over_radius", [0.25, 1.0, 4.0, 20.0])
def test_exact_kernel_self_and_neighbour_terms(length_over_radius):
    a = 1.0
    length = length_over_radius * a
    starts = np.array([[0, 0, k * length] for k in range(3)], float)
    ends = starts + [0, 0, length]
    got = static_integrals(starts, ends, np.full(3, a), "exact", KernelRules())
    for q, offset in [(0, 0.0), (1, length), (2, 2 * length)]:
        for i, j in [(0, 0), (1, 1), (0, 1), (1, 0)]:
            ref = reference_collinear(length, offset, a, i, j)
            # 1e-4: the graded rules' accuracy on the log-singular self term (the quantity
            # enters Z through sums over many pairs; 1e-4 keeps Zin within ~1e-5).
            assert got[i, 2 * q + j] == pytest.approx(ref, rel=1e-4), (q, i, j)


def test_line_integral_closed_form_against_quadrature(rng):
    # closed form int_0^L lambda_j(s/L)/sqrt(|r - q0 - s t|^2 + rho^2) ds vs scipy quad
    for _ in range(20):
        r = rng.normal(size=3)
        q0 = rng.normal(size=3)
        t = rng.normal(size=3)
        t /= np.linalg.norm(t)
        length = rng.uniform(0.1, 2.0)
        rho2 = rng.uniform(1e-4, 0.5)
        j0, j1 = line_integrals(r, q0, t, np.array(length), np.array(rho2))
        for shape, got in ((0, j0), (1, j1)):
            ref = integrate.quad(_line_integrand, 0, length, args=(shape, length, r, q0, t, rho2),
                                 epsabs=0, epsrel=1e-12)[0]
            assert float(got) == pytest.approx(ref, rel=1e-10)


def _line_integrand(s, shape, length, r, q0, t, rho2):
    lam = s / length if shape == 1 else 1 - s / length
    return lam / np.sqrt(np.sum((r - q0 - s * t) ** 2) + rho2)


def test_far_coaxial_pairs_match_the_ring_average():
    # Beyond the near zone the exact kernel is represented by R^2 = d^2 + 2 a^2 (its second
    # moment), which matches the ring average to O((a/d)^4): check on the same axis.
    a, length = 1.0, 4.0
    starts = np.array([[0, 0, 0], [0, 0, 8 * length]], float)
    ends = starts + [0, 0, length]
    got = static_integrals(starts, ends, np.full(2, a), "exact", KernelRules())
    ref = reference_collinear(length, 8 * length, a, 0, 0)
    assert got[0, 2] == pytest.approx(ref, rel=1e-5)
