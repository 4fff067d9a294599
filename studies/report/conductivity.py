"""Radiation efficiency against the filament's conductivity (log x).

The study's finished designs come from the table. Beside them, the best design's geometry is
solved at the target over a conductivity sweep (one frequency per conductivity, a few
milliseconds each), so the page shows where the filaments sit on the curve even when the study
compares only two of them.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from studies.report.figures import Unavailable, new_figure

__all__ = ["CONDUCTIVITY", "efficiency_curve", "efficiency_figure"]

CONDUCTIVITY = "antenna.conductivity_s_per_m"

#: At most this many distinct conductivities get a median marker.
_MAX_LEVELS = 12


def efficiency_curve(study: Any, params: Mapping[str, Any], sigma_s_per_m: np.ndarray
                     ) -> np.ndarray:
    """Radiation efficiency at the target of one design for each conductivity (S/m).

    Returns
    -------
    ndarray, shape like ``sigma_s_per_m``
    """
    from studies.designio import design_from, solver_settings
    from sweeps.mom.solve import Solver
    from sweeps.shapes import build_structure

    out = np.empty(len(sigma_s_per_m))
    for i, s in enumerate(sigma_s_per_m):
        design, band, _ = design_from(study, {**params, CONDUCTIVITY: float(s)})
        solver = Solver(build_structure(design), band.stop_hz, solver_settings(study))
        out[i] = float(solver.solve([band.target_hz]).efficiency[0, 0])
    return out


def _table_points(table: pd.DataFrame, study: Any) -> tuple[np.ndarray, np.ndarray]:
    done = table[table["status"] == "done"]
    if CONDUCTIVITY in done.columns:
        sigma = pd.to_numeric(done[CONDUCTIVITY], errors="coerce")  # "pec" is not a number
    else:
        base = pd.to_numeric(pd.Series([study.antenna.conductivity_s_per_m]), errors="coerce")
        sigma = pd.Series(float(base.iloc[0]), index=done.index)
    eff = done["efficiency"].astype(float)
    ok = sigma.notna() & np.isfinite(sigma) & (sigma > 0) & eff.notna()
    return sigma[ok].to_numpy(float), eff[ok].to_numpy(float)


def efficiency_figure(table: pd.DataFrame, study: Any, best: Mapping[str, Any] | None,
                      label: str = "best design") -> tuple[Any, dict, str]:
    """Efficiency of the finished designs against conductivity, and the best design's curve.

    Returns
    -------
    figure, data, note
        ``note`` says what the table could not show (one conductivity only), or is empty.

    Raises
    ------
    Unavailable
        When no finished design has a finite conductivity and an efficiency.
    """
    s, e = _table_points(table, study)
    if not len(s):
        raise Unavailable("no finished design has a finite conductivity and an efficiency "
                          "(a perfect conductor, or no finished point)")
    levels = np.unique(s)
    note = ""
    if CONDUCTIVITY not in table.columns:
        note = (f"The study does not vary the conductivity (antenna.conductivity_s_per_m = "
                f"{levels[0]:g} S/m for every design): its designs sit on one vertical line. ")
    elif len(levels) < 2:
        note = "The finished designs have one conductivity only. "
    lo = min(1.0, levels[0] / 10.0)
    hi = max(1e7, levels[-1] * 10.0)
    sweep = np.logspace(np.log10(lo), np.log10(hi), 29)
    data: dict[str, Any] = {"conductivity_s_per_m": s, "efficiency": e}
    fig = new_figure()
    ax = fig.add_subplot(1, 1, 1)
    if best is not None:
        curve = efficiency_curve(study, best, sweep)
        data["curve"] = {"conductivity_s_per_m": sweep, "efficiency": curve}
        ax.plot(sweep, curve, "-", color="0.4", lw=1.2,
                label=f"{label}, conductivity swept (solver)")
    ax.scatter(s, e, s=14, alpha=0.7, label=f"finished designs of the study ({len(s)})")
    if len(levels) <= _MAX_LEVELS:
        med = np.array([np.median(e[s == v]) for v in levels])
        ax.plot(levels, med, "k_", ms=16, mew=2, ls="none", label="median per conductivity")
        data["median"] = dict(zip(levels.tolist(), med.tolist(), strict=True))
    ax.set_xscale("log")
    ax.set_ylim(0.0, 1.02)
    ax.set_xlabel("conductivity (S/m)")
    ax.set_ylabel("radiation efficiency (1)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, loc="best")
    return fig, data, note
