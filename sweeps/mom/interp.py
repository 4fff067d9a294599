"""Frequency interpolation of the EFIE matrix with phase extraction.

Filling the matrix afresh at each of a hundred frequencies costs far more than solving it. As in
E. H. Newman, "Generation of wide-band data from the method of moments by interpolating the
impedance matrix", IEEE Trans. AP 36(12), 1820-1824, 1988, the rapidly varying phase of each
entry is removed first: with ``d_mn`` the distance between the nodes of bases ``m`` and ``n``,

    ``H_V(k) = V_mn(k) e^{jk d_mn}``,   ``H_S(k) = S_mn(k) e^{jk d_mn}``

vary slowly with the wavenumber ``k`` (what is left of the phase is at most ``k (R - d_mn)``
with ``|R - d_mn|`` below two segment lengths). They are filled exactly at a few Chebyshev nodes
of the band and interpolated by barycentric Lagrange interpolation; the factors ``j omega mu`` and
``1/(j omega eps)`` are applied exactly. The degree is chosen from the phase bound, and the
result is checked against direct fills at two check frequencies; when the check fails the
degree is raised, then the band is split, and below a few points per piece the fill is direct.
"""

from __future__ import annotations

import logging
import math
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from sweeps.materials import EPS0, MU0

if TYPE_CHECKING:  # pragma: no cover
    from sweeps.mom.fill import MatrixFill

__all__ = ["interpolated_efie", "chebyshev_nodes", "barycentric_weights", "INTERP_TOL"]

log = logging.getLogger(__name__)

#: Largest accepted relative error ``||Z_interp - Z_direct||_F / ||Z_direct||_F`` at the check
#: frequencies.
INTERP_TOL = 1e-6
MAX_NODES = 12
C_INV = math.sqrt(MU0 * EPS0)


def chebyshev_nodes(lo: float, hi: float, n: int) -> NDArray[np.float64]:
    """Chebyshev points of the first kind on [lo, hi] (increasing)."""
    j = np.arange(n)
    x = -np.cos((2 * j + 1) * np.pi / (2 * n))
    return 0.5 * (lo + hi) + 0.5 * (hi - lo) * x


def barycentric_weights(
    nodes: NDArray[np.float64], x: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Lagrange basis values ``L_j(x)`` for Chebyshev nodes of the first kind, shape (len(x), n).

    Barycentric form with the closed-form weights ``(-1)^j sin((2j+1) pi / 2n)`` (J.-P. Berrut &
    L. N. Trefethen, "Barycentric Lagrange interpolation", SIAM Review 46(3), 2004, eq. 5.3).
    """
    n = len(nodes)
    j = np.arange(n)
    w = (-1.0) ** j * np.sin((2 * j + 1) * np.pi / (2 * n))
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


def _phase(k: NDArray[np.float64], d: NDArray[np.float64]) -> NDArray[np.complex128]:
    """``e^{-j k d}`` for all k: (F, N, N).

    Runs of uniformly spaced wavenumbers (a band sweep) use the recurrence
    ``e^{-j k_(i+1) d} = e^{-j k_i d} e^{-j dk d}``: one complex multiply per entry instead of an
    exponential, refreshed exactly every 32 steps so that round-off cannot accumulate.
    """
    f = len(k)
    out = np.empty((f, *d.shape), dtype=complex)
    i = 0
    while i < f:
        j = i + 1
        if i + 2 < f:
            dk = k[i + 1] - k[i]
            while j < f and abs((k[j] - k[j - 1]) - dk) <= 1e-9 * abs(dk):
                j += 1
        if j - i < 4:
            out[i:j] = np.exp(-1j * k[i:j, None, None] * d[None])
        else:
            step = np.exp(-1j * (k[i + 1] - k[i]) * d)
            for m in range(i, j):
                if (m - i) % 32 == 0:
                    out[m] = np.exp(-1j * k[m] * d)
                else:
                    np.multiply(out[m - 1], step, out=out[m])
        i = j
    return out


def _nodes_needed(span_k: float, rho: float) -> int:
    """Nodes for Chebyshev interpolation of ``e^{-jk rho}`` over ``span_k`` to about 1e-8."""
    theta = 0.25 * span_k * rho  # half-width times rho, halved (Bernstein ellipse estimate)
    for n in range(3, MAX_NODES + 1):
        if 2.0 * theta**n / math.factorial(n) < 1e-8:
            return n
    return MAX_NODES + 1


def _evaluate(
    fill: MatrixFill,
    k: NDArray[np.float64],
    nodes: NDArray[np.float64],
    stack: NDArray[np.complex128],
) -> NDArray[np.complex128]:
    """Interpolated ``Z(k)`` from the phase-extracted node data ``stack`` (2n, N*N)."""
    lag = barycentric_weights(nodes, k)  # (F, n)
    omega = k / C_INV
    coef = np.concatenate([lag * (1j * omega * MU0)[:, None],
                           lag / (1j * omega * EPS0)[:, None]], axis=1)  # (F, 2n)
    n = fill.n_unknowns
    h = (coef @ stack).reshape(len(k), n, n)
    _apply_phase(h, k, fill.basis_distance)
    return h


def _apply_phase(h: NDArray[np.complex128], k: NDArray[np.float64],
                 d: NDArray[np.float64]) -> None:
    """Multiply ``h[i]`` by ``e^{-j k_i d}`` in place (recurrence over uniform runs)."""
    f = len(k)
    i = 0
    while i < f:
        j = i + 1
        if i + 2 < f:
            dk = k[i + 1] - k[i]
            while j < f and abs((k[j] - k[j - 1]) - dk) <= 1e-9 * abs(dk):
                j += 1
        if j - i < 4:
            h[i:j] *= np.exp(-1j * k[i:j, None, None] * d[None])
        else:
            step = np.exp(-1j * (k[i + 1] - k[i]) * d)
            ph = np.empty_like(step)
            for m in range(i, j):
                if (m - i) % 32 == 0:
                    ph = np.exp(-1j * k[m] * d)
                else:
                    ph *= step
                h[m] *= ph
        i = j


def _piece(fill: MatrixFill, f: NDArray[np.float64], depth: int = 0) -> NDArray[np.complex128]:
    k = 2.0 * np.pi * f * C_INV
    lo, hi = float(k[0]), float(k[-1])
    n_nodes = _nodes_needed(hi - lo, 2.0 * fill.basis_extent)
    n = fill.n_unknowns
    while n_nodes <= MAX_NODES:
        if len(f) < 2 * n_nodes + 2:
            return fill.efie_direct(f)
        nodes = chebyshev_nodes(lo, hi, n_nodes)
        # one batched exact fill: the nodes and one check frequency at the band edge, where the
        # Chebyshev interpolation error is largest
        vec, sca = fill.potentials(np.append(nodes, k[0]) / (2.0 * np.pi * C_INV))
        ph = np.exp(1j * nodes[:, None, None] * fill.basis_distance[None])
        stack = np.concatenate([vec[:-1] * ph, sca[:-1] * ph], axis=0).reshape(2 * n_nodes, -1)
        omega0 = k[0] / C_INV
        z_chk = 1j * omega0 * MU0 * vec[-1] + sca[-1] / (1j * omega0 * EPS0)
        z_int = _evaluate(fill, k[:1], nodes, stack)[0]
        err = float(np.linalg.norm(z_int - z_chk) / np.linalg.norm(z_chk))
        if err <= INTERP_TOL:
            out = _evaluate(fill, k, nodes, stack)
            out[0] = z_chk
            log.debug("interpolated %d frequencies from %d nodes (check error %.2g)",
                      len(f), n_nodes, err)
            return out
        log.debug("interpolation check failed with %d nodes (error %.2g)", n_nodes, err)
        n_nodes += 2
    del n
    if depth >= 4 or len(f) < 8:
        return fill.efie_direct(f)
    mid = len(f) // 2
    return np.concatenate([_piece(fill, f[:mid], depth + 1), _piece(fill, f[mid:], depth + 1)])


def interpolated_efie(fill: MatrixFill, f_hz: NDArray[np.float64]) -> NDArray[np.complex128]:
    """EFIE matrices at frequencies ``f_hz`` by checked interpolation, (F, N, N).

    Frequencies need not be sorted or uniform (a band plus its target frequency is typical);
    uniformly spaced runs are cheapest (phase recurrence).
    """
    f = np.asarray(f_hz, dtype=float)
    if np.all(np.diff(f) > 0):
        return _piece(fill, f)
    order = np.argsort(f, kind="stable")
    out = np.empty((len(f), fill.n_unknowns, fill.n_unknowns), dtype=complex)
    out[order] = _piece(fill, f[order])
    return out
