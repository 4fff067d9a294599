"""Frequency interpolation of the EFIE matrix with phase extraction.

Filling the matrix afresh at each of a hundred frequencies costs far more than solving it. As in
E. H. Newman, "Generation of wide-band data from the method of moments by interpolating the
impedance matrix", IEEE Trans. AP 36(12), 1820-1824, 1988, the rapidly varying phase of each
entry is removed first: with ``d_mn`` the distance between the nodes of bases ``m`` and ``n``,

    ``W_mn(k) = k Z_mn(k) e^{jk d_mn}``
    ``        = (j c mu k^2 V_mn(k) - j S_mn(k) / (c eps)) e^{jk d_mn}``

varies slowly with the wavenumber ``k`` (what is left of the phase is at most ``k (R - d_mn)``
with ``|R - d_mn|`` below two segment lengths; the factor ``k`` removes the ``1/k`` of the scalar
potential's ``1/(j omega eps)``, so ``W`` is as smooth as the potentials themselves). It is
filled exactly at a few Chebyshev nodes of the band and interpolated by barycentric Lagrange
interpolation.

Error control. The degree is chosen from the phase bound (:func:`_nodes_needed`), and the
interpolant is checked against a direct fill at the lowest frequency of the band, where the
Chebyshev interpolation error is largest (the error of the interpolant vanishes at the nodes and
peaks at the ends of the interval). The check accepts a relative Frobenius error
``||Z_interp - Z_direct|| / ||Z_direct||`` of at most :data:`INTERP_TOL` = 1e-6; when it fails
the degree is raised, then the band is split, and below a few points per piece the fill is
direct. Measured on the shapes of :mod:`sweeps.shapes` over 800-1000 MHz the check error is
about 1e-10 with four nodes, and input impedances agree with direct fills within 1e-8
(``tests/sweeps/test_interp.py``); issue 8 asks for 0.5 %, the tests hold 1e-5.

Cost. With ``n`` nodes, one frequency costs ``2n`` real multiply-adds per matrix entry (the
interpolation ``Z(k) = e^{-jkd} sum_j (L_j(k) / k) W(k_j)`` has real coefficients, so it is one
real matrix product on the (re, im) pairs of the node data) and two complex multiplications (the
phase, by a recurrence over uniformly spaced frequencies applied in blocks).
"""

from __future__ import annotations

import logging
import math
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from sweeps.materials import EPS0, MU0

if TYPE_CHECKING:  # pragma: no cover
    from sweeps.mom.fill import MatrixFill

__all__ = ["interpolated_efie", "chebyshev_nodes", "barycentric_weights", "INTERP_TOL"]

log = logging.getLogger(__name__)

#: Largest accepted relative error ``||Z_interp - Z_direct||_F / ||Z_direct||_F`` at the check
#: frequency.
INTERP_TOL = 1e-6
MAX_NODES = 12
C_INV = math.sqrt(MU0 * EPS0)

#: Frequencies per block of the phase recurrence, and the recurrence length after which the
#: phase is recomputed exactly (the recurrence loses about one rounding error per step).
_PHASE_BLOCK = 8
_PHASE_REFRESH = 128


def chebyshev_nodes(lo: float, hi: float, n: int) -> NDArray[np.float64]:
    """Chebyshev points of the first kind on [lo, hi] (increasing)."""
    j = np.arange(n)
    x = -np.cos((2 * j + 1) * np.pi / (2 * n))
    return 0.5 * (lo + hi) + 0.5 * (hi - lo) * x


@lru_cache(maxsize=16)
def _chebyshev_weights(n: int) -> NDArray[np.float64]:
    """Barycentric weights ``(-1)^j sin((2j+1) pi / 2n)`` of ``n`` Chebyshev points (first kind)."""
    j = np.arange(n)
    w = (-1.0) ** j * np.sin((2 * j + 1) * np.pi / (2 * n))
    w.setflags(write=False)
    return w


def barycentric_weights(
    nodes: NDArray[np.float64], x: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Lagrange basis values ``L_j(x)`` for Chebyshev nodes of the first kind, shape (len(x), n).

    Barycentric form with the closed-form weights ``(-1)^j sin((2j+1) pi / 2n)`` (J.-P. Berrut &
    L. N. Trefethen, "Barycentric Lagrange interpolation", SIAM Review 46(3), 2004, eq. 5.3).
    """
    w = _chebyshev_weights(len(nodes))
    # nodes are increasing here, Berrut-Trefethen list them decreasing: the sign pattern is the
    # same up to a common factor, which cancels.
    diff = x[:, None] - nodes[None, :]
    exact = diff == 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        t = w[None, :] / diff
        out = t / t.sum(axis=1, keepdims=True)
    rows = exact.any(axis=1)
    out[rows] = exact[rows].astype(float)
    return out


def _expi(x: NDArray[np.float64]) -> NDArray[np.complex128]:
    """``e^{jx}`` for real ``x`` from two real sines and cosines (cheaper than complex exp)."""
    out = np.empty(x.shape, dtype=complex)
    out.real = np.cos(x)
    out.imag = np.sin(x)
    return out


class _Phase:
    """``e^{-jk d}`` over the basis distances ``d`` (N, N), evaluated on their distinct values."""

    def __init__(self, d: NDArray[np.float64]) -> None:
        self.values, inverse = np.unique(d, return_inverse=True)
        self.inverse = inverse.reshape(-1)
        self.size = d.size

    def __call__(self, k: float | NDArray[np.float64]) -> NDArray[np.complex128]:
        """``e^{-jk d}`` flattened: (N*N,) for a scalar ``k``, (F, N*N) for an array."""
        kk = np.asarray(k, dtype=float)
        return np.take(_expi(-kk[..., None] * self.values), self.inverse, axis=-1)


def _phase(fill: MatrixFill) -> _Phase:
    if getattr(fill, "_phase_cache", None) is None:
        fill._phase_cache = _Phase(fill.basis_distance)
    return fill._phase_cache


def _uniform_runs(k: NDArray[np.float64]) -> list[tuple[int, int]]:
    """Maximal runs ``[i, j)`` of equally spaced values (a band sweep is one run)."""
    f = len(k)
    runs = []
    i = 0
    while i < f:
        j = i + 1
        if i + 2 < f:
            dk = k[i + 1] - k[i]
            step = np.diff(k[i:])
            same = np.abs(step - dk) <= 1e-9 * abs(dk)
            j = i + 1 + (int(np.argmin(same)) if not same.all() else len(same))
        runs.append((i, j))
        i = j
    return runs


def _apply_phase(h: NDArray[np.complex128], k: NDArray[np.float64], phase: _Phase) -> None:
    """Multiply ``h[i]`` (flattened, (F, N*N)) by ``e^{-j k_i d}`` in place.

    Over a run of uniformly spaced wavenumbers ``e^{-j k_(i+b) d} = e^{-j k_i d} (e^{-j dk d})^b``:
    the powers ``b = 0 ... B-1`` are formed once and each block of ``B`` frequencies costs two
    complex multiplications per entry; the block start is advanced by ``(e^{-j dk d})^B`` and
    recomputed exactly every :data:`_PHASE_REFRESH` frequencies.
    """
    for i, j in _uniform_runs(k):
        if j - i < 2 * _PHASE_BLOCK:
            h[i:j] *= phase(k[i:j])
            continue
        step = phase(k[i + 1] - k[i])
        powers = np.empty((_PHASE_BLOCK, phase.size), dtype=complex)
        powers[0] = 1.0
        for b in range(1, _PHASE_BLOCK):
            np.multiply(powers[b - 1], step, out=powers[b])
        advance = powers[-1] * step
        start = phase(k[i])
        for m in range(i, j, _PHASE_BLOCK):
            if (m - i) % _PHASE_REFRESH == 0 and m > i:
                start = phase(k[m])
            block = h[m: min(m + _PHASE_BLOCK, j)]
            block *= powers[: len(block)]
            block *= start
            start *= advance


def _nodes_needed(span_k: float, rho: float, target: float = 1e-8) -> int:
    """Nodes for Chebyshev interpolation of ``e^{-jk rho}`` over ``span_k`` to about ``target``."""
    theta = 0.25 * span_k * rho  # half-width times rho, halved (Bernstein ellipse estimate)
    for n in range(3, MAX_NODES + 1):
        if 2.0 * theta**n / math.factorial(n) < target:
            return n
    return MAX_NODES + 1


#: Cost of the phase recurrence per frequency and matrix entry, in units of one interpolation
#: node in the real matrix product (measured: two complex multiplications in numpy cost about as
#: much as 17 nodes of the product), and of one exact node fill per frequency of the band.
_PHASE_COST_NODES = 17.0
_FILL_COST_NODES = 2.6


def _plan(fill: MatrixFill, span_k: float, n_freq: int) -> tuple[int, bool]:
    """Nodes and whether to extract the phase, whichever is expected to be cheaper.

    With the phase ``e^{-jk d_mn}`` removed, the smooth remainder needs nodes for a phase error
    of two segment lengths; without it, for the largest distance in the structure (plus two
    segment lengths). Small structures over moderate bands need only a few more nodes without
    the phase, which is cheaper than the recurrence at every frequency.
    """
    extent = 2.0 * fill.basis_extent
    n_phase = _nodes_needed(span_k, extent)
    # the whole phase is a pessimistic model of the matrix entries (most of them are far
    # smaller than the largest): 1e-7 for it keeps the check error near 1e-11 (measured)
    pos = fill.mesh.nodes[fill.mesh.basis_node]
    span = pos.max(axis=0) - pos.min(axis=0)  # np.ptp
    size = float(np.sqrt(np.sum(span**2)))  # >= every basis distance
    n_plain = _nodes_needed(span_k, size + extent, 1e-7)
    per = _FILL_COST_NODES / max(n_freq, 1)
    cost_phase = n_phase * (1.0 + per) + _PHASE_COST_NODES
    cost_plain = n_plain * (1.0 + per)
    if n_plain <= MAX_NODES and cost_plain < cost_phase:
        return n_plain, False
    return n_phase, True


class _Interpolant:
    """Node data of one band piece (phase extracted or not), ready to be evaluated at any ``k``."""

    def __init__(self, fill: MatrixFill, nodes: NDArray[np.float64], z: NDArray,
                 phase: bool, loss: bool = False) -> None:
        self.fill = fill
        self.nodes = nodes
        self.phase = _phase(fill) if phase else None
        n = len(nodes)
        # without the phase the conductor loss sum_w Z'_w(k) G_w rides along in the product:
        # two rows per lossy wire, G_w and j G_w, with coefficients Re and Im of Z'_w(k)
        grams = fill.gram_dense() if loss and not phase else []
        # W(k_j) = k_j Z(k_j) [e^{+jk_j d}], as real (re, im) pairs: the interpolation is then
        # one real matrix product for all frequencies
        stack = np.empty((n + 2 * len(grams), z[0].size), dtype=complex)
        if self.phase is not None:
            np.multiply(np.conj(self.phase(nodes)), z.reshape(n, -1), out=stack[:n])
        else:
            stack[:n] = z.reshape(n, -1)
        stack[:n] *= nodes[:, None]
        for w, g in enumerate(grams):
            stack[n + 2 * w] = g.ravel()
            stack[n + 2 * w + 1] = 1j * g.ravel()
        self.loss_rows = bool(grams)
        self.loss_after = loss and not self.loss_rows
        self.stack = stack.view(float)  # (rows, 2 N*N)

    def __call__(self, k: NDArray[np.float64],
                 f_hz: NDArray[np.float64] | None = None) -> NDArray[np.complex128]:
        """Interpolated EFIE (plus loss, if asked) matrices at wavenumbers ``k``: (F, N, N).

        ``f_hz`` are the same frequencies in Hz if known (for the conductor loss).
        """
        f = k / (2.0 * np.pi * C_INV) if f_hz is None else f_hz
        n_nodes = len(self.nodes)
        if self.loss_rows:
            zs = self.fill.wire_impedances(f)
            coef = np.empty((len(k), n_nodes + 2 * len(zs)))
            for w, z in enumerate(zs):  # Re and Im of Z'_w(k): the rows G_w and j G_w
                coef[:, n_nodes + 2 * w] = z.real
                coef[:, n_nodes + 2 * w + 1] = z.imag
        else:
            coef = np.empty((len(k), n_nodes))
        np.divide(barycentric_weights(self.nodes, k), k[:, None], out=coef[:, :n_nodes])
        n = self.fill.n_unknowns
        out = np.empty((len(k), n, n), dtype=complex)
        np.matmul(coef, self.stack, out=out.reshape(len(k), -1).view(float))
        if self.phase is not None:
            _apply_phase(out.reshape(len(k), -1), k, self.phase)
        if self.loss_after:
            self.fill.add_loss(out, f)
        return out


def _piece(fill: MatrixFill, f: NDArray[np.float64], depth: int = 0,
           loss: bool = False) -> NDArray[np.complex128]:
    """Interpolated EFIE (plus loss) matrices at ``f`` (any order), checked, with fallbacks."""
    k = 2.0 * np.pi * f * C_INV
    i_lo = int(np.argmin(k))
    lo, hi = float(k[i_lo]), float(np.max(k))
    n_nodes, phase = _plan(fill, hi - lo, len(f))
    while n_nodes <= MAX_NODES:
        if len(f) < 2 * n_nodes + 2:
            return _direct(fill, f, loss)
        nodes = chebyshev_nodes(lo, hi, n_nodes)
        # one batched exact fill: the nodes and the check frequency at the low band edge
        z_nodes = fill.efie_direct(np.append(nodes, lo) / (2.0 * np.pi * C_INV))
        interp = _Interpolant(fill, nodes, z_nodes[:-1], phase, loss)
        z_chk = z_nodes[-1]
        if loss:
            fill.add_loss(z_nodes[-1:], np.array([lo / (2.0 * np.pi * C_INV)]))
        # interpolate the whole band; the check compares at the low edge, where the error of
        # Chebyshev interpolation is largest, and that frequency then gets the exact matrix
        out = interp(k, f)
        err = float(np.linalg.norm(out[i_lo] - z_chk) / np.linalg.norm(z_chk))
        if err <= INTERP_TOL:
            out[k == lo] = z_chk
            log.debug("interpolated %d frequencies from %d nodes, phase %s (check error %.2g)",
                      len(f), n_nodes, "extracted" if phase else "kept", err)
            return out
        log.debug("interpolation check failed with %d nodes (error %.2g)", n_nodes, err)
        if not phase:  # the cheaper plan failed: fall back to the phase-extracted one
            n_nodes, phase = _nodes_needed(hi - lo, 2.0 * fill.basis_extent), True
        else:
            n_nodes += 2
    if depth >= 4 or len(f) < 8:
        return _direct(fill, f, loss)
    order = np.argsort(f, kind="stable")
    mid = len(f) // 2
    out = np.empty((len(f), fill.n_unknowns, fill.n_unknowns), dtype=complex)
    out[order[:mid]] = _piece(fill, f[order[:mid]], depth + 1, loss)
    out[order[mid:]] = _piece(fill, f[order[mid:]], depth + 1, loss)
    return out


def _direct(fill: MatrixFill, f: NDArray[np.float64], loss: bool) -> NDArray[np.complex128]:
    z = fill.efie_direct(f)
    if loss:
        fill.add_loss(z, f)
    return z


def interpolated_efie(fill: MatrixFill, f_hz: NDArray[np.float64], *,
                      loss: bool = False) -> NDArray[np.complex128]:
    """EFIE matrices at frequencies ``f_hz`` by checked interpolation, (F, N, N).

    Frequencies need not be sorted or uniform (a band plus its target frequency is typical);
    uniformly spaced runs are cheapest (phase recurrence). With ``loss`` the conductor-loss
    matrix (:meth:`MatrixFill.add_loss`) is included, exactly (it is not interpolated).
    """
    return _piece(fill, np.atleast_1d(np.asarray(f_hz, dtype=float)), loss=loss)
