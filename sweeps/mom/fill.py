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

from sweeps.geometry import Mesh, rownorm
from sweeps.materials import EPS0, MU0
from sweeps.mom.kernel import (
    DynamicPoints,
    KernelRules,
    PairTable,
    cap_static_integrals,
    static_pair_integrals,
)

__all__ = ["MatrixFill"]

#: Bytes of temporaries per kernel point pair and frequency (real arguments, sines, the two
#: parts) and per matrix entry and frequency (the complex results and the assembly copy).
_BYTES_PER_POINT = 40
_BYTES_PER_ENTRY = 48
_CHUNK_BYTES = 64e6
_LOSS_BLOCK = 16


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
    The kernel integrals are computed per group of geometrically identical segment pairs
    (:class:`~sweeps.mom.kernel.PairTable`) and mapped onto the basis functions by two sparse
    *assembly matrices* (``N^2`` rows; one entry per pair of basis halves): the vector potential
    ``V = A_V a_V`` and the scalar potential ``S = A_S a_S`` for the stacked per-group integrals
    ``a``. The static parts are assembled once; each frequency costs the dynamic kernel on the
    groups and two sparse products.

    Memory: frequencies are processed in chunks that keep the temporaries below about 64 MB.
    """

    def __init__(self, mesh: Mesh, kernel: str = "exact", rules: KernelRules | None = None):
        self.mesh = mesh
        self.kernel = kernel
        self.rules = rules or KernelRules()
        starts, ends, radius = mesh.seg_start, mesh.seg_end, mesh.seg_radius
        self.pairs = PairTable(starts, ends, radius, rules=self.rules)
        static = static_pair_integrals(self.pairs, starts, ends, radius, kernel, self.rules)
        self._dyn = DynamicPoints(starts, ends, radius, kernel, self.rules, self.pairs)
        self._n_caps = len(mesh.cap_nodes)
        if self._n_caps:
            cap_pos = mesh.nodes[mesh.cap_nodes]
            cap_seg, cap_cap = cap_static_integrals(cap_pos, mesh.cap_radius, starts, ends)
            self._dyn.set_caps(cap_pos, mesh.cap_radius)
        else:
            cap_seg, cap_cap = np.zeros((0, mesh.n_segments)), np.zeros((0, 0))
        self._assemble_maps()
        # the static integrals enter every frequency's source (the assembly is linear)
        self._static_vector_src = static.reshape(-1)
        self._static_charge_src = np.concatenate([static.sum(axis=(1, 2)), cap_seg.ravel(),
                                                  cap_cap.ravel()])
        self._grams = self._gram_matrices()

    # ------------------------------------------------------------------ assembly
    def _assemble_maps(self) -> None:
        """Sparse assembly matrices from per-group integrals to basis-function potentials.

        ``V[m, n] = sum_ab s_ma s_nb (t_ma . t_nb) A[(p_ma, i_ma), (p_nb, j_nb)]`` and
        ``S[m, n] = sum_ab d_ma d_nb Phi[e_ma, e_nb]`` over the halves ``a, b`` of bases ``m, n``
        (sign ``s``, direction ``t``, segment ``p``, shape ``i``, divergence ``d``, charge
        element ``e``: its segment or its end cap). ``A`` of a pair ``p > q`` is that of
        ``(q, p)`` transposed.
        """
        from scipy.sparse import csr_matrix

        mesh = self.mesh
        n = mesh.n_unknowns
        s = mesh.n_segments
        c = self._n_caps
        k = self.pairs.size
        index = self.pairs.index
        itype = index.dtype  # int32 unless the structure is huge: smaller, faster maps
        # one matrix for both potentials: columns [4K shape integrals | charge integrals] and
        # eight entries per row m N + n, [potential, a, b] for the pairs of halves (a, b) of
        # bases m and n (zeros kept: an end-cap half carries no axial current; duplicate columns
        # in a row add up in the product), so that a source scaled by j omega mu and
        # 1/(j omega eps) gives Z. The blocks are formed for one half a of the bases m at a
        # time over all halves of the bases n, (N, 2N) indexed [m, 2n + b] (numpy is slow on
        # short innermost axes), and then written to their places in the rows.
        self._n_vector_src = 4 * k
        vals = np.empty((n, n, 2, 2, 2))
        cols = np.empty((n, n, 2, 2, 2), dtype=itype)

        seg = mesh.half_seg.ravel()  # (2N,): [2m + a]; int64, as are the flat indices below
        shape = mesh.half_shape.ravel().astype(np.int8)  # 0 or 1: small temporaries
        tvec = (mesh.seg_dir[mesh.half_seg] * mesh.half_sign[:, :, None]).reshape(2 * n, 3)
        # charge elements: segments, then end caps; their pair columns follow the 4K
        elem_cols = np.empty((s + c, s + c), dtype=itype)
        elem_cols[:s, :s] = index
        if c:
            cap_seg = k + np.arange(c, dtype=itype)[:, None] * s + np.arange(s, dtype=itype)
            elem_cols[s:, :s] = cap_seg
            elem_cols[:s, s:] = cap_seg.T
            elem_cols[s:, s:] = (k + c * s + np.arange(c * c, dtype=itype)).reshape(c, c)
        elem_cols += 4 * k
        elem = np.where(mesh.half_cap >= 0, s + mesh.half_cap, mesh.half_seg).ravel()
        div = mesh.half_div.ravel()
        def put(out: NDArray, block: NDArray) -> None:
            for b in range(2):  # (N, N) copies into the rows' entries [a, b]
                out[:, :, b] = block[:, b::2]

        for a in range(2):  # the halves a of the bases m: blocks (N, 2N), [m, 2n + b]
            sa, sha = seg[a::2, None], shape[a::2, None]
            # shape pair (p, i), (q, j): column 4 index[p, q] + 2 i + j, transposed for p > q
            col = index.take(sa * s + seg[None, :])
            col *= 4
            col += np.where(sa <= seg[None, :], 2 * sha + shape[None, :], sha + 2 * shape[None, :])
            put(cols[:, :, 0, a], col)
            put(cols[:, :, 1, a], elem_cols.take(elem[a::2, None] * (s + c) + elem[None, :]))
            put(vals[:, :, 0, a], tvec[a::2] @ tvec.T)
            put(vals[:, :, 1, a], np.outer(div[a::2], div))
        indptr = np.arange(0, 8 * n * n + 1, 8, dtype=np.int32 if 8 * n * n < 2**31 else np.int64)
        self._amap = csr_matrix((vals.reshape(-1), cols.reshape(-1), indptr),
                                shape=(n * n, 4 * k + k + c * s + c * c))

    def _assemble(self, vector: NDArray | None, scalar: NDArray | None) -> NDArray:
        """``A_V a_V + A_S a_S`` (F, N*N) from shape integrals (F, 4K) and charge integrals
        (F, K + C S + C^2): either may be ``None`` (left out)."""
        f = len(vector if vector is not None else scalar)
        cplx = np.iscomplexobj(vector) or np.iscomplexobj(scalar)
        # real and imaginary parts as separate real columns: the real matrix is never copied
        # to complex (which would cost 16 bytes per entry per call)
        src = np.zeros((self._amap.shape[1], 2 * f if cplx else f))
        for part, sl in ((vector, slice(None, self._n_vector_src)),
                         (scalar, slice(self._n_vector_src, None))):
            if part is None:
                continue
            if cplx:
                src[sl, 0::2] = part.real.T
                src[sl, 1::2] = part.imag.T
            else:
                src[sl] = part.T
        out = self._amap @ src  # (N*N, 2F): columns re, im of each frequency
        return out.view(complex).T if cplx else out.T

    @property
    def static_vector(self) -> NDArray[np.float64]:
        """Static part of the vector potential, (N, N) in m."""
        n = self.n_unknowns
        return self._vector(self._static_vector_src[None]).reshape(n, n)

    @property
    def static_scalar(self) -> NDArray[np.float64]:
        """Static part of the scalar potential, (N, N) in 1/m."""
        n = self.n_unknowns
        return self._scalar(self._static_charge_src[None]).reshape(n, n)

    def _vector(self, a: NDArray) -> NDArray:
        """Vector potential (F, N*N) from per-group shape integrals (F, 4K)."""
        return self._assemble(a, None)

    def _scalar(self, a: NDArray) -> NDArray:
        """Scalar potential (F, N*N) from the charge integrals: groups, cap-segment, cap-cap."""
        return self._assemble(None, a)

    def _gram_matrices(self) -> list[tuple[int, NDArray[np.int64], NDArray[np.int64], NDArray]]:
        """Gram matrices ``int f_m . f_n dl`` of each wire (for the conductor loss), sparse.

        One ``(wire, rows, cols, values)`` per wire: the entries of the bases sharing a segment
        of that wire, from the exact mass matrix of two linear shapes,
        ``L [[1/3, 1/6], [1/6, 1/3]]``.
        """
        mesh = self.mesh
        n = mesh.n_unknowns
        sgn = mesh.half_sign.astype(float)
        m_idx, h_idx = np.nonzero(sgn != 0)
        seg = mesh.half_seg[m_idx, h_idx]
        order = np.argsort(seg, kind="stable")
        m_idx, h_idx, seg = m_idx[order], h_idx[order], seg[order]
        # every ordered pair of halves on the same segment (groups of equal `seg`)
        starts = np.flatnonzero(np.concatenate(([True], seg[1:] != seg[:-1])))
        sizes = np.empty_like(starts)
        sizes[:-1] = starts[1:] - starts[:-1]
        sizes[-1] = len(seg) - starts[-1]
        size_of = np.repeat(sizes, sizes)  # group size of each half
        first_of = np.repeat(starts, sizes)  # group start of each half
        left = np.repeat(np.arange(len(seg)), size_of)
        offset = np.arange(len(left)) - np.repeat(np.cumsum(size_of) - size_of, size_of)
        right = np.repeat(first_of, size_of) + offset
        mass = np.array([[1.0 / 3.0, 1.0 / 6.0], [1.0 / 6.0, 1.0 / 3.0]])
        ml, hl, mr, hr = m_idx[left], h_idx[left], m_idx[right], h_idx[right]
        s_l = seg[left]
        vals = (sgn[ml, hl] * sgn[mr, hr] * mesh.seg_length[s_l]
                * mass[mesh.half_shape[ml, hl], mesh.half_shape[mr, hr]])
        wire = mesh.seg_wire[s_l]
        out = []
        for wi in range(len(mesh.structure.wires)):
            on = wire == wi
            if not on.any():
                continue
            key = ml[on] * n + mr[on]
            used = np.flatnonzero(np.bincount(key, minlength=n * n))
            acc = np.bincount(key, weights=vals[on], minlength=n * n)[used]
            out.append((wi, used // n, used % n, acc))
        return out

    # ------------------------------------------------------------------ public
    @property
    def n_unknowns(self) -> int:
        return self.mesh.n_unknowns

    def _chunk(self) -> int:
        n = self.n_unknowns
        per = self._dyn.points_in_flight * _BYTES_PER_POINT + n * n * _BYTES_PER_ENTRY + 1
        return max(1, int(_CHUNK_BYTES // per))

    def _sources(self, k: NDArray[np.float64]) -> NDArray[np.complex128]:
        """Per-group integrals, static plus dynamic, at wavenumbers ``k``: (4K + K + C S + C^2, F).

        Rows ``[:4K]`` are the shape integrals (m) of the vector potential, the rest the charge
        integrals (groups, cap-segment, cap-cap) of the scalar potential; one complex column per
        frequency (viewed as real: the (re, im) column pairs the assembly matrix multiplies).
        """
        n_vec = self._n_vector_src
        n_pairs = self.pairs.size
        pairs, caps = self._dyn.columns(k)  # (F, K, 5), (F, C S + C^2)
        src = np.empty((self._amap.shape[1], len(k)), dtype=complex)
        src[:n_vec] = pairs[:, :, :4].reshape(len(k), n_vec).T
        src[n_vec: n_vec + n_pairs] = pairs[:, :, 4].T
        src[n_vec + n_pairs:] = caps.T
        src[:n_vec] += self._static_vector_src[:, None]
        src[n_vec:] += self._static_charge_src[:, None]
        return src

    def potentials(self, f_hz: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
        """Exact vector- and scalar-potential matrices ``V``, ``S``: each (F, N, N).

        ``Z_efie = j omega mu V + S / (j omega eps)``; ``V`` in m, ``S`` in 1/m.
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        n = self.n_unknowns
        n_vec = self._n_vector_src
        vec = np.empty((len(f), n, n), dtype=complex)
        sca = np.empty((len(f), n, n), dtype=complex)
        step = self._chunk()
        for i0 in range(0, len(f), step):
            sl = slice(i0, i0 + step)
            src = self._sources(2.0 * np.pi * f[sl] * np.sqrt(MU0 * EPS0))
            vec[sl] = self._vector(src[:n_vec].T).reshape(-1, n, n)
            sca[sl] = self._scalar(src[n_vec:].T).reshape(-1, n, n)
        return vec, sca

    def efie_direct(self, f_hz: NDArray[np.float64]) -> NDArray[np.complex128]:
        """EFIE matrix filled afresh at every frequency: shape (F, N, N) in ohm.

        ``Z = j omega mu V + S / (j omega eps)`` in one sparse product: the per-group integrals
        (static plus dynamic) are scaled by the two factors before the assembly.
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        n = self.n_unknowns
        n_vec = self._n_vector_src
        out = np.empty((len(f), n, n), dtype=complex)
        step = self._chunk()
        for i0 in range(0, len(f), step):
            sl = slice(i0, i0 + step)
            k = 2.0 * np.pi * f[sl] * np.sqrt(MU0 * EPS0)
            jwmu = 1j * 2.0 * np.pi * f[sl] * MU0
            jweps_inv = 1.0 / (1j * 2.0 * np.pi * f[sl] * EPS0)
            src = self._sources(k)
            src[:n_vec] *= jwmu[None, :]
            src[n_vec:] *= jweps_inv[None, :]
            z = self._amap @ src.view(float)  # (N*N, 2F): columns re, im of each frequency
            out[sl] = z.view(complex).T.reshape(-1, n, n)
        return out

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
            self._bdist = rownorm(pos[:, None, :] - pos[None, :, :])
        return self._bdist

    @property
    def basis_extent(self) -> float:
        """Largest distance in m from a basis node to any point of its support."""
        return float(np.max(self.mesh.seg_length))

    def wire_impedances(self, f_hz: NDArray[np.float64]) -> list[NDArray[np.complex128]]:
        """Internal impedance per unit length (ohm/m) of each lossy wire, in ``_grams`` order."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        key = f.tobytes()
        last = getattr(self, "_zs_last", None)
        if last is not None and last[0] == key:  # the band of the last call (fill, then power)
            return last[1]
        out = []
        for wi, *_ in self._grams:
            wire = self.mesh.structure.wires[wi]
            out.append(wire.section.internal_impedance(f, wire.conductivity_s_per_m))
        self._zs_last = (key, out)
        return out

    def add_loss(self, z: NDArray[np.complex128], f_hz: NDArray[np.float64]) -> None:
        """Add the conductor-loss matrix ``int Z'(f) f_m . f_n dl`` to ``z`` (F, N, N) in place."""
        n = self.n_unknowns
        flat_z = z.reshape(len(z), n * n)
        for (_, rows, cols, vals), zs in zip(self._grams, self.wire_impedances(f_hz),
                                             strict=True):
            if np.any(zs != 0):
                flat = rows * n + cols
                # frequency blocks keep the temporaries small (no fresh pages per call)
                for i0 in range(0, len(z), _LOSS_BLOCK):
                    sl = slice(i0, i0 + _LOSS_BLOCK)
                    flat_z[sl, flat] += zs[sl, None] * vals[None, :]

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
        n_f, n, n_k = currents.shape
        out = np.zeros(n_f * n_k)
        cur = currents.transpose(0, 2, 1).reshape(n_f * n_k, n)  # (F K, N): one row per current
        for (_, rows, cols, vals), zs in zip(self._grams, self.wire_impedances(f),
                                             strict=True):
            half_r = 0.5 * np.repeat(zs.real, n_k)
            # Re(conj(I_r) I_c) = Re I_r Re I_c + Im I_r Im I_c over the Gram entries, in blocks
            # of rows that keep each gathered array below ~256 kB
            step = max(1, int(256e3 // (16 * len(rows))))
            for i0 in range(0, len(cur), step):
                c = cur[i0: i0 + step]
                c_r, c_c = c.take(rows, axis=1), c.take(cols, axis=1)
                out[i0: i0 + step] += half_r[i0: i0 + step] * ((c_r.real * c_c.real
                                                                + c_r.imag * c_c.imag) @ vals)
        return out.reshape(n_f, n_k)

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
        from sweeps.mom.interp import interpolated_efie

        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        if len(f) >= 16:  # the interpolation adds the loss itself (in its matrix product)
            z = interpolated_efie(self, f, loss=True)
        else:
            z = self.efie_direct(f)
            self.add_loss(z, f)
        self.add_loads(z, f)
        return z

    def gram_dense(self) -> list[NDArray[np.float64]]:
        """The Gram matrices of the wires as dense (N, N) arrays, in ``_grams`` order."""
        n = self.n_unknowns
        out = []
        for _, rows, cols, vals in self._grams:
            g = np.zeros((n, n))
            g[rows, cols] = vals
            out.append(g)
        return out
