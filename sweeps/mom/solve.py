"""Solve the Galerkin system: N-port Z, Y and S, currents, power balance, plane waves.

For a 1 V source at port ``p`` (all other ports short-circuited) the currents are
``I_p = Z^-1 e_p``, where ``e_p`` is the port's excitation vector. The port currents are
``e_q^T I_p``, so the short-circuit admittance matrix is ``Y = E^T Z^-1 E`` and the port
impedance matrix ``Z_port = Y^-1``. Because the Galerkin matrix is symmetric and the excitation
and measurement use the same vectors, ``Y`` is symmetric (reciprocity). One LU factorisation per
frequency serves every port and any additional right-hand sides (plane waves).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from functools import cached_property
from typing import Literal, get_args

import numpy as np
from numpy.typing import NDArray

from sweeps.errors import SolverError
from sweeps.geometry import Mesh, MeshRules, Structure
from sweeps.materials import C0
from sweeps.mom.fields import CurrentPoints, MergedPoints, plane_wave_rhs, radiated_power
from sweeps.mom.fill import MatrixFill
from sweeps.mom.kernel import KernelRules

__all__ = ["Kernel", "SolverSettings", "Solver", "PortSolution", "SOLVER_VERSION"]

Kernel = Literal["exact", "reduced"]

#: Bumped whenever a change can alter any stored result; part of every study point id.
#: 2: the near-field switch decided per group of identical segment pairs (input impedances move
#: by up to a few 1e-6) and the interpolation of ``k Z`` (closer to direct fills).
SOLVER_VERSION = "2"


@dataclass(frozen=True)
class SolverSettings:
    """Numerical settings of the solver (everything that can change a result).

    Parameters
    ----------
    kernel : {"exact", "reduced"}
        Thin-wire kernel (:mod:`sweeps.mom.kernel`).
    segments_per_wavelength : float
        Default segment density at the top of the band.
    end_caps : bool
        Model the end faces of free wire ends (:class:`sweeps.geometry.MeshRules`).
    static_far, dynamic, near_outer, near_phi : int
        Quadrature orders (:class:`sweeps.mom.kernel.KernelRules`).
    field_order : int
        Gauss points per segment half for far fields and plane-wave excitation.
    """

    kernel: Kernel = "exact"
    segments_per_wavelength: float = 40.0
    end_caps: bool = True
    static_far: int = 4
    dynamic: int = 2
    near_outer: int = 10
    near_phi: int = 10
    field_order: int = 4

    def __post_init__(self) -> None:
        if self.kernel not in get_args(Kernel):
            raise SolverError(f"kernel must be one of {get_args(Kernel)} (got {self.kernel!r})")
        if not self.segments_per_wavelength > 0:
            raise SolverError("segments_per_wavelength must be > 0")

    def kernel_rules(self) -> KernelRules:
        return KernelRules(
            static_far=self.static_far,
            dynamic=self.dynamic,
            near_outer=self.near_outer,
            near_phi=self.near_phi,
        )

    def mesh_rules(self) -> MeshRules:
        return MeshRules(segments_per_wavelength=self.segments_per_wavelength,
                         end_caps=self.end_caps)

    def fingerprint(self) -> dict[str, object]:
        """Canonical dict of the settings plus the solver version (for stable point ids)."""
        d: dict[str, object] = asdict(self)
        d["solver_version"] = SOLVER_VERSION
        return d


@dataclass
class PortSolution:
    """Result of a port sweep.

    Attributes
    ----------
    f_hz : ndarray, shape (F,)
    z : ndarray, shape (F, P, P)
        Port impedance matrix in ohm.
    y : ndarray, shape (F, P, P)
        Short-circuit admittance matrix in S.
    currents : ndarray, shape (F, N, P)
        Basis currents (A) for 1 V at each port, the others short-circuited.
    p_in, p_rad, p_loss : ndarray, shape (F, P)
        Accepted, radiated (from the Hermitian part of the EFIE matrix) and dissipated power in W
        for 1 V peak at each port.
    """

    f_hz: NDArray[np.float64]
    z: NDArray[np.complex128]
    y: NDArray[np.complex128]
    currents: NDArray[np.complex128]
    p_in: NDArray[np.float64]
    p_rad: NDArray[np.float64]
    p_loss: NDArray[np.float64]
    extra: dict[str, NDArray] = field(default_factory=dict)

    @property
    def efficiency(self) -> NDArray[np.float64]:
        """Radiation efficiency ``P_rad / P_in`` per port, shape (F, P)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.p_in > 0, self.p_rad / self.p_in, np.nan)

    def s(self, z0_ohm: float = 50.0) -> NDArray[np.complex128]:
        """Scattering matrix for a real reference impedance ``z0_ohm`` at every port."""
        p = self.z.shape[-1]
        eye = np.eye(p)
        return np.linalg.solve((self.z + z0_ohm * eye).swapaxes(-1, -2),
                               (self.z - z0_ohm * eye).swapaxes(-1, -2)).swapaxes(-1, -2)


class Solver:
    """Method-of-moments solver for one structure; geometry-dependent work is done once.

    Parameters
    ----------
    structure : Structure
    f_max_hz : float
        Highest frequency to be solved (sets the default segmentation and thin-wire checks).
    settings : SolverSettings, optional
    segment_length_m : float, optional
        Target segment length overriding the default density.

    Examples
    --------
    >>> import numpy as np
    >>> from sweeps.geometry import CrossSection, Port, Structure, Wire
    >>> w = Wire(np.array([[0, 0, -0.075], [0, 0, 0.075]]), CrossSection.round_wire(3e-4))
    >>> sol = Solver(Structure([w], ports=[Port([0, 0, 0])]), 1.2e9).solve([9.5e8])
    >>> round(float(sol.z[0, 0, 0].real))  # doctest: +SKIP
    73
    """

    def __init__(
        self,
        structure: Structure,
        f_max_hz: float,
        settings: SolverSettings | None = None,
        *,
        segment_length_m: float | None = None,
    ) -> None:
        self.settings = settings or SolverSettings()
        self.structure = structure
        self.mesh: Mesh = structure.mesh(
            f_max_hz,
            kernel=self.settings.kernel,
            rules=self.settings.mesh_rules(),
            segment_length_m=segment_length_m,
        )
        self.fill = MatrixFill(self.mesh, self.settings.kernel, self.settings.kernel_rules())
        self.f_max_hz = f_max_hz

    @cached_property
    def points(self) -> CurrentPoints:
        """Gauss points of the currents for far fields and plane waves (``field_order``)."""
        return CurrentPoints(self.mesh, self.settings.field_order)

    @cached_property
    def pattern_points(self) -> MergedPoints:
        """A lighter rule for pattern searches: the midpoint of each half, merged per segment.

        Relative error of the radiation vector ~ (k L / 2)^2 / 24, below 1e-3 for L <= lambda / 20.
        """
        return CurrentPoints.midpoints(self.mesh)

    def matrices(self, f_hz: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
        """EFIE matrix and loss-plus-load matrix, each (F, N, N)."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        extra = self.fill.loss(f)
        self.fill.add_loads(extra, f)
        return self.fill.efie(f), extra

    def solve(self, f_hz: NDArray[np.float64] | list[float]) -> PortSolution:
        """Solve at the frequencies ``f_hz`` (Hz) for every port.

        Returns
        -------
        PortSolution
            ``p_loss`` is computed from the currents and the conductor and load impedances;
            ``p_rad = p_in - p_loss`` (Poynting's theorem; the far-field sphere integral,
            :meth:`radiated_power_far_field`, is the independent check used in the tests).
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        if (f <= 0).any() or (f > self.f_max_hz * (1 + 1e-9)).any():
            raise SolverError(
                f"frequencies must lie in (0, {self.f_max_hz:g}] Hz, the range the mesh was "
                "built for"
            )
        e = self.mesh.port_vectors  # (N, P)
        if e.shape[1] == 0:
            raise SolverError("the structure has no port")
        z_tot = self.fill.matrix(f)
        rhs = np.broadcast_to(e, (len(f), *e.shape)).astype(complex)
        try:
            cur = np.linalg.solve(z_tot, rhs)  # (F, N, P)
        except np.linalg.LinAlgError as exc:  # pragma: no cover - singular only for bad meshes
            raise SolverError(f"impedance matrix is singular: {exc}") from exc
        if not np.isfinite(cur).all():
            raise SolverError("non-finite currents: the impedance matrix is ill-conditioned")
        y = e.T @ cur  # (F, P, P)
        z = 1.0 / y if y.shape[-1] == 1 else np.linalg.inv(y)
        p_in = 0.5 * np.real(np.diagonal(y, axis1=1, axis2=2))  # 1 V peak: P = Re(V I*)/2
        p_loss = self.fill.loss_power(cur, f) + self.fill.load_power(cur, f)
        return PortSolution(f_hz=f, z=z, y=y, currents=cur, p_in=p_in, p_rad=p_in - p_loss,
                            p_loss=p_loss)

    def radiated_power_far_field(
        self, solution: PortSolution, index: int, n_theta: int = 48, n_phi: int = 96
    ) -> NDArray[np.float64]:
        """Radiated power (W) at frequency ``index`` from the far-field sphere integral, (P,)."""
        k = 2.0 * math.pi * solution.f_hz[index] / C0
        return radiated_power(self.points, solution.currents[index], k, n_theta, n_phi)

    def scatter(
        self,
        f_hz: NDArray[np.float64] | list[float],
        k_hat: NDArray[np.float64],
        pol: NDArray[np.float64],
        port_loads_ohm: NDArray[np.complex128] | None = None,
    ) -> NDArray[np.complex128]:
        """Currents induced by a 1 V/m plane wave, with loads across the ports.

        One factorisation per frequency serves the plane wave and every port, and then any
        number of load states by port-impedance algebra, with no further solve: with the
        short-circuit currents ``I_sc = Z^-1 V_inc``, the port currents ``I_p = Z^-1 E`` and
        ``Y = E^T I_p``, the currents with loads ``Z_L`` across the ports,
        ``(Z + E Z_L E^T) I = V_inc``, are

            ``I = I_sc - I_p Z_L (1 + Y Z_L)^-1 E^T I_sc``

        (the Woodbury identity, G. H. Golub & C. F. Van Loan, *Matrix Computations*, 4th ed.,
        Johns Hopkins 2013, sec. 2.1.4; from memory), which holds for a short (``Z_L = 0``) and
        tends to the open port as ``Z_L`` grows.

        Parameters
        ----------
        f_hz : array_like, shape (F,)
        k_hat, pol : ndarray, shape (3,)
            Propagation direction and polarisation of the incident wave.
        port_loads_ohm : ndarray, shape (P,), (F, P) or (S, F, P), optional
            Impedance connected across each port's gap (0: short circuit, the default); a
            leading axis of ``S`` load states (the switch's two contact states, say) gives
            the currents of every state from the same solve. An open port is represented by a
            very large impedance.

        Returns
        -------
        ndarray, shape (F, N), or (S, F, N) for loads of shape (S, F, P)
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        z_tot = self.fill.matrix(f)
        e = self.mesh.port_vectors  # (N, P)
        k_hat = np.asarray(k_hat, dtype=float)
        pol = np.asarray(pol)
        rhs = np.empty((len(f), e.shape[0], e.shape[1] + 1), dtype=complex)
        rhs[:, :, :-1] = e
        for i, fi in enumerate(f):
            rhs[i, :, -1] = plane_wave_rhs(self.points, 2.0 * math.pi * fi / C0, k_hat, pol)
        cur = np.linalg.solve(z_tot, rhs)  # (F, N, P + 1): the ports, then the plane wave
        i_sc = cur[:, :, -1]
        if port_loads_ohm is None:
            return i_sc
        zl = np.asarray(port_loads_ohm, dtype=complex)
        states = zl.ndim == 3
        zl = np.broadcast_to(zl if states else zl[None], (zl.shape[0] if states else 1,
                                                          len(f), e.shape[1]))
        i_p = cur[:, :, :-1]  # (F, N, P)
        y = e.T @ i_p  # (F, P, P)
        v = i_sc @ e  # (F, P): short-circuit port currents
        m = np.eye(e.shape[1]) + y[None] * zl[:, :, None, :]  # 1 + Y Z_L, (S, F, P, P)
        w = np.linalg.solve(m, np.broadcast_to(v, zl.shape)[..., None])[..., 0]
        out = i_sc[None] - np.einsum("fnp,sfp->sfn", i_p, zl * w)
        return out if states else out[0]
