"""Galerkin impedance matrix of the mixed-potential thin-wire EFIE with triangle bases.

With triangle (rooftop) basis and testing functions ``f_m`` along the wire axes, the Galerkin
form of the electric-field integral equation is

    ``Z_mn = j omega mu int int f_m . f_n G dl dl'``
    ``     + 1/(j omega eps) int int (div f_m)(div' f_n) G dl dl'``

(R. F. Harrington, *Field Computation by Moment Methods*, Macmillan 1968, ch. 4; the mixed-potential
form with linear bases follows S. M. Rao, D. R. Wilton & A. W. Glisson, IEEE Trans. AP 30(3),
1982, reduced to wires; from memory). The conductor's finite conductivity enters through the
surface-impedance boundary condition ``E_tan = Z' I`` on the wire, which adds the Gram matrix
``int Z'(f) f_m . f_n dl`` (a banded matrix), and lumped loads add ``Z_L e e^T``.

The frequency-independent parts (static kernel integrals, Gram matrices, index maps) are built
once per mesh in :class:`MatrixFill`; each frequency then costs the smooth dynamic kernel on a
few Gauss points per segment and a gather.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from sweeps.geometry import Mesh
from sweeps.materials import EPS0, MU0
from sweeps.mom.kernel import (
    DynamicPoints,
    KernelRules,
    cap_static_integrals,
    near_pairs,
    static_integrals,
)

__all__ = ["MatrixFill"]


def _weighted_take(a: NDArray, flat: NDArray, coef: NDArray) -> NDArray:
    """``sum_ab coef[a, b] * a.flat[flat[a, b]]`` per frequency: (F, N, N) from (F, ...)."""
    f = a.shape[0]
    taken = a.reshape(f, -1)[:, flat]  # (F, 2, 2, N, N)
    return (taken[:, 0, 0] * coef[0, 0] + taken[:, 0, 1] * coef[0, 1]
            + taken[:, 1, 0] * coef[1, 0] + taken[:, 1, 1] * coef[1, 1])


class MatrixFill:
    """Impedance-matrix builder for one mesh.

    Parameters
    ----------
    mesh : Mesh
        Validated, segmented structure.
    kernel : {"exact", "reduced"}
        Thin-wire kernel (see :mod:`sweeps.mom.kernel`).
    rules : KernelRules, optional
        Quadrature orders.

    Notes
    -----
    Memory: the dynamic part holds ``(S Q)^2`` distances (``Q`` Gauss points per segment) and,
    per frequency in flight, ``(S Q)^2`` complex kernel values; frequencies are processed in
    chunks that keep this below about 256 MB.
    """

    def __init__(self, mesh: Mesh, kernel: str = "exact", rules: KernelRules | None = None):
        self.mesh = mesh
        self.kernel = kernel
        self.rules = rules or KernelRules()
        starts, ends = mesh.seg_start, mesh.seg_end
        near = near_pairs(starts, ends, mesh.seg_radius, self.rules)
        static = static_integrals(starts, ends, mesh.seg_radius, kernel, self.rules, near)
        self._dyn = DynamicPoints(starts, ends, mesh.seg_radius, kernel, self.rules)
        self._n_caps = len(mesh.cap_nodes)
        if self._n_caps:
            cap_pos = mesh.nodes[mesh.cap_nodes]
            self._cap_static = cap_static_integrals(cap_pos, mesh.cap_radius, starts, ends)
            self._dyn.set_caps(cap_pos, mesh.cap_radius)

        idx = 2 * mesh.half_seg + mesh.half_shape  # (N, 2) index into shape space
        tdir = mesh.seg_dir
        n = mesh.n_unknowns
        self._idx = idx
        # charge element of each half: its segment, or S + cap index for an end cap
        self._seg = np.where(mesh.half_cap >= 0, mesh.n_segments + mesh.half_cap, mesh.half_seg)
        # coefficient of each half pair (a, b) for the vector and scalar potentials
        sgn = mesh.half_sign.astype(float)
        tvec = tdir[mesh.half_seg] * sgn[..., None]  # (N, 2, 3): current direction of each half
        self._cv = np.einsum("mac,nbc->abmn", tvec, tvec)  # (2, 2, N, N)
        self._cs = np.einsum("ma,nb->abmn", mesh.half_div, mesh.half_div)
        self.static_vector = self._gather_vector(static[None])[0]
        caps = (self._cap_static[0][None], self._cap_static[1][None]) if self._n_caps else None
        self.static_scalar = self._gather_scalar(static[None], caps)[0]

        # Gram matrices of each wire, int f_m . f_n dl over its segments (for the loss), kept
        # sparse: (rows, cols, values) of the entries of bases sharing a segment of that wire
        self._grams: list[tuple[int, NDArray[np.int64], NDArray[np.int64], NDArray]] = []
        length = mesh.seg_length
        mass = np.array([[1.0 / 3.0, 1.0 / 6.0], [1.0 / 6.0, 1.0 / 3.0]])
        halves = [(m, h) for m in range(n) for h in range(2) if sgn[m, h] != 0]
        by_seg: dict[int, list[tuple[int, int]]] = {}
        for m, h in halves:
            by_seg.setdefault(int(mesh.half_seg[m, h]), []).append((m, h))
        for wi in np.unique(mesh.seg_wire):
            acc: dict[tuple[int, int], float] = {}
            for seg, members in by_seg.items():
                if mesh.seg_wire[seg] != wi:
                    continue
                for m, a_ in members:
                    for q, b_ in members:
                        val = (sgn[m, a_] * sgn[q, b_] * length[seg]
                               * mass[mesh.half_shape[m, a_], mesh.half_shape[q, b_]])
                        acc[(m, q)] = acc.get((m, q), 0.0) + val
            keys = list(acc)
            rows = np.array([k[0] for k in keys], dtype=np.int64)
            cols = np.array([k[1] for k in keys], dtype=np.int64)
            vals = np.array([acc[k] for k in keys])
            self._grams.append((int(wi), rows, cols, vals))

    # ------------------------------------------------------------------ gathers
    def _gather_vector(self, a: NDArray) -> NDArray:
        """``sum_ab cv_ab * A[idx_a, idx_b]`` for a stack ``a`` of shape (F, 2S, 2S)."""
        if not hasattr(self, "_vflat"):
            side = a.shape[-1]
            i = self._idx
            self._vflat = (i[:, None, :, None] * side + i[None, :, None, :]).transpose(2, 3, 0, 1)
            self._vcoef = self._cv
        return _weighted_take(a, self._vflat, self._vcoef)

    def _gather_scalar(
        self, a: NDArray, caps: tuple[NDArray, NDArray] | None = None
    ) -> NDArray:
        """``sum_ab cs_ab * Phi[elem_a, elem_b]`` over charge elements (segments, then caps)."""
        f = a.shape[0]
        s = a.shape[1] // 2
        c = 0 if caps is None else caps[1].shape[-1]
        side = s + c
        phi = np.empty((f, side, side), dtype=a.dtype if caps is None else complex)
        phi[:, :s, :s] = a.reshape(f, s, 2, s, 2).sum(axis=(2, 4))
        if caps is not None:
            cap_seg, cap_cap = caps
            phi[:, s:, :s] = cap_seg
            phi[:, :s, s:] = np.swapaxes(cap_seg, 1, 2)
            phi[:, s:, s:] = cap_cap
        if getattr(self, "_sside", None) != side:
            e = self._seg
            self._sflat = (e[:, None, :, None] * side + e[None, :, None, :]).transpose(2, 3, 0, 1)
            self._sside = side
        return _weighted_take(phi, self._sflat, self._cs)

    # ------------------------------------------------------------------ public
    @property
    def n_unknowns(self) -> int:
        return self.mesh.n_unknowns

    def _chunk(self) -> int:
        per = (self._dyn.r.size * 16) * 3 + 1
        return max(1, int(256e6 // per))

    def potentials(self, f_hz: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
        """Exact vector- and scalar-potential matrices ``V``, ``S``: each (F, N, N).

        ``Z_efie = j omega mu V + S / (j omega eps)``; ``V`` in m, ``S`` in 1/m.
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        n = self.n_unknowns
        vec = np.empty((len(f), n, n), dtype=complex)
        sca = np.empty((len(f), n, n), dtype=complex)
        step = self._chunk()
        for i0 in range(0, len(f), step):
            k = 2.0 * np.pi * f[i0: i0 + step] * np.sqrt(MU0 * EPS0)
            dyn = self._dyn.integrals(k)
            vec[i0: i0 + step] = self._gather_vector(dyn) + self.static_vector[None]
            caps = self._dyn.cap_integrals(k) if self._n_caps else None
            sca[i0: i0 + step] = self._gather_scalar(dyn, caps) + self.static_scalar[None]
        return vec, sca

    def efie_direct(self, f_hz: NDArray[np.float64]) -> NDArray[np.complex128]:
        """EFIE matrix filled afresh at every frequency: shape (F, N, N) in ohm."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        vec, sca = self.potentials(f)
        omega = 2.0 * np.pi * f
        return (1j * omega * MU0)[:, None, None] * vec + sca / (1j * omega * EPS0)[:, None, None]

    def efie(
        self, f_hz: NDArray[np.float64], *, interpolate: bool | None = None
    ) -> NDArray[np.complex128]:
        """EFIE part of Z (radiation and reactance, no losses): shape (F, N, N) in ohm.

        Parameters
        ----------
        f_hz : array_like, shape (F,)
        interpolate : bool, optional
            Use the frequency interpolation of :mod:`sweeps.mom.interp` (default: when the sweep
            has enough points for it to pay off; it falls back to direct fills by itself when its
            error check fails).
        """
        from sweeps.mom.interp import interpolated_efie

        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        if interpolate is None:
            interpolate = len(f) >= 16
        if not interpolate:
            return self.efie_direct(f)
        return interpolated_efie(self, f)

    @property
    def basis_distance(self) -> NDArray[np.float64]:
        """Distance between the nodes of every pair of bases in m, (N, N): the phase centres."""
        if not hasattr(self, "_bdist"):
            pos = self.mesh.nodes[self.mesh.basis_node]
            self._bdist = np.linalg.norm(pos[:, None, :] - pos[None, :, :], axis=-1)
        return self._bdist

    @property
    def basis_extent(self) -> float:
        """Largest distance in m from a basis node to any point of its support."""
        return float(np.max(self.mesh.seg_length))

    def wire_impedances(self, f_hz: NDArray[np.float64]) -> list[NDArray[np.complex128]]:
        """Internal impedance per unit length (ohm/m) of each lossy wire, in ``_grams`` order."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        out = []
        for wi, *_ in self._grams:
            wire = self.mesh.structure.wires[wi]
            out.append(wire.section.internal_impedance(f, wire.conductivity_s_per_m))
        return out

    def add_loss(self, z: NDArray[np.complex128], f_hz: NDArray[np.float64]) -> None:
        """Add the conductor-loss matrix ``int Z'(f) f_m . f_n dl`` to ``z`` (F, N, N) in place."""
        for (_, rows, cols, vals), zs in zip(self._grams, self.wire_impedances(f_hz),
                                             strict=True):
            if np.any(zs != 0):
                z[:, rows, cols] += zs[:, None] * vals[None, :]

    def loss(self, f_hz: NDArray[np.float64]) -> NDArray[np.complex128]:
        """Conductor-loss part ``int Z'(f) f_m . f_n dl``: shape (F, N, N) in ohm."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        n = self.n_unknowns
        out = np.zeros((len(f), n, n), dtype=complex)
        self.add_loss(out, f)
        return out

    def loss_power(self, currents: NDArray[np.complex128], f_hz: NDArray[np.float64]
                   ) -> NDArray[np.float64]:
        """Power dissipated in the conductors, ``1/2 Re(I^H Z_loss I)`` in W: (F, K).

        ``currents`` has shape (F, N, K) (peak amplitudes).
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        out = np.zeros((len(f), currents.shape[-1]))
        for (_, rows, cols, vals), zs in zip(self._grams, self.wire_impedances(f),
                                             strict=True):
            quad = np.sum(currents[:, rows, :].conj() * (vals[None, :, None]
                                                         * currents[:, cols, :]), axis=1)
            out += 0.5 * zs.real[:, None] * quad.real
        return out

    def loads(self, f_hz: NDArray[np.float64]) -> NDArray[np.complex128]:
        """Lumped-load part ``sum_L Z_L(f) e_L e_L^T``: shape (F, N, N) in ohm."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        n = self.n_unknowns
        out = np.zeros((len(f), n, n), dtype=complex)
        for li, load in enumerate(self.mesh.structure.loads):
            e = self.mesh.load_vectors[:, li]
            out += load.impedance(f)[:, None, None] * np.outer(e, e)[None]
        return out

    def add_loads(self, z: NDArray[np.complex128], f_hz: NDArray[np.float64]) -> None:
        """Add the lumped loads to ``z`` (F, N, N) in place."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        for li, load in enumerate(self.mesh.structure.loads):
            e = self.mesh.load_vectors[:, li]
            nz = np.nonzero(e)[0]
            z[:, nz[:, None], nz[None, :]] += (load.impedance(f)[:, None, None]
                                               * np.outer(e[nz], e[nz])[None])

    def load_power(self, currents: NDArray[np.complex128], f_hz: NDArray[np.float64]
                   ) -> NDArray[np.float64]:
        """Power dissipated in the lumped loads in W: (F, K)."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        out = np.zeros((len(f), currents.shape[-1]))
        for li, load in enumerate(self.mesh.structure.loads):
            i_load = np.einsum("n,fnk->fk", self.mesh.load_vectors[:, li], currents)
            out += 0.5 * load.impedance(f).real[:, None] * np.abs(i_load) ** 2
        return out

    def matrix(self, f_hz: NDArray[np.float64]) -> NDArray[np.complex128]:
        """Full impedance matrix (EFIE + conductor loss + loads): shape (F, N, N) in ohm."""
        z = self.efie(f_hz)
        self.add_loss(z, f_hz)
        self.add_loads(z, f_hz)
        return z
