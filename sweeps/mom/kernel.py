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

import numpy as np
from numpy.typing import NDArray

from sweeps.mom.quadrature import gauss01, graded_gauss01, start_graded_gauss01

__all__ = ["KernelRules", "static_integrals", "DynamicPoints", "near_pairs"]

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
    xi = np.sum(w * tq, axis=-1)
    perp2 = np.maximum(np.sum(w * w, axis=-1) - xi * xi, 0.0)
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
) -> NDArray[np.bool_]:
    """Boolean ``(S, S)`` matrix of the segment pairs that need the near-field treatment."""
    from sweeps.geometry import segment_distances

    length = np.linalg.norm(ends - starts, axis=1)
    dist = segment_distances(starts, ends, starts, ends)
    lmax = np.maximum(length[:, None], length[None, :])
    amax = np.maximum(radius[:, None], radius[None, :])
    return dist < np.maximum(rules.near_lengths * lmax, rules.near_radii * amax)


def _pair_radius2(radius: NDArray[np.float64]) -> NDArray[np.float64]:
    return 0.5 * (radius[:, None] ** 2 + radius[None, :] ** 2)


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
        Precomputed :func:`near_pairs`.

    Returns
    -------
    ndarray, shape (2S, 2S)
        Entry ``[2p + i, 2q + j]`` in m (length x length / length).
    """
    s = len(starts)
    length = np.linalg.norm(ends - starts, axis=1)
    tdir = (ends - starts) / length[:, None]
    if near is None:
        near = near_pairs(starts, ends, radius, rules)
    extra2 = _pair_radius2(radius) * (2.0 if kernel == "exact" else 1.0)

    # far pairs: plain Gauss rule on both segments
    u, w = gauss01(rules.static_far)
    lam_w = _lambda(u) * w[:, None]  # (Q, 2)
    pts = starts[:, None, :] + u[None, :, None] * (ends - starts)[:, None, :]  # (S, Q, 3)
    q = rules.static_far
    out = np.empty((s, 2, s, 2))
    chunk = max(1, int(2e7 // (s * q * q + 1)))
    flat = pts.reshape(-1, 3)
    sq = np.sum(flat * flat, axis=1)
    for p0 in range(0, s, chunk):
        p1 = min(s, p0 + chunk)
        blk = pts[p0:p1].reshape(-1, 3)
        d2 = np.maximum(np.sum(blk * blk, axis=1)[:, None] + sq[None, :] - 2.0 * blk @ flat.T,
                        0.0).reshape(p1 - p0, q, s, q)
        g = 1.0 / np.sqrt(d2 + extra2[p0:p1, None, :, None])  # (c, Q, S, Q)
        tmp = (g @ lam_w).reshape(p1 - p0, q, 2 * s)  # contract v
        out[p0:p1] = np.matmul(lam_w.T, tmp).reshape(p1 - p0, 2, s, 2)  # contract u
    out *= INV4PI * length[:, None, None, None] * length[None, None, :, None]

    # near pairs: outer graded Gauss on p, closed-form inner integral on q, ring average
    rows, cols = np.nonzero(np.triu(near))
    if len(rows):
        uo, wo = graded_gauss01(rules.near_outer)
        if kernel == "exact":
            tphi, wphi = start_graded_gauss01(rules.near_phi)
            phi = np.pi * tphi
            wphi = wphi  # (1/pi) int_0^pi dphi = int_0^1 dt
            ring2 = (2.0 * np.sin(0.5 * phi)) ** 2  # times a^2
        else:
            wphi = np.ones(1)
            ring2 = np.ones(1)
        a2 = _pair_radius2(radius)[rows, cols]
        r_out = (starts[rows][:, None, :]
                 + uo[None, :, None] * (ends[rows] - starts[rows])[:, None, :])  # (n, K, 3)
        q0 = starts[cols][:, None, None, :]
        tq = tdir[cols][:, None, None, :]
        lq = length[cols][:, None, None]
        rho2 = a2[:, None, None] * ring2[None, None, :]
        j0, j1 = line_integrals(r_out[:, :, None, :], q0, tq, lq, rho2)  # (n, K, P)
        jbar = np.stack([j0 @ wphi, j1 @ wphi], axis=-1)  # (n, K, 2)
        lam_o = _lambda(uo) * wo[:, None]  # (K, 2)
        vals = np.einsum("ki,nkj->nij", lam_o, jbar) * (INV4PI * length[rows])[:, None, None]
        out[rows, :, cols, :] = vals
        out[cols, :, rows, :] = np.transpose(vals, (0, 2, 1))
    return out.reshape(2 * s, 2 * s)


class DynamicPoints:
    """Frequency-independent data for the dynamic part ``(e^{-jkR} - 1)/(4 pi R)``.

    Holds the Gauss points of every segment and their pair distances (with the kernel's radius
    term), so that each frequency costs one complex exponential per point pair and two small
    contractions.
    """

    def __init__(
        self,
        starts: NDArray[np.float64],
        ends: NDArray[np.float64],
        radius: NDArray[np.float64],
        kernel: str,
        rules: KernelRules,
    ) -> None:
        self.s = len(starts)
        self.q = rules.dynamic
        u, w = gauss01(self.q)
        self.lam_w = _lambda(u) * w[:, None]  # (Q, 2)
        length = np.linalg.norm(ends - starts, axis=1)
        pts = (starts[:, None, :] + u[None, :, None] * (ends - starts)[:, None, :]).reshape(-1, 3)
        extra2 = _pair_radius2(radius) * (2.0 if kernel == "exact" else 1.0)
        extra2 = np.repeat(np.repeat(extra2, self.q, axis=0), self.q, axis=1)
        d2 = np.sum((pts[:, None, :] - pts[None, :, :]) ** 2, axis=-1)
        self.r = np.sqrt(d2 + extra2)  # (SQ, SQ)
        self.inv4pir = INV4PI / self.r
        self.scale = length[:, None] * length[None, :]  # (S, S)
        self.length = length
        self.w = w
        self.pts = pts

    def set_caps(self, cap_pos: NDArray[np.float64], cap_radius: NDArray[np.float64]) -> None:
        """Prepare cap-to-segment and cap-to-cap distances (see :func:`cap_static_integrals`)."""
        rho2 = cap_rho2(cap_radius)
        d2 = np.sum((cap_pos[:, None, :] - self.pts[None, :, :]) ** 2, axis=-1)
        self.cap_r = np.sqrt(d2 + rho2[:, None])  # (C, SQ)
        dc = np.linalg.norm(cap_pos[:, None, :] - cap_pos[None, :, :], axis=-1)
        self.cap_cap_r = np.sqrt(dc**2 + rho2[:, None] + rho2[None, :])
        self.cap_weights = (self.w[None, :] * self.length[:, None]).reshape(-1)  # (SQ,)

    def cap_integrals(
        self, k: NDArray[np.float64]
    ) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
        """Dynamic cap integrals for wavenumbers ``k``: shapes (F, C, S) and (F, C, C)."""
        k = np.atleast_1d(np.asarray(k, dtype=float))
        c = self.cap_r.shape[0]
        g = np.expm1(-1j * k[:, None, None] * self.cap_r[None]) * (INV4PI / self.cap_r)[None]
        g = (g * self.cap_weights).reshape(len(k), c, self.s, self.q).sum(axis=-1)
        gc = np.expm1(-1j * k[:, None, None] * self.cap_cap_r[None]) * (
            INV4PI / self.cap_cap_r)[None]
        return g, gc

    def integrals(self, k: NDArray[np.float64]) -> NDArray[np.complex128]:
        """Dynamic ``A_pq[i, j]`` for wavenumbers ``k`` (1/m): shape ``(F, 2S, 2S)``."""
        k = np.atleast_1d(np.asarray(k, dtype=float))
        s, q = self.s, self.q
        g = np.expm1(-1j * k[:, None, None] * self.r[None]) * self.inv4pir[None]
        g = g.reshape(len(k), s, q, s, q)
        tmp = g @ self.lam_w  # (F, S, Q, S, 2)
        # contract u: (F, S, Q, S*2) with lam_w (Q, 2) -> (F, S, 2, S*2)
        out = np.matmul(self.lam_w.T, tmp.reshape(len(k), s, q, 2 * s))
        out = out.reshape(len(k), s, 2, s, 2)
        out *= self.scale[None, :, None, :, None]
        return out.reshape(len(k), 2 * s, 2 * s)


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
    length = np.linalg.norm(ends - starts, axis=1)
    tdir = (ends - starts) / length[:, None]
    rho2 = cap_rho2(cap_radius)[:, None]
    j0, j1 = line_integrals(cap_pos[:, None, :], starts[None], tdir[None], length[None], rho2)
    cap_seg = INV4PI * (j0 + j1)
    d = np.linalg.norm(cap_pos[:, None, :] - cap_pos[None, :, :], axis=-1)
    with np.errstate(divide="ignore"):
        cap_cap = INV4PI / np.sqrt(d**2 + rho2 + rho2.T)
    np.fill_diagonal(cap_cap, INV4PI * 16.0 / (3.0 * np.pi * cap_radius))
    return cap_seg, cap_cap
