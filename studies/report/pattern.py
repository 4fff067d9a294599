"""The radiation pattern of the best design: one real solver evaluation, three principal cuts.

The built-in shapes lie in the xy plane with the trace (or the dipole axis) along x, so the
three principal planes are the xy plane (``theta = 90 deg``, azimuth ``phi`` from +x), the xz
plane (``phi = 0``, angle ``theta`` from +z) and the yz plane (``phi = 90 deg``). For a straight
dipole along x, the yz plane is the H-plane (no null) and xy, xz are E-planes (nulls along the
axis).

Gain is the IEEE gain ``G = 4 pi U / P_in`` (IEEE Std 145-2013; radiation intensity ``U`` of
:func:`sweeps.mom.fields.radiation_intensity`), at the target frequency, with the filament's
loss included; in dBi.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from studies.report.figures import new_figure
from sweeps.materials import C0

__all__ = ["CUTS", "pattern_cuts", "pattern_figure"]

#: The principal-plane cuts: label -> (phi of the cut in degrees or None for the xy plane).
CUTS: dict[str, float | None] = {
    "xy plane (theta = 90 deg)": None,
    "xz plane (phi = 0 deg)": 0.0,
    "yz plane (phi = 90 deg)": 90.0,
}

#: Angular step of the cuts in degrees.
STEP_DEG = 2.0


def pattern_cuts(study: Any, params: Mapping[str, Any]) -> dict[str, Any]:
    """Gain in dBi over the three principal cuts of one design of ``study`` at its target.

    Parameters
    ----------
    study : studies.config.Study
    params : mapping
        The design's parameter values (config units), applied on top of the study's base.

    Returns
    -------
    dict
        ``angle_deg`` (A,), ``cuts`` (label -> gain in dBi, (A,)), ``gain_dbi`` and
        ``directivity_dbi`` (peak over the sphere from the evaluation), ``efficiency`` at the
        target, ``f_hz``.
    """
    from studies.designio import design_from, solver_settings
    from sweeps.evaluate import evaluate
    from sweeps.mom.fields import directions, radiation_intensity

    design, band, reader = design_from(study, dict(params))
    ev = evaluate(design, band, solver_settings(study), keep_solver=True, reader=reader)
    solver = ev.solver
    assert solver is not None  # keep_solver=True
    sol = solver.solve([band.target_hz])
    k = 2.0 * math.pi * band.target_hz / C0
    cur = sol.currents[0][:, 0]
    p_in = float(sol.p_in[0, 0])
    angle = np.radians(np.arange(0.0, 360.0 + STEP_DEG / 2, STEP_DEG))
    cuts: dict[str, np.ndarray] = {}
    for label, phi_deg in CUTS.items():
        if phi_deg is None:
            r_hat = directions(np.full_like(angle, math.pi / 2), angle)
        else:  # theta runs over the full circle: sin(theta) < 0 is the far half of the plane
            r_hat = directions(angle, np.full_like(angle, math.radians(phi_deg)))
        u = radiation_intensity(solver.points, cur, k, r_hat)[:, 0]
        with np.errstate(divide="ignore"):
            cuts[label] = 10.0 * np.log10(4.0 * math.pi * u / p_in)
    return {"angle_deg": np.degrees(angle), "cuts": cuts, "gain_dbi": ev.gain_dbi,
            "directivity_dbi": ev.directivity_dbi, "efficiency": float(sol.efficiency[0, 0]),
            "f_hz": band.target_hz}


def pattern_figure(study: Any, params: Mapping[str, Any], label: str,
                   dynamic_range_db: float = 30.0) -> tuple[Any, dict]:
    """Polar plots of the three cuts (gain in dBi, ``dynamic_range_db`` below the peak)."""
    data = pattern_cuts(study, params)
    peak = max(float(np.nanmax(g)) for g in data["cuts"].values())
    top = 5.0 * math.ceil((peak + 0.5) / 5.0)  # a round outer ring above the peak
    floor = top - dynamic_range_db
    ticks = np.arange(floor + 10.0, top + 0.1, 10.0)
    fig = new_figure(12.0, 4.4)
    fig.subplots_adjust(wspace=0.5)
    ang = np.radians(data["angle_deg"])
    for i, (name, gain) in enumerate(data["cuts"].items()):
        ax = fig.add_subplot(1, 3, i + 1, projection="polar")
        if CUTS[name] is not None:  # theta from +z, clockwise
            ax.set_theta_zero_location("N")
            ax.set_theta_direction(-1)
        ax.plot(ang, np.clip(np.nan_to_num(gain, neginf=floor), floor, None), color="C0")
        ax.set_ylim(floor, top)
        ax.set_yticks(ticks, [f"{t:g} dBi" for t in ticks])
        ax.set_rlabel_position(112.5 if CUTS[name] is None else 22.5)
        ax.set_title(name, fontsize=9, pad=14)
        ax.tick_params(labelsize=7)
    fig.suptitle(f"{label}: gain at {data['f_hz'] / 1e6:g} MHz (peak {data['gain_dbi']:.2f} "
                 f"dBi, efficiency {data['efficiency']:.3f})", fontsize=10)
    return fig, data
