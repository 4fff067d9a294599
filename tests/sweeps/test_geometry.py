"""Wire structures: segmentation, junctions, validation errors, enclosing sphere."""

import math

import numpy as np
import pytest
from scipy.optimize import minimize

from sweeps.errors import GeometryError
from sweeps.geometry import CrossSection, Load, Port, Structure, Wire, min_enclosing_ball

RW = CrossSection.round_wire(0.5e-3)


def straight(x0, x1, section=RW, **kw):
    return Wire(np.array([x0, x1], float), section, **kw)


def test_port_gets_a_node_and_segments_split_there():
    w = straight([-0.05, 0, 0], [0.1, 0, 0], segments=15)
    mesh = Structure([w], ports=[Port([0.0, 0, 0])]).mesh(1e9)
    assert np.any(np.all(np.isclose(mesh.nodes, [0, 0, 0], atol=1e-12), axis=1))
    assert mesh.port_vectors.shape == (mesh.n_unknowns, 1)
    assert mesh.port_vectors.sum() == pytest.approx(1.0)
    # 15 segments over 0.15 m: 5 on the short side, 10 on the long side of the port
    assert mesh.n_segments == 15


def test_default_segmentation_follows_wavelength():
    w = straight([-0.075, 0, 0], [0.075, 0, 0])
    m1 = Structure([w], ports=[Port([0, 0, 0])]).mesh(1e9)
    m2 = Structure([w], ports=[Port([0, 0, 0])]).mesh(2e9)
    assert m2.n_segments >= 2 * m1.n_segments - 2
    assert np.max(m1.seg_length) <= 299792458 / 1e9 / 40 * (1 + 1e-9)


def test_end_caps_add_one_basis_per_free_end():
    w = straight([-0.075, 0, 0], [0.075, 0, 0], segments=10)
    mesh = Structure([w], ports=[Port([0, 0, 0])]).mesh(1e9)
    assert len(mesh.cap_nodes) == 2
    assert mesh.n_unknowns == 9 + 2


def test_junction_of_three_wires_has_two_bases_and_symmetric_currents():
    # A "T": a stem fed at its middle joining two equal arms. Kirchhoff's current law holds by
    # construction of the k - 1 junction bases; symmetry of the two arms is a real check that
    # the (asymmetric) choice of junction bases does not bias the solution.
    from sweeps.mom.solve import Solver

    stem = straight([0, -0.06, 0], [0, 0, 0])
    left = straight([0, 0, 0], [-0.05, 0, 0])
    right = straight([0, 0, 0], [0.05, 0, 0])
    solver = Solver(Structure([stem, left, right], ports=[Port([0, -0.03, 0])]), 1.2e9)
    mesh = solver.mesh
    junction = int(np.argmin(np.linalg.norm(mesh.nodes, axis=1)))
    at_j = np.nonzero(mesh.basis_node == junction)[0]
    assert len(at_j) == 2
    cur = solver.solve([1e9]).currents[0][:, 0]
    # current leaving the junction along each arm = the basis that carries it
    arm_currents = []
    for b in at_j:
        seg_out = mesh.half_seg[b, 1]
        arm_currents.append(cur[b] * mesh.half_sign[b, 1] * mesh.seg_dir[seg_out])
    i_left, i_right = arm_currents
    # mirror symmetry x -> -x: x components opposite, magnitudes equal
    assert abs(np.linalg.norm(i_left) - np.linalg.norm(i_right)) < 1e-9 * np.linalg.norm(i_left)
    stem_current = abs(cur[at_j].sum())
    assert stem_current == pytest.approx(abs(cur[at_j[0]]) + abs(cur[at_j[1]]), rel=1e-9)


def test_split_wire_equals_single_wire():
    # a dipole built from two wires meeting at the feed = one wire with a port at its middle
    from sweeps.mom.solve import Solver

    one = Structure([straight([-0.075, 0, 0], [0.075, 0, 0], segments=30)],
                    ports=[Port([0, 0, 0])])
    two = Structure([straight([-0.075, 0, 0], [0, 0, 0], segments=15),
                     straight([0, 0, 0], [0.075, 0, 0], segments=15)], ports=[Port([0, 0, 0])])
    z1 = Solver(one, 1e9).solve([9e8]).z[0, 0, 0]
    z2 = Solver(two, 1e9).solve([9e8]).z[0, 0, 0]
    assert z2 == pytest.approx(z1, rel=1e-10)


@pytest.mark.parametrize(
    "structure, match",
    [
        (lambda: Structure([straight([0, 0, 0], [0.1, 0, 0], CrossSection.round_wire(6e-3))],
                           ports=[Port([0.05, 0, 0])]), "too large for the thin-wire model"),
        (lambda: Structure([straight([0, 0, 0], [0.1, 0, 0], segments=2000)],
                           ports=[Port([0.05, 0, 0])]), "shorter than"),
        (lambda: Structure([Wire(np.array([[0, 0, 0], [0, 0, 0], [0.1, 0, 0]]), RW)]),
         "zero length"),
        (lambda: Structure([straight([0, 0, 0], [0.1, 0, 0]),
                            straight([0.05, 0.0005, 0], [0.15, 0.0005, 0])],
                           ports=[Port([0.02, 0, 0])]), "overlap or touch"),
        (lambda: Structure([straight([0, 0, 0], [0.1, 0, 0])], ports=[Port([0.05, 0.01, 0])]),
         "not on any wire"),
        (lambda: Structure([straight([0, 0, 0], [0.1, 0, 0])], ports=[Port([0.1, 0, 0])]),
         "free wire end"),
    ],
)
def test_invalid_structures_are_refused_with_a_clear_message(structure, match):
    with pytest.raises(GeometryError, match=match):
        structure().mesh(1e9)


def test_reduced_kernel_refuses_segments_the_exact_kernel_accepts():
    s = Structure([straight([0, 0, 0], [0.1, 0, 0], segments=150)], ports=[Port([0.05, 0, 0])])
    s.mesh(1e9, kernel="exact")
    with pytest.raises(GeometryError, match="'reduced' kernel"):
        s.mesh(1e9, kernel="reduced")


def test_loads_and_ports_on_distinct_nodes():
    w = straight([0, 0, 0], [0.1, 0, 0], segments=10)
    with pytest.raises(GeometryError, match="shares its node"):
        Structure([w], ports=[Port([0.05, 0, 0])], loads=[Load([0.05, 0, 0], r_ohm=1)]).mesh(1e9)


def _inside(x, pts):
    return x[3] - np.sum((pts - x[:3]) ** 2, axis=1)


def test_min_enclosing_ball_against_convex_optimisation(rng):
    for n in (2, 3, 5, 20, 60):
        pts = rng.normal(size=(n, 3)) * [1.0, 0.5, 0.1]
        c, r = min_enclosing_ball(pts)
        assert np.all(np.linalg.norm(pts - c, axis=1) <= r * (1 + 1e-9))
        # independent route: the convex programme min r^2 s.t. |p_i - c|^2 <= r^2 (SLSQP)
        x0 = np.r_[pts.mean(axis=0), np.max(np.sum((pts - pts.mean(axis=0)) ** 2, axis=1))]
        res = minimize(lambda x: x[3], x0, method="SLSQP",
                       constraints=[{"type": "ineq", "fun": _inside, "args": (pts,)}],
                       options={"ftol": 1e-14, "maxiter": 500})
        assert r == pytest.approx(math.sqrt(res.x[3]), rel=1e-6)


def test_enclosing_radius_of_a_dipole_trace():
    w = Wire(np.array([[-0.075, 0, 0], [0.075, 0, 0]]), CrossSection.trace(3e-3, 0.4e-3))
    mesh = Structure([w], ports=[Port([0, 0, 0])]).mesh(1e9)
    assert mesh.enclosing_radius() == pytest.approx(0.075 + 0.5 * math.hypot(3e-3, 0.4e-3))
