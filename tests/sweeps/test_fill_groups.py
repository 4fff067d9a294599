"""The fast fill against the straightforward one: pair groups, sparse assembly, close pairs.

Reference: every segment pair computed on its own (a pair table without grouping) and the
potentials assembled entry by entry from the definitions in :mod:`sweeps.mom.fill`
(``V_mn = sum_ab s_ma s_nb (t_ma . t_nb) A[...]``, ``S_mn = sum_ab d_ma d_nb Phi[...]``), and the
all-pairs segment distances. The grouping must not change any number beyond rounding.
"""

import math

import numpy as np
import pytest

from sweeps.design import Design, WireSpec
from sweeps.geometry import CrossSection, segment_distances, segments_within
from sweeps.mom.fill import MatrixFill
from sweeps.mom.kernel import (
    KernelRules,
    PairTable,
    cap_static_integrals,
    near_pairs,
    static_pair_integrals,
)
from sweeps.shapes import build_structure

TRACE = CrossSection.trace(3e-3, 0.4e-3)
WIRE = CrossSection.round_wire(0.5e-3)

SHAPES = {
    "dipole": Design("dipole", {"length_m": 0.15}, TRACE, 3e4, gap_m=1e-3, segments=40),
    "offset": Design("dipole", {"length_m": 0.15}, TRACE, 1e4, gap_m=2e-3, feed_offset_m=0.02),
    "meander": Design("meander", {"length_m": 0.10, "turns": 2, "pitch_m": 6e-3,
                                  "height_m": 12e-3}, TRACE, 3e4, gap_m=1e-3),
    "folded": Design("folded", {"length_m": 0.15, "spacing_m": 0.01}, TRACE, 3e4, gap_m=1e-3),
    "junction": Design("wires", {}, TRACE, 3e4, gap_m=1e-3, feed_point_m=(-0.03, 0, 0), wires=(
        WireSpec(((-0.075, 0, 0), (0, 0, 0), (0.075, 0, 0)), TRACE),
        WireSpec(((0, 0, 0), (0, 0.03, 0)), WIRE),
        WireSpec(((0, 0, 0), (0, -0.03, 0.01)), WIRE))),
}


def ungrouped(starts, ends, radius, near):
    """A pair table with one group per pair p <= q (no grouping at all)."""
    table = PairTable(starts, ends, radius, near)
    s = len(starts)
    rows, cols = np.triu_indices(s)
    table.p, table.q = rows, cols
    table.near = near[rows, cols]
    table.index = np.empty((s, s), dtype=np.int64)
    table.index[rows, cols] = np.arange(len(rows))
    table.index[cols, rows] = np.arange(len(rows))
    return table


def reference_potentials(mesh, shape_space, cap_seg, cap_cap):
    """V and S by the defining sums, one basis pair at a time."""
    n, s = mesh.n_unknowns, mesh.n_segments
    phi = np.zeros((s + len(cap_cap), s + len(cap_cap)))
    phi[:s, :s] = shape_space.reshape(s, 2, s, 2).sum(axis=(1, 3))
    phi[s:, :s] = cap_seg
    phi[:s, s:] = cap_seg.T
    phi[s:, s:] = cap_cap
    elem = np.where(mesh.half_cap >= 0, s + mesh.half_cap, mesh.half_seg)
    t = mesh.seg_dir
    vec = np.zeros((n, n))
    sca = np.zeros((n, n))
    for m in range(n):
        for k in range(n):
            for a in range(2):
                for b in range(2):
                    p, q = mesh.half_seg[m, a], mesh.half_seg[k, b]
                    i, j = mesh.half_shape[m, a], mesh.half_shape[k, b]
                    vec[m, k] += (mesh.half_sign[m, a] * mesh.half_sign[k, b] * (t[p] @ t[q])
                                  * shape_space[2 * p + i, 2 * q + j])
                    sca[m, k] += (mesh.half_div[m, a] * mesh.half_div[k, b]
                                  * phi[elem[m, a], elem[k, b]])
    return vec, sca


@pytest.mark.parametrize("name", sorted(SHAPES))
def test_grouped_pairs_equal_every_pair_on_its_own(name):
    mesh = build_structure(SHAPES[name]).mesh(1e9)
    starts, ends, radius = mesh.seg_start, mesh.seg_end, mesh.seg_radius
    rules = KernelRules()
    near = near_pairs(starts, ends, radius, rules)
    grouped = PairTable(starts, ends, radius, near)
    plain = ungrouped(starts, ends, radius, near)
    a = grouped.expand(static_pair_integrals(grouped, starts, ends, radius, "exact", rules))
    b = plain.expand(static_pair_integrals(plain, starts, ends, radius, "exact", rules))
    # near self terms carry ~1e-10 rounding noise of the closed-form line integral (perp^2 =
    # |w|^2 - xi^2 at the axis); everything else agrees to rounding
    np.testing.assert_allclose(a, b, rtol=1e-9, atol=0)
    if name == "dipole":  # a uniformly segmented straight wire: one group per offset (Toeplitz)
        assert grouped.size <= mesh.n_segments + 2
    assert grouped.size <= plain.size


@pytest.mark.parametrize("name", ["dipole", "junction"])
def test_sparse_assembly_matches_the_defining_sums(name):
    mesh = build_structure(SHAPES[name]).mesh(1e9)
    fill = MatrixFill(mesh)
    starts, ends, radius = mesh.seg_start, mesh.seg_end, mesh.seg_radius
    shape_space = fill.pairs.expand(
        static_pair_integrals(fill.pairs, starts, ends, radius, "exact", fill.rules))
    cap_seg, cap_cap = cap_static_integrals(mesh.nodes[mesh.cap_nodes], mesh.cap_radius,
                                            starts, ends)
    vec, sca = reference_potentials(mesh, shape_space, cap_seg, cap_cap)
    np.testing.assert_allclose(fill.static_vector, vec, rtol=1e-12, atol=1e-15 * abs(vec).max())
    np.testing.assert_allclose(fill.static_scalar, sca, rtol=1e-12, atol=1e-15 * abs(sca).max())


def test_potentials_make_up_the_efie_matrix():
    """The mixed-potential form Z = j omega mu V + S / (j omega eps) (Harrington, Field
    Computation by Moment Methods, 1968, ch. 4): the potentials alone and the direct fill agree,
    and at zero frequency V and S reduce to their static parts."""
    from sweeps.materials import EPS0, MU0

    fill = MatrixFill(build_structure(SHAPES["junction"]).mesh(1e9))
    f = np.array([8e8, 9.15e8])
    vec, sca = fill.potentials(f)
    w = 2 * math.pi * f[:, None, None]
    z = 1j * w * MU0 * vec + sca / (1j * w * EPS0)
    want = fill.efie_direct(f)
    np.testing.assert_allclose(z, want, rtol=1e-12, atol=1e-12 * abs(want).max())
    v0, s0 = fill.potentials(np.array([1e-3]))  # k -> 0: the dynamic parts vanish
    np.testing.assert_allclose(v0[0].real, fill.static_vector, rtol=1e-9,
                               atol=1e-12 * abs(fill.static_vector).max())
    np.testing.assert_allclose(s0[0].real, fill.static_scalar, rtol=1e-9,
                               atol=1e-12 * abs(fill.static_scalar).max())


def test_direct_fill_is_symmetric_and_frequency_batched():
    # Galerkin symmetry Z = Z^T (reciprocity) survives the grouped fill, and chunks of
    # frequencies give the same matrices as one frequency at a time
    fill = MatrixFill(build_structure(SHAPES["junction"]).mesh(1e9))
    f = np.array([800e6, 915e6, 1e9])
    z = fill.efie_direct(f)
    np.testing.assert_allclose(z, np.swapaxes(z, 1, 2), rtol=0, atol=1e-12 * abs(z).max())
    one = np.stack([fill.efie_direct([fi])[0] for fi in f])
    np.testing.assert_allclose(z, one, rtol=1e-13, atol=0)


@pytest.mark.parametrize("name", sorted(SHAPES))
def test_close_pairs_equal_the_all_pairs_distances(name):
    mesh = build_structure(SHAPES[name]).mesh(1e9)
    s0, s1 = mesh.seg_start, mesh.seg_end
    full = segment_distances(s0, s1, s0, s1)
    limit = 2.5 * np.maximum.outer(mesh.seg_length, mesh.seg_length)
    rows, cols, dist = segments_within(s0, s1, limit)
    want = np.argwhere(full < limit)
    assert sorted(zip(rows.tolist(), cols.tolist(), strict=True)) == [tuple(w) for w in want]
    np.testing.assert_array_equal(dist, full[rows, cols])  # the same numbers, not just close
    near = near_pairs(s0, s1, mesh.seg_radius, KernelRules())
    np.testing.assert_array_equal(near, near_pairs(s0, s1, mesh.seg_radius, KernelRules(),
                                                   full))


def test_pec_wire_has_no_loss_and_round_wire_groups():
    design = Design("dipole", {"length_m": 0.16}, WIRE, math.inf)
    fill = MatrixFill(build_structure(design).mesh(1e9))
    assert not np.any(fill.loss([915e6]))
    assert fill.pairs.size <= fill.mesh.n_segments + 2


@pytest.mark.parametrize("name", sorted(SHAPES))
def test_near_switch_is_the_same_for_identical_pairs(name):
    # The near-field rules apply below max(2 lengths, 6 radii) (KernelRules). Decided per group,
    # every pair of a group gets the same rules, and the decision is near_pairs' one except
    # for pairs within the 1e-9 margin of the threshold (exactly two segment lengths apart on a
    # uniform wire), which are near.
    mesh = build_structure(SHAPES[name]).mesh(1e9)
    s0, s1, radius = mesh.seg_start, mesh.seg_end, mesh.seg_radius
    rules = KernelRules()
    table = PairTable(s0, s1, radius, rules=rules)
    per_pair = near_pairs(s0, s1, radius, rules)
    grouped = table.near[table.index]
    length = mesh.seg_length
    limit = np.maximum(2 * np.maximum.outer(length, length), 6 * np.maximum.outer(radius, radius))
    full = segment_distances(s0, s1, s0, s1)
    borderline = np.abs(full - limit) <= 2e-9 * limit
    assert np.array_equal(grouped[~borderline], per_pair[~borderline])
    assert grouped[borderline].all()
    if name == "dipole":
        assert borderline.any()  # pairs two segment lengths apart exist on a uniform wire
