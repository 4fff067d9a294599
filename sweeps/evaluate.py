"""One design evaluation: build, mesh, solve over the band, fields at the target, metrics.

:func:`evaluate` is a pure function of ``(Design, Band, SolverSettings)``; it knows nothing of
studies, stores or clusters.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from sweeps.design import Band, Design, Reader
from sweeps.materials import C0
from sweeps.metrics import MetricSet, compute_metrics
from sweeps.mom.fields import directions, radiation_intensity, radiation_intensity_turned
from sweeps.mom.solve import PortSolution, Solver, SolverSettings
from sweeps.shapes import build_structure

__all__ = ["Evaluation", "evaluate", "peak_gain"]


@dataclass
class Evaluation:
    """Everything one evaluation produced.

    Attributes
    ----------
    design, band, settings
        The inputs.
    f_hz : ndarray, shape (F,)
        Band frequencies in Hz.
    z : ndarray, shape (F, P, P)
        Port impedance matrix in ohm (P = 1 for the shapes of :mod:`sweeps.shapes`).
    efficiency : ndarray, shape (F,)
        Radiation efficiency of the antenna port.
    gain_dbi, directivity_dbi : float
        Peak gain and directivity at the target frequency.
    peak_direction : ndarray, shape (3,)
        Unit vector of the peak.
    enclosing_radius_m : float
        Radius of the smallest sphere enclosing the antenna.
    n_unknowns : int
    metrics : MetricSet
    """

    design: Design
    band: Band
    settings: SolverSettings
    f_hz: NDArray[np.float64]
    z: NDArray[np.complex128]
    efficiency: NDArray[np.float64]
    gain_dbi: float
    directivity_dbi: float
    peak_direction: NDArray[np.float64]
    enclosing_radius_m: float
    n_unknowns: int
    metrics: MetricSet
    solver: Solver | None = None

    @property
    def zin(self) -> NDArray[np.complex128]:
        """Input impedance of port 1 over the band, shape (F,)."""
        return self.z[:, 0, 0]


def peak_gain(
    solver: Solver, solution: PortSolution, index: int, port: int = 0, step_deg: float = 15.0
) -> tuple[float, float, NDArray[np.float64]]:
    """Peak gain and directivity (dBi) at frequency ``index``.

    Gain is ``4 pi U / P_in`` (IEEE Std 145-2013 definition, not realized gain); directivity
    ``4 pi U / P_rad``. The maximum of a ``step_deg`` grid over the sphere is refined by fitting
    a parabola through the grid neighbours in theta and phi (the pattern of an antenna this size
    is smooth on that scale: for a dipole-like ``sin^2`` lobe the refined peak is within 0.01 dB).
    A structure in a plane ``z = const`` (every printed shape) radiates the same at ``theta``
    and ``pi - theta``, so only the upper half of the grid is computed.
    """
    k = 2.0 * math.pi * solution.f_hz[index] / C0
    cur = solution.currents[index][:, port]
    points = solver.pattern_points
    nt = int(round(180.0 / step_deg)) + 1
    npf = int(round(360.0 / step_deg))
    mirror = bool(getattr(points, "planar_z", False)) and nt % 2 == 1
    rows = nt // 2 + 1 if mirror else nt
    # a planar structure also radiates the same toward (theta, phi) as toward the mirror image
    # turned by pi about z, which needs no cosines and sines of its own (half the grid)
    turn = mirror and npf % 2 == 0
    theta, phi, dirs = _pattern_grid(step_deg, rows, turn)
    if turn:
        u_half, u_turned = radiation_intensity_turned(points, cur, k, dirs)
        u = np.concatenate([u_half[:, 0].reshape(rows, npf // 2),
                            u_turned[:, 0].reshape(rows, npf // 2)], axis=1)
    else:
        u = radiation_intensity(points, cur, k, dirs)[:, 0].reshape(rows, npf)
    grid = np.concatenate([u, u[-2::-1]]) if mirror else u
    i, j = np.unravel_index(int(np.argmax(grid)), grid.shape)
    h = math.radians(step_deg)

    def vertex(ym: float, y0: float, yp: float) -> float:
        den = ym - 2.0 * y0 + yp
        return 0.0 if den >= 0 else min(max(float(0.5 * (ym - yp) / den), -0.5), 0.5)

    t_best, p_best = theta[i], phi[j]
    if 0 < i < nt - 1:
        t_best = theta[i] + h * vertex(grid[i - 1, j], grid[i, j], grid[i + 1, j])
    if 0 < i < nt - 1:  # phi is meaningless at the poles
        p_best = phi[j] + h * vertex(grid[i, (j - 1) % npf], grid[i, j], grid[i, (j + 1) % npf])
    d_best = directions(np.array([t_best]), np.array([p_best]))
    u_best = float(radiation_intensity(points, cur, k, d_best)[0, 0])
    if u_best < grid[i, j]:
        u_best, d_best = float(grid[i, j]), directions(theta[i:i + 1], phi[j:j + 1])
    p_in = solution.p_in[index, port]
    p_rad = solution.p_rad[index, port]
    gain = 10.0 * math.log10(4.0 * math.pi * u_best / p_in) if p_in > 0 else -math.inf
    direc = 10.0 * math.log10(4.0 * math.pi * u_best / p_rad) if p_rad > 0 else -math.inf
    return gain, direc, d_best[0]


@lru_cache(maxsize=8)
def _pattern_grid(step_deg: float, rows: int, half: bool = False
                  ) -> tuple[NDArray, NDArray, NDArray]:
    """Angles (rad) of the pattern-search grid and the directions of its first ``rows`` rows
    (with ``half``, of the first half of the azimuths only)."""
    nt = int(round(180.0 / step_deg)) + 1
    npf = int(round(360.0 / step_deg))
    theta = np.radians(np.linspace(0.0, 180.0, nt))
    phi = np.radians(np.arange(npf) * step_deg)
    tt, pp = np.meshgrid(theta[:rows], phi[: npf // 2] if half else phi, indexing="ij")
    dirs = directions(tt.ravel(), pp.ravel())
    for a in (theta, phi, dirs):
        a.setflags(write=False)
    return theta, phi, dirs


def evaluate(
    design: Design,
    band: Band,
    settings: SolverSettings | None = None,
    *,
    keep_solver: bool = False,
    reader: Reader | None = None,
) -> Evaluation:
    """Evaluate one design over a band.

    Parameters
    ----------
    design : Design
    band : Band
    settings : SolverSettings, optional
    keep_solver : bool
        Keep the :class:`~sweeps.mom.solve.Solver` on the result (for plane-wave or pattern
        follow-ups; it holds the matrices, so leave it off in studies).
    reader : Reader, optional
        The reader of the backscatter link; without it ``read_range_m`` is ``None``.

    Returns
    -------
    Evaluation
    """
    settings = settings or SolverSettings()
    structure = build_structure(design)
    solver = Solver(structure, band.stop_hz, settings)
    f = band.f_hz
    on_grid = np.abs(f - band.target_hz) <= 1e-12 * abs(band.target_hz)  # np.isclose, rtol 1e-12
    if on_grid.any():
        f_all = f
        it = int(np.argmax(on_grid))
    else:
        f_all = np.append(f, band.target_hz)
        it = len(f)
    sol = solver.solve(f_all)
    gain, direc, peak = peak_gain(solver, sol, it)
    eff_all = sol.efficiency[:, 0]
    n = len(f)
    z = sol.z[:n]
    eff = eff_all[:n]
    radius = solver.mesh.enclosing_radius()
    metrics = compute_metrics(
        f, z[:, 0, 0], target_hz=band.target_hz, z0_ohm=design.z0_ohm,
        efficiency=eff, gain_dbi=gain, enclosing_radius_m=radius,
        switch=design.switch, reader=reader,
    )
    # report efficiency at the target from the solve itself, not an interpolation
    metrics.set("efficiency", float(eff_all[it]))
    return Evaluation(
        design=design,
        band=band,
        settings=settings,
        f_hz=f,
        z=z,
        efficiency=eff,
        gain_dbi=gain,
        directivity_dbi=direc,
        peak_direction=peak,
        enclosing_radius_m=radius,
        n_unknowns=solver.mesh.n_unknowns,
        metrics=metrics,
        solver=solver if keep_solver else None,
    )
