"""Fields of the solved currents: far field, radiated power, gain, plane waves and RCS.

Conventions: time dependence ``e^{j omega t}``; far field
``E = -j omega mu e^{-jkr}/(4 pi r) A_perp``
with the radiation vector ``A(r_hat) = int I(l) t(l) e^{jk r_hat . r(l)} dl``; radiation intensity
``U = eta k^2 |A_perp|^2 / (32 pi^2)`` for peak-amplitude phasors (Balanis, *Antenna Theory*,
3rd ed., sections 2.4 and 3.6, from memory). Incident plane waves ``E = E0 p e^{-jk k_hat . r}``
with ``|E0| = 1 V/m``.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from sweeps.geometry import Mesh
from sweeps.materials import ETA0
from sweeps.mom.quadrature import gauss01

__all__ = [
    "CurrentPoints",
    "MergedPoints",
    "directions",
    "sphere_grid",
    "radiation_vector",
    "radiation_intensity",
    "radiation_intensity_turned",
    "radiated_power",
    "plane_wave_rhs",
    "rcs",
]


class CurrentPoints:
    """Gauss points of every basis half with their current weights (frequency independent).

    For basis ``m``, ``weights[m]`` holds the vectors ``sign t L w_u lambda(u)`` (m) at points
    ``positions[m]``; the current element at a point is ``I_m`` times its weight.
    """

    def __init__(self, mesh: Mesh, order: int = 4) -> None:
        u, w = gauss01(order)
        seg = mesh.half_seg  # (N, 2)
        shape = mesh.half_shape
        lam = np.where(shape[..., None] == 1, u, 1.0 - u)  # (N, 2, Q)
        start = mesh.seg_start[seg]  # (N, 2, 3)
        delta = (mesh.seg_end - mesh.seg_start)[seg]  # (N, 2, 3)
        self.positions = start[:, :, None, :] + u[None, None, :, None] * delta[:, :, None, :]
        sign = mesh.half_sign.astype(float)  # 0 for an end-cap half: no axial current
        self.weights = (sign[..., None, None] * delta[:, :, None, :]
                        * (w * lam)[..., None])  # (N, 2, Q, 3)
        n = mesh.n_unknowns
        self.positions = self.positions.reshape(n, -1, 3)
        self.weights = self.weights.reshape(n, -1, 3)

    def elements(self, currents: NDArray[np.complex128]) -> tuple[NDArray, NDArray]:
        """Current elements for currents of shape (N,) or (N, K): positions (P, 3), (P, K, 3)."""
        cur = currents if currents.ndim == 2 else currents[:, None]
        elem = self.weights[:, :, None, :] * cur[:, None, :, None]  # (N, q, K, 3)
        return self.positions.reshape(-1, 3), elem.reshape(-1, cur.shape[1], 3)

    def merged(self) -> MergedPoints:
        """The same current elements with coincident points added up (:class:`MergedPoints`)."""
        return MergedPoints(self)

    @classmethod
    def midpoints(cls, mesh: Mesh) -> MergedPoints:
        """The one-point (midpoint) rule merged per segment: one current element per segment.

        Both basis halves on a segment sit at its midpoint with weight ``sign t L / 2``; this
        equals ``CurrentPoints(mesh, 1).merged()`` without searching for coincident points.
        """
        n = mesh.n_unknowns
        s = mesh.n_segments
        delta = mesh.seg_end - mesh.seg_start
        # w[segment, basis]: the halves' signs / 2 (an end-cap half adds 0 to its segment)
        m = np.repeat(np.arange(n), 2)
        w = np.bincount(mesh.half_seg.ravel() * n + m, weights=0.5 * mesh.half_sign.ravel(),
                        minlength=s * n).reshape(s, n)
        out = MergedPoints.__new__(MergedPoints)
        out.positions = 0.5 * (mesh.seg_start + mesh.seg_end)
        out._weights = (delta[:, :, None] * w[:, None, :]).reshape(s * 3, n)
        z = out.positions[:, 2]
        out.planar_z = bool(np.all(z == z[0]) and not np.any(delta[:, 2]))
        return out


class MergedPoints:
    """Current elements of :class:`CurrentPoints` summed over coincident points.

    With the midpoint rule the two basis halves on a segment share its midpoint, so the far
    field needs one phase factor per segment instead of one per half. Same interface as
    :class:`CurrentPoints` (:meth:`elements`).
    """

    def __init__(self, points: CurrentPoints) -> None:
        pos = points.positions.reshape(-1, 3)
        n, q = points.weights.shape[:2]
        self.positions, inverse = np.unique(pos, axis=0, return_inverse=True)
        u = len(self.positions)
        # weights[u, c, m]: sum of the weights of basis m at point u
        w = np.zeros((u, 3, n))
        basis = np.repeat(np.arange(n), q)
        np.add.at(w, (inverse.reshape(-1), slice(None), basis), points.weights.reshape(-1, 3))
        self._weights = w.reshape(u * 3, n)
        z = self.positions[:, 2]
        #: all points in one plane z = const with no z-directed current: the pattern is the same
        #: at theta and pi - theta (mirror symmetry through that plane)
        self.planar_z = bool(np.all(z == z[0]) and not np.any(w[:, 2, :]))

    def elements(self, currents: NDArray[np.complex128]) -> tuple[NDArray, NDArray]:
        """Current elements for currents of shape (N,) or (N, K): positions (U, 3), (U, K, 3)."""
        cur = currents if currents.ndim == 2 else currents[:, None]
        elem = (self._weights @ cur).reshape(len(self.positions), 3, cur.shape[1])
        return self.positions, elem.transpose(0, 2, 1)


def directions(theta: NDArray[np.float64], phi: NDArray[np.float64]) -> NDArray[np.float64]:
    """Unit vectors for spherical angles (rad), shape ``theta.shape + (3,)``."""
    st = np.sin(theta)
    return np.stack([st * np.cos(phi), st * np.sin(phi), np.cos(theta)], axis=-1)


def theta_phi_units(
    theta: NDArray[np.float64], phi: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Unit vectors theta_hat and phi_hat at the given angles."""
    ct, st = np.cos(theta), np.sin(theta)
    cp, sp = np.cos(phi), np.sin(phi)
    th = np.stack([ct * cp, ct * sp, -st], axis=-1)
    ph = np.stack([-sp, cp, np.zeros_like(phi)], axis=-1)
    return th, ph


def sphere_grid(
    n_theta: int = 48, n_phi: int = 96
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Quadrature on the unit sphere: Gauss-Legendre in cos(theta), uniform in phi.

    Returns theta, phi (flattened) and the solid-angle weights (sum = 4 pi).
    """
    x, wx = np.polynomial.legendre.leggauss(n_theta)
    theta = np.arccos(x)
    phi = np.arange(n_phi) * (2.0 * np.pi / n_phi)
    tt, pp = np.meshgrid(theta, phi, indexing="ij")
    ww = np.repeat(wx[:, None], n_phi, axis=1) * (2.0 * np.pi / n_phi)
    return tt.ravel(), pp.ravel(), ww.ravel()


def radiation_vector(
    points: CurrentPoints | MergedPoints,
    currents: NDArray[np.complex128],
    k: float,
    r_hat: NDArray[np.float64],
) -> NDArray[np.complex128]:
    """``A(r_hat) = sum I t dl e^{jk r_hat . r}``: shape (D, K, 3) (A m) for directions (D, 3)."""
    pos, elem = points.elements(np.asarray(currents))
    return _sum_phased(_phases(k, r_hat, pos), elem)


def _phases(k: float, r_hat: NDArray[np.float64], pos: NDArray[np.float64]
            ) -> NDArray[np.complex128]:
    """``e^{jk r_hat . r}`` (D, P) from real cosines and sines."""
    arg = k * (r_hat @ pos.T)
    phase = np.empty(arg.shape, dtype=complex)
    phase.real = np.cos(arg)
    phase.imag = np.sin(arg)
    return phase


def _sum_phased(phase: NDArray[np.complex128], elem: NDArray[np.complex128]
                ) -> NDArray[np.complex128]:
    """``sum_P phase I t dl``: (D, K, 3) from the phases (D, P) and the elements (P, K, 3)."""
    return (phase @ elem.reshape(len(elem), -1)).reshape(len(phase), elem.shape[1], 3)


def _intensity(a: NDArray[np.complex128], r_hat: NDArray[np.float64], k: float
               ) -> NDArray[np.float64]:
    """Radiation intensity (W/sr), (D, K), from the radiation vector ``a`` toward ``r_hat``."""
    return ETA0 * k**2 / (32.0 * np.pi**2) * np.add.reduce(np.abs(_perp(a, r_hat)) ** 2,
                                                           axis=-1)


def _perp(a: NDArray[np.complex128], r_hat: NDArray[np.float64]) -> NDArray[np.complex128]:
    return a - np.add.reduce(a * r_hat[:, None, :], axis=-1, keepdims=True) * r_hat[:, None, :]


def radiation_intensity(
    points: CurrentPoints | MergedPoints,
    currents: NDArray[np.complex128],
    k: float,
    r_hat: NDArray[np.float64],
) -> NDArray[np.float64]:
    """Radiation intensity ``U`` in W/sr for peak currents: shape (D, K)."""
    return _intensity(radiation_vector(points, currents, k, r_hat), r_hat, k)


def radiation_intensity_turned(
    points: CurrentPoints | MergedPoints,
    currents: NDArray[np.complex128],
    k: float,
    r_hat: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Radiation intensity (W/sr) at ``r_hat`` (D, 3) and at the directions turned by pi about z.

    For current elements in one plane ``z = z0`` (``planar_z``) the phase toward the turned
    direction ``(-x, -y, z)`` is ``e^{2jk z0 r_z}`` times the conjugate of the phase toward
    ``r_hat``; the common factor drops out of ``U``, so both halves share one set of cosines
    and sines. Returns ``U`` (D, K) at ``r_hat`` and at the turned directions.
    """
    pos, elem = points.elements(np.asarray(currents))
    phase = _phases(k, r_hat, pos)
    u = _intensity(_sum_phased(phase, elem), r_hat, k)
    np.conjugate(phase, out=phase)
    turned = r_hat * np.array([-1.0, -1.0, 1.0])
    return u, _intensity(_sum_phased(phase, elem), turned, k)


def radiated_power(
    points: CurrentPoints,
    currents: NDArray[np.complex128],
    k: float,
    n_theta: int = 48,
    n_phi: int = 96,
) -> NDArray[np.float64]:
    """Radiated power in W by integrating ``U`` over the sphere: shape (K,)."""
    theta, phi, w = sphere_grid(n_theta, n_phi)
    u = radiation_intensity(points, currents, k, directions(theta, phi))
    return w @ u


def plane_wave_rhs(
    points: CurrentPoints,
    k: float,
    k_hat: NDArray[np.float64],
    pol: NDArray[np.float64],
) -> NDArray[np.complex128]:
    """Tested incident field ``V_m = int f_m . E_inc dl`` for ``E_inc = pol e^{-jk k_hat . r}``.

    Parameters
    ----------
    points : CurrentPoints
    k : float
        Wavenumber in 1/m.
    k_hat : ndarray, shape (3,)
        Propagation direction (unit).
    pol : ndarray, shape (3,)
        Polarisation (unit, complex allowed for circular), orthogonal to ``k_hat``.

    Returns
    -------
    ndarray, shape (N,)
        In volts (per 1 V/m of incident field).
    """
    phase = np.exp(-1j * k * (points.positions @ k_hat))  # (N, q)
    return np.einsum("nqc,c,nq->n", points.weights, pol, phase)


def rcs(
    points: CurrentPoints,
    currents: NDArray[np.complex128],
    k: float,
    r_hat: NDArray[np.float64],
    pol: NDArray[np.float64] | None = None,
) -> NDArray[np.float64]:
    """Radar cross-section ``4 pi r^2 |E_s|^2 / |E_i|^2`` in m^2 for unit incident fields.

    Parameters
    ----------
    currents : ndarray, shape (N,) or (N, K)
        Currents induced by a 1 V/m plane wave.
    r_hat : ndarray, shape (D, 3)
        Scattering directions (``-k_hat`` for monostatic).
    pol : ndarray, shape (3,), optional
        Receiving polarisation; by default the total scattered power (both polarisations).

    Returns
    -------
    ndarray, shape (D, K)
    """
    a = _perp(radiation_vector(points, currents, k, r_hat), r_hat)
    if pol is None:
        mag2 = np.sum(np.abs(a) ** 2, axis=-1)
    else:
        mag2 = np.abs(np.einsum("dkc,c->dk", a, np.conj(pol))) ** 2
    return (ETA0 * k) ** 2 / (4.0 * np.pi) * mag2
