"""Segment-pair integrals of the thin-wire Green's function.

For segments ``p`` and ``q`` (lengths ``L_p``, ``L_q``, local coordinates ``u, v`` in [0, 1]) and
the two linear shapes ``lambda_0 = 1 - u``, ``lambda_1 = u`` of each segment, the solver needs

    ``A_pq[i, j] = L_p L_q int int lambda_i(u) lambda_j(v) G(R) du dv``,
    ``G = e^{-jkR} / (4 pi R)``.

The kernel is split as ``G = G_s + G_d`` with the static part ``G_s = 1/(4 pi R)``, which is
singular and frequency independent, and the dynamic part ``G_d = (e^{-jkR} - 1)/(4 pi R)``, which
is smooth and bounded (``-> -jk/(4 pi)`` as ``R -> 0``). The static integrals are computed once per
geometry (:func:`static_integrals`), the dynamic ones per frequency with a low-order Gauss rule
(:func:`dynamic_integrals`).

Kernels
-------
``"exact"``: the exact thin-wire kernel of a tube of radius ``a`` carrying a uniform surface
current, observed on the surface,

    ``K(z) = (1/2pi) int_0^{2pi} G(sqrt(z^2 + 4 a^2 sin^2(phi/2))) dphi``

(e.g. D. R. Wilton & N. J. Champagne, "Evaluation and integration of the thin wire kernel",
IEEE Trans. AP 54(4), 2006; from memory). It stays accurate for segments shorter than the
radius, which fat printed traces need. The static part is evaluated as this ring average of the
closed-form line integral of ``1/sqrt(z^2 + rho^2)`` (inner integral analytic, outer integral
and ring average by graded Gauss rules that absorb the logarithmic singularity).

``"reduced"``: ``R = sqrt(d^2 + a^2)`` between the axes (Pocklington's reduced kernel; Balanis,
*Antenna Theory*, 3rd ed., section 8.3, from memory). Fast, but only for segments of a few radii
or more.

Between segments farther apart than a few lengths and radii both kernels reduce to a smooth
function integrated with a Gauss rule; there the exact kernel's ring average is represented by
``R^2 = d^2 + 2 a^2`` (its second moment; the difference is ``O((a/d)^4)``).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from sweeps.geometry import paired_segment_distances, rownorm
from sweeps.mom.quadrature import gauss01, graded_gauss01, start_graded_gauss01

__all__ = ["KernelRules", "PairTable", "static_integrals", "static_pair_integrals",
           "DynamicPoints", "near_pairs"]

INV4PI = 1.0 / (4.0 * np.pi)


class KernelRules:
    """Quadrature orders of the fill (defaults validated by ``tests/sweeps/test_kernel.py``).

    Parameters
    ----------
    static_far : int
        Gauss points per segment for the static part between distant segments.
    dynamic : int
        Gauss points per segment for the smooth dynamic part (all pairs).
    near_outer : int
        Graded Gauss points on the outer segment of a near pair.
    near_phi : int
        Graded Gauss points of the ring average of the exact kernel.
    near_lengths, near_radii : float
        A pair is *near* when its closest distance is below
        ``max(near_lengths * longest length, near_radii * radius)``.
    """

    def __init__(
        self,
        static_far: int = 4,
        dynamic: int = 2,
        near_outer: int = 10,
        near_phi: int = 10,
        near_lengths: float = 2.0,
        near_radii: float = 6.0,
    ) -> None:
        self.static_far = static_far
        self.dynamic = dynamic
        self.near_outer = near_outer
        self.near_phi = near_phi
        self.near_lengths = near_lengths
        self.near_radii = near_radii

    def as_dict(self) -> dict[str, float]:
        return dict(vars(self))


def _lambda(u: NDArray[np.float64]) -> NDArray[np.float64]:
    """The two linear shapes at ``u``: shape ``(len(u), 2)`` = ``[1 - u, u]``."""
    return np.stack([1.0 - u, u], axis=-1)


def _frozen(*arrays: NDArray) -> tuple[NDArray, ...]:
    for a in arrays:
        a.setflags(write=False)
    return arrays


@lru_cache(maxsize=16)
def _shape_rule(n: int, graded: bool = False) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Nodes ``u`` (Q,) and weighted shapes ``lambda(u) w`` (Q, 2) of a Gauss rule on [0, 1]
    (plain or graded, :mod:`sweeps.mom.quadrature`); fixed by the rule, so formed once."""
    u, w = graded_gauss01(n) if graded else gauss01(n)
    return _frozen(u, _lambda(u) * w[:, None])


@lru_cache(maxsize=16)
def _ring_rule(n: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Weights and ``(2 sin(phi/2))^2`` of the ring average of the exact kernel (``n`` points)."""
    tphi, wphi = start_graded_gauss01(n)
    phi = np.pi * tphi  # (1/pi) int_0^pi dphi = int_0^1 dt
    return _frozen(wphi, (2.0 * np.sin(0.5 * phi)) ** 2)


@lru_cache(maxsize=16)
def _point_pair_weights(q: int) -> NDArray[np.float64]:
    """Weights (Q^2, 5) of the point pairs (u, v) of a ``q``-point Gauss rule on both segments:
    the four shape pairs (i, j), then the charge (the plain product ``w_u w_v``)."""
    _, w = gauss01(q)
    _, lam_w = _shape_rule(q)
    lam2 = np.einsum("ui,vj->uvij", lam_w, lam_w).reshape(q**2, 4)
    return _frozen(np.column_stack([lam2, np.outer(w, w).reshape(-1)]))[0]


def line_integrals(
    r: NDArray[np.float64],
    q0: NDArray[np.float64],
    tq: NDArray[np.float64],
    lq: NDArray[np.float64],
    rho2: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Closed-form ``int_0^L lambda_j(s/L) / sqrt(|r - q0 - s t|^2 + rho^2) ds`` for j = 0, 1.

    Parameters
    ----------
    r : ndarray, shape (..., 3)
        Observation points (m).
    q0, tq : ndarray, shape (..., 3)
        Start and unit direction of the source segment (broadcast against ``r``).
    lq : ndarray, shape (...)
        Source segment length (m).
    rho2 : ndarray, shape (...)
        Extra squared radius added to the squared distance (m^2), > 0.

    Returns
    -------
    J0, J1 : ndarray, shape (...)
        The integrals for the falling and rising shape (dimensionless).
    """
    w = r - q0
    xi = np.add.reduce(w * tq, axis=-1)
    perp2 = np.maximum(np.add.reduce(w * w, axis=-1) - xi * xi, 0.0)
    rr2 = perp2 + rho2
    rho = np.sqrt(rr2)
    a = np.arcsinh(xi / rho) + np.arcsinh((lq - xi) / rho)
    b = np.sqrt((lq - xi) ** 2 + rr2) - np.sqrt(xi * xi + rr2) + xi * a
    j1 = b / lq
    return a - j1, j1


def near_pairs(
    starts: NDArray[np.float64],
    ends: NDArray[np.float64],
    radius: NDArray[np.float64],
    rules: KernelRules,
    dist: NDArray[np.float64] | None = None,
) -> NDArray[np.bool_]:
    """Boolean ``(S, S)`` matrix of the segment pairs that need the near-field treatment.

    ``dist`` are the segment distances (:attr:`sweeps.geometry.Mesh.seg_distance`) if known;
    otherwise only the pairs that can be near get their distance
    (:func:`sweeps.geometry.segments_within`).
    """
    length = rownorm(ends - starts)
    lmax = np.maximum(length[:, None], length[None, :])
    amax = np.maximum(radius[:, None], radius[None, :])
    limit = np.maximum(rules.near_lengths * lmax, rules.near_radii * amax)
    if dist is not None:
        return dist < limit
    from sweeps.geometry import segments_within

    rows, cols, _ = segments_within(starts, ends, limit)
    near = np.zeros((len(starts), len(starts)), dtype=bool)
    near[rows, cols] = True
    return near


#: Relative margin of the near-field switch: a pair exactly at the threshold distance (two
#: segment lengths along a uniformly segmented wire) is near, whatever the rounding.
NEAR_MARGIN = 1e-9


def group_near(
    starts: NDArray[np.float64],
    ends: NDArray[np.float64],
    radius: NDArray[np.float64],
    p: NDArray[np.int64],
    q: NDArray[np.int64],
    rules: KernelRules,
) -> NDArray[np.bool_]:
    """Near-field switch for the segment pairs ``(p[k], q[k])``: the rule of :func:`near_pairs`
    with the relative margin :data:`NEAR_MARGIN` (closest distance up to the threshold)."""
    length = rownorm(ends - starts)
    limit = np.maximum(rules.near_lengths * np.maximum(length[p], length[q]),
                       rules.near_radii * np.maximum(radius[p], radius[q]))
    dist = paired_segment_distances(starts[p], ends[p], starts[q], ends[q])
    return dist < limit * (1.0 + NEAR_MARGIN)


def _pair_radius2(radius: NDArray[np.float64]) -> NDArray[np.float64]:
    return 0.5 * (radius[:, None] ** 2 + radius[None, :] ** 2)


_HASH = np.random.default_rng(20261201).integers(1, 2**63, size=64, dtype=np.int64).view(
    np.uint64) | np.uint64(1)


def _hash_groups(h: NDArray[np.uint64]) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """``np.unique(h, return_index=True, return_inverse=True)[1:]`` without its wrapper: the
    first index of each distinct value (groups numbered in increasing order of value) and the
    group of every entry. (The hashes are sums modulo 2^64, wrapping as intended.)"""
    order = np.argsort(h, kind="stable")
    h = h[order]
    new = np.empty(len(h), dtype=bool)
    new[:1] = True
    np.not_equal(h[1:], h[:-1], out=new[1:])
    inverse = np.empty(len(order), dtype=np.intp)
    inverse[order] = np.cumsum(new) - 1
    return order[new], inverse


def _unique_rows(keys: NDArray[np.int64]) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """First occurrence of each distinct row of an integer array and the group of every row.

    Rows are grouped by a 64-bit multiplicative hash and the grouping is verified row by row
    (a collision, never seen in practice, falls back to an exact row sort).
    """
    keys = np.ascontiguousarray(keys, dtype=np.int64)
    if keys.shape[1] <= len(_HASH):
        first, inverse = _hash_groups(keys.view(np.uint64) @ _HASH[: keys.shape[1]])
        if np.array_equal(keys[first][inverse], keys):
            return first, inverse
    view = keys.view(np.dtype((np.void, keys.dtype.itemsize * keys.shape[1]))).ravel()
    _, first, inverse = np.unique(view, return_index=True, return_inverse=True)
    return first, inverse.reshape(-1)


def _unique_columns(keys: NDArray[np.int64]) -> tuple[NDArray, NDArray]:
    """:func:`_unique_rows` of the columns of a (C, M) integer array (the key parts of each of
    M rows stored component by component): one hash per column, verified in one comparison.

    The groups are numbered in the order of their hashes and ``first`` is the first column of
    each, as ``np.unique(h, return_index=True, return_inverse=True)`` gives them.
    """
    first, inverse = _hash_groups(_HASH[: keys.shape[0]] @ keys.view(np.uint64))
    if np.array_equal(keys[:, first[inverse]], keys):
        return first, inverse
    return _unique_rows(keys.T)  # a hash collision: exact sort


@lru_cache(maxsize=16)
def _triu(s: int) -> tuple[NDArray[np.int32], NDArray[np.int32]]:
    rows, cols = np.triu_indices(s)
    itype = np.int32 if s < 2**15 else np.int64
    rows, cols = rows.astype(itype), cols.astype(itype)
    rows.setflags(write=False)
    cols.setflags(write=False)
    return rows, cols


class PairTable:
    """Segment pairs grouped by their relative geometry (translation invariance of the kernel).

    The integrals of a pair of straight segments depend only on their lengths, radii and
    directions, on the offset between their start points, and on whether the pair gets the
    near-field rules. Pairs that agree in all of these (to 1e-12 of the structure's size) share
    one computation: along a uniformly segmented straight wire the pair integrals form a Toeplitz
    matrix (the classic observation for straight wires, e.g. R. F. Harrington, *Field
    Computation by Moment Methods*, 1968, ch. 4; from memory), so ``S`` segments need ``S``
    pairs computed instead of ``S^2``. Structures without repeated geometry simply get one group
    per pair.

    Only pairs ``p <= q`` are grouped; the integrals of ``(q, p)`` are those of ``(p, q)``
    transposed (the Galerkin matrix is symmetric), exactly as when every pair is computed.

    Parameters
    ----------
    starts, ends : ndarray, shape (S, 3)
        Segment end points in m.
    radius : ndarray, shape (S,)
        Equivalent radius of each segment in m.
    near : ndarray of bool, shape (S, S), optional
        :func:`near_pairs` of every pair. By default the near-field switch is decided per
        group (:func:`group_near`), so that geometrically identical pairs get the same rules.
    rules : KernelRules, optional
        Rules of that per-group decision (default :class:`KernelRules`).

    Attributes
    ----------
    p, q : ndarray of int, shape (K,)
        The representative pair of each group (``p <= q``).
    near : ndarray of bool, shape (K,)
    index : ndarray of int, shape (S, S)
        Group of the pair ``(min(a, b), max(a, b))`` for segments ``a, b``.
    """

    def __init__(
        self,
        starts: NDArray[np.float64],
        ends: NDArray[np.float64],
        radius: NDArray[np.float64],
        near: NDArray[np.bool_] | None = None,
        rules: KernelRules | None = None,
    ) -> None:
        s = len(starts)
        delta = ends - starts
        length = rownorm(delta)
        pts = np.concatenate([starts, ends])
        res = 1e-12 * max(float((pts.max(axis=0) - pts.min(axis=0)).max()), 1e-300)  # np.ptp
        feat = np.rint(np.column_stack([length / res, radius / res,
                                        delta / length[:, None] * 1e12])).astype(np.int64)
        _, cls = _unique_rows(feat)  # segments alike up to translation
        rows, cols = _triu(s)
        keys = np.empty((5 if near is None else 6, len(rows)), dtype=np.int64)
        keys[0] = cls[rows]
        keys[1] = cls[cols]
        # the offset between the two segments
        keys[2:5] = np.rint((starts[cols] - starts[rows]) / res).T
        if near is not None:
            keys[5] = near[rows, cols]
        first, group = _unique_columns(keys)
        del keys
        self.p = rows[first]
        self.q = cols[first]
        if near is not None:
            self.near = near[self.p, self.q]
        else:
            self.near = group_near(starts, ends, radius, self.p, self.q, rules or KernelRules())
        self.index = np.empty((s, s), dtype=np.int32 if len(first) < 2**29 else np.int64)
        self.index[rows, cols] = group
        self.index[cols, rows] = group

    @property
    def size(self) -> int:
        """Number of groups ``K``."""
        return len(self.p)

    def expand(self, values: NDArray) -> NDArray:
        """Full ``(..., 2S, 2S)`` shape-space array from per-group values ``(..., K, 2, 2)``."""
        s = self.index.shape[0]
        full = values[..., self.index, :, :]  # (..., S, S, 2, 2): [a, b, i, j] of pair (a, b)
        lower = np.tril(np.ones((s, s), dtype=bool), -1)
        full[..., lower, :, :] = np.swapaxes(full[..., lower, :, :], -1, -2)
        lead = values.shape[:-3]
        return np.moveaxis(full, -2, -3).reshape(*lead, 2 * s, 2 * s)


def static_pair_integrals(
    pairs: PairTable,
    starts: NDArray[np.float64],
    ends: NDArray[np.float64],
    radius: NDArray[np.float64],
    kernel: str,
    rules: KernelRules,
) -> NDArray[np.float64]:
    """Static part ``L_p L_q int int lambda_i lambda_j / (4 pi R)`` of every pair group.

    Returns
    -------
    ndarray, shape (K, 2, 2)
        ``[k, i, j]`` for the representative ``(p, q)`` of group ``k`` (shape ``i`` on ``p``,
        ``j`` on ``q``), in m.
    """
    length = rownorm(ends - starts)
    tdir = (ends - starts) / length[:, None]
    fac = 2.0 if kernel == "exact" else 1.0
    out = np.empty((pairs.size, 2, 2))

    # far groups: plain Gauss rule on both segments
    far = np.flatnonzero(~pairs.near)
    if len(far):
        p, q = pairs.p[far], pairs.q[far]
        u, lam_w = _shape_rule(rules.static_far)  # (Q,), (Q, 2)
        pp = starts[p][:, None, :] + u[None, :, None] * (ends - starts)[p][:, None, :]
        pq = starts[q][:, None, :] + u[None, :, None] * (ends - starts)[q][:, None, :]
        d2 = 0.0
        for c in range(3):
            dc = pp[:, :, None, c] - pq[:, None, :, c]
            d2 = d2 + dc * dc
        extra2 = fac * 0.5 * (radius[p] ** 2 + radius[q] ** 2)
        g = 1.0 / np.sqrt(d2 + extra2[:, None, None])  # (n, Q, Q)
        out[far] = (lam_w.T @ g @ lam_w) * (INV4PI * length[p] * length[q])[:, None, None]

    # near groups: outer graded Gauss on p, closed-form inner integral on q, ring average
    near = np.flatnonzero(pairs.near)
    if len(near):
        rows, cols = pairs.p[near], pairs.q[near]
        uo, lam_o = _shape_rule(rules.near_outer, graded=True)  # (K,), (K, 2)
        if kernel == "exact":
            wphi, ring2 = _ring_rule(rules.near_phi)  # ring2 times a^2
        else:
            wphi = np.ones(1)
            ring2 = np.ones(1)
        a2 = 0.5 * (radius[rows] ** 2 + radius[cols] ** 2)
        r_out = (starts[rows][:, None, :]
                 + uo[None, :, None] * (ends[rows] - starts[rows])[:, None, :])  # (n, K, 3)
        q0 = starts[cols][:, None, None, :]
        tq = tdir[cols][:, None, None, :]
        lq = length[cols][:, None, None]
        rho2 = a2[:, None, None] * ring2[None, None, :]
        j0, j1 = line_integrals(r_out[:, :, None, :], q0, tq, lq, rho2)  # (n, K, P)
        jbar = np.empty((*j0.shape[:2], 2))  # (n, K, 2)
        jbar[..., 0] = j0 @ wphi
        jbar[..., 1] = j1 @ wphi
        vals = (lam_o.T @ jbar) * (INV4PI * length[rows])[:, None, None]
        # a self pair is stored transposed (as the full-matrix fill always did)
        diag = rows == cols
        vals[diag] = np.swapaxes(vals[diag], 1, 2)
        out[near] = vals
    return out


def static_integrals(
    starts: NDArray[np.float64],
    ends: NDArray[np.float64],
    radius: NDArray[np.float64],
    kernel: str,
    rules: KernelRules,
    near: NDArray[np.bool_] | None = None,
) -> NDArray[np.float64]:
    """Static part ``L_p L_q int int lambda_i lambda_j / (4 pi R)`` for all segment pairs.

    Parameters
    ----------
    starts, ends : ndarray, shape (S, 3)
        Segment end points in m.
    radius : ndarray, shape (S,)
        Equivalent radius of each segment in m.
    kernel : {"exact", "reduced"}
    rules : KernelRules
    near : ndarray of bool, shape (S, S), optional
        Near-field switch of every pair; by default decided per group of identical pairs
        (:class:`PairTable`).

    Returns
    -------
    ndarray, shape (2S, 2S)
        Entry ``[2p + i, 2q + j]`` in m (length x length / length).
    """
    pairs = PairTable(starts, ends, radius, near, rules)
    return pairs.expand(static_pair_integrals(pairs, starts, ends, radius, kernel, rules))


def _dynamic_kernel(k: NDArray[np.float64], r: NDArray[np.float64],
                    inv4pir: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
    """Real and imaginary part of ``(e^{-jkR} - 1)/(4 pi R)`` for every ``k``: (F, ...) each.

    ``e^{-jx} - 1 = -2 sin^2(x/2) - j sin x`` keeps full relative accuracy for small ``x``
    (no cancellation) and needs two real sines instead of a complex exponential.
    """
    x = k.reshape(-1, *([1] * r.ndim)) * r[None]
    half = np.sin(0.5 * x)
    re = -2.0 * half * half * inv4pir
    im = np.sin(x)
    im *= -inv4pir
    return re, im


class DynamicPoints:
    """Frequency-independent data for the dynamic part ``(e^{-jkR} - 1)/(4 pi R)``.

    Holds the Gauss points of every segment and, for every pair group of a
    :class:`PairTable`, the distances between the points of its representative pair (with the
    kernel's radius term), so that each frequency costs two real sines per point pair of the
    groups and one small contraction.
    """

    def __init__(
        self,
        starts: NDArray[np.float64],
        ends: NDArray[np.float64],
        radius: NDArray[np.float64],
        kernel: str,
        rules: KernelRules,
        pairs: PairTable | None = None,
    ) -> None:
        if pairs is None:
            pairs = PairTable(starts, ends, radius, np.zeros((len(starts),) * 2, dtype=bool))
        self.s = len(starts)
        self.q = rules.dynamic
        u, w = gauss01(self.q)
        self.lam_w = _shape_rule(self.q)[1]  # (Q, 2)
        length = rownorm(ends - starts)
        pts = starts[:, None, :] + u[None, :, None] * (ends - starts)[:, None, :]  # (S, Q, 3)
        p, q = pairs.p, pairs.q
        fac = 2.0 if kernel == "exact" else 1.0
        d2 = 0.0
        pts_p, pts_q = pts[p], pts[q]
        for c in range(3):
            dc = pts_p[:, :, None, c] - pts_q[:, None, :, c]
            d2 = d2 + dc * dc
        extra2 = fac * 0.5 * (radius[p] ** 2 + radius[q] ** 2)
        self.r = np.sqrt(d2 + extra2[:, None, None]).reshape(len(p), -1)  # (K, Q^2)
        self._set_distances([self.r])
        # weights of the point pairs (u, v) for the four shape pairs (i, j) and for the charge
        # (sum over the shapes: w_u w_v): (Q^2, 5), times L_p L_q of each group
        self.weights = _point_pair_weights(self.q)
        self.scale = length[p] * length[q]  # (K,)
        self.length = length
        self.w = w
        self.pts = pts.reshape(-1, 3)

    def _set_distances(self, parts: list[NDArray[np.float64]]) -> None:
        """Every distance the dynamic kernel runs over, flattened into one array (the pair
        groups, then the end caps), with its ``1 / (4 pi r)``."""
        self._r_all = np.concatenate([d.reshape(-1) for d in parts])
        self._inv4pir_all = INV4PI / self._r_all

    @property
    def points_in_flight(self) -> int:
        """Point pairs evaluated per frequency (for memory chunking)."""
        return self._r_all.size

    def set_caps(self, cap_pos: NDArray[np.float64], cap_radius: NDArray[np.float64]) -> None:
        """Prepare cap-to-segment and cap-to-cap distances (see :func:`cap_static_integrals`)."""
        rho2 = cap_rho2(cap_radius)
        d2 = np.add.reduce((cap_pos[:, None, :] - self.pts[None, :, :]) ** 2, axis=-1)
        self.cap_r = np.sqrt(d2 + rho2[:, None])  # (C, SQ)
        dc = rownorm(cap_pos[:, None, :] - cap_pos[None, :, :])
        self.cap_cap_r = np.sqrt(dc**2 + rho2[:, None] + rho2[None, :])
        self.cap_weights = (self.w[None, :] * self.length[:, None]).reshape(-1)  # (SQ,)
        self._set_distances([self.r, self.cap_r, self.cap_cap_r])

    def columns(self, k: NDArray[np.float64]
                ) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
        """Every dynamic integral for wavenumbers ``k``: pair groups and end caps together.

        Returns the pair groups, (F, K, 5): columns 0-3 ``A_pq[i, j]`` for ``(i, j) = (0, 0),
        (0, 1), (1, 0), (1, 1)``, column 4 their sum (the charge integral of the scalar
        potential), in m; and the end caps, (F, C S + C^2): the cap-segment integrals (the
        segment's Gauss points weighted by ``w L``), then the cap-cap ones, flattened. The
        kernel runs once over all point pairs.
        """
        k = np.atleast_1d(np.asarray(k, dtype=float))
        re, im = _dynamic_kernel(k, self._r_all, self._inv4pir_all)  # (F, P) each
        n_f = len(k)
        n_k, q2 = self.r.shape
        end = n_k * q2
        pairs = np.empty((n_f, n_k, 5), dtype=complex)
        pairs.real = re[:, :end].reshape(n_f, n_k, q2) @ self.weights
        pairs.imag = im[:, :end].reshape(n_f, n_k, q2) @ self.weights
        pairs *= self.scale[None, :, None]
        if hasattr(self, "cap_r"):
            c = self.cap_r.shape[0]
            cs = c * self.s
            stop = end + self.cap_r.size
            caps = np.empty((n_f, cs + c * c), dtype=complex)
            for part, dst in ((re, caps.real), (im, caps.imag)):
                dst[:, :cs] = (part[:, end:stop].reshape(n_f, c, -1) * self.cap_weights).reshape(
                    n_f, cs, self.q).sum(axis=-1)
                dst[:, cs:] = part[:, stop:]
        else:
            caps = np.empty((n_f, 0), dtype=complex)
        return pairs, caps

# --------------------------------------------------------------------------- end caps
#
# An end cap is a flat disk of radius ``a`` closing a free wire end; it carries the charge that
# the current of the end basis deposits there. Its potential integrals use the averages of
# ``1/R`` over a uniformly charged disk: disk to itself ``16 / (3 pi a)``, disk to a coaxial ring
# of the same radius in its plane ``4 / (pi a)`` (the potential of a uniform disk at its rim;
# W. R. Smythe, *Static and Dynamic Electricity*, 3rd ed., 1968, ch. 5, from memory). Toward a
# segment the disk is represented by ``R^2 = d^2 + (pi a / 4)^2``, which reproduces the rim
# value at ``d = 0`` and the point charge far away.


def cap_rho2(cap_radius: NDArray[np.float64]) -> NDArray[np.float64]:
    """Squared softening radius of each cap toward segments, ``(pi a / 4)^2``."""
    return (0.25 * np.pi * cap_radius) ** 2


def cap_static_integrals(
    cap_pos: NDArray[np.float64],
    cap_radius: NDArray[np.float64],
    starts: NDArray[np.float64],
    ends: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Static potential integrals of the end caps.

    Returns
    -------
    cap_seg : ndarray, shape (C, S)
        ``int_q 1/(4 pi R) dl'`` from each cap to each segment (dimensionless).
    cap_cap : ndarray, shape (C, C)
        ``<1/(4 pi R)>`` between caps in 1/m (disk self term on the diagonal).
    """
    length = rownorm(ends - starts)
    tdir = (ends - starts) / length[:, None]
    rho2 = cap_rho2(cap_radius)[:, None]
    j0, j1 = line_integrals(cap_pos[:, None, :], starts[None], tdir[None], length[None], rho2)
    cap_seg = INV4PI * (j0 + j1)
    d = rownorm(cap_pos[:, None, :] - cap_pos[None, :, :])
    with np.errstate(divide="ignore"):
        cap_cap = INV4PI / np.sqrt(d**2 + rho2 + rho2.T)
    np.fill_diagonal(cap_cap, INV4PI * 16.0 / (3.0 * np.pi * cap_radius))
    return cap_seg, cap_cap
