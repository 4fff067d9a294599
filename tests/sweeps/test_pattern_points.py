"""The pattern search's merged midpoint elements and its mirror symmetry, against the plain sums.

References: the radiation vector ``A(r) = sum I t dl e^{jk r . r'}`` summed over every basis
half separately (``CurrentPoints``), and, for a structure in the plane ``z = 0`` with in-plane
currents, the exact symmetry ``U(theta, phi) = U(pi - theta, phi)`` (``r . r'`` depends on
``sin theta`` only; Balanis, *Antenna Theory*, 3rd ed., section 4.2 for the dipole case, memory).
"""

import math

import numpy as np
import pytest

from sweeps.design import Design
from sweeps.geometry import CrossSection
from sweeps.materials import C0
from sweeps.mom.fields import CurrentPoints, directions, radiation_intensity, radiation_vector
from sweeps.mom.solve import Solver
from sweeps.shapes import build_structure

TRACE = CrossSection.trace(3e-3, 0.4e-3)


@pytest.mark.parametrize("design", [
    Design("dipole", {"length_m": 0.15}, TRACE, 3e4, gap_m=1e-3, feed_offset_m=0.02),
    Design("meander", {"length_m": 0.10, "turns": 2, "pitch_m": 6e-3, "height_m": 12e-3},
           TRACE, 3e4, gap_m=1e-3),
    Design("loop", {"circumference_m": 0.3}, TRACE, 3e4, gap_m=1e-3),
])
def test_merged_midpoints_equal_the_per_half_sum(design, rng):
    solver = Solver(build_structure(design), 1e9)
    mesh = solver.mesh
    cur = rng.normal(size=(mesh.n_unknowns, 2)) + 1j * rng.normal(size=(mesh.n_unknowns, 2))
    k = 2 * math.pi * 915e6 / C0
    r_hat = directions(rng.uniform(0, math.pi, 25), rng.uniform(0, 2 * math.pi, 25))
    plain = radiation_vector(CurrentPoints(mesh, 1), cur, k, r_hat)
    merged = radiation_vector(solver.pattern_points, cur, k, r_hat)
    np.testing.assert_allclose(merged, plain, rtol=1e-12, atol=1e-15 * abs(plain).max())
    assert solver.pattern_points.planar_z  # every printed shape lies in z = 0


def test_planar_pattern_is_mirror_symmetric(rng):
    solver = Solver(build_structure(Design("loop", {"circumference_m": 0.3}, TRACE, 3e4,
                                           gap_m=1e-3)), 1e9)
    cur = rng.normal(size=solver.mesh.n_unknowns) + 0j
    k = 2 * math.pi * 915e6 / C0
    theta, phi = rng.uniform(0, math.pi, 30), rng.uniform(0, 2 * math.pi, 30)
    u1 = radiation_intensity(solver.points, cur, k, directions(theta, phi))
    u2 = radiation_intensity(solver.points, cur, k, directions(math.pi - theta, phi))
    np.testing.assert_allclose(u1, u2, rtol=1e-12)
