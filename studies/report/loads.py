"""Modulation factor and differential RCS of one design against the two switch loads.

No re-solve is needed: the reflection of any load follows from the antenna's input impedance
``Z_a`` at the target (from the stored response), by the power-wave reflection coefficient
``Gamma = (Z_L - conj(Z_a)) / (Z_L + Z_a)`` (Kurokawa 1965), the modulation factor
``|Gamma_closed - Gamma_open|^2 / 4`` (Griffin & Durgin 2009) and the differential RCS
``lambda^2 G^2 |Gamma_closed - Gamma_open|^2 / (4 pi)`` (Nikitin, Rao & Martinez 2007) with the
design's stored peak gain ``G``; see :mod:`sweeps.backscatter`.

The grid varies the closed contact's resistance and the open gap's capacitance; the closed
state's inductance (and capacitor, if any) and the open state's resistance and inductance stay
at the design's values.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from studies.report.figures import Unavailable, new_figure
from sweeps import backscatter
from sweeps.design import SwitchLoad

__all__ = ["CLOSED_R_OHM", "OPEN_C_PF", "impedance_at", "switch_load_grid", "switch_figure"]

#: Closed-contact resistances of the grid in ohm (log spaced).
CLOSED_R_OHM = np.logspace(-1, 3, 81)
#: Open-gap capacitances of the grid in pF (log spaced).
OPEN_C_PF = np.logspace(-2, 0, 61)


def impedance_at(f_hz: NDArray[np.float64], zin: NDArray[np.complex128], at_hz: float) -> complex:
    """``Z`` at ``at_hz`` on a cubic spline through the samples (linear below 4 samples), as
    the metrics read the target (:mod:`sweeps.metrics`)."""
    if len(f_hz) < 4:
        return complex(np.interp(at_hz, f_hz, zin.real) + 1j * np.interp(at_hz, f_hz, zin.imag))
    from scipy.interpolate import CubicSpline

    return complex(CubicSpline(f_hz, zin)(at_hz))


def _with(load: SwitchLoad, **kw: float) -> SwitchLoad:
    return SwitchLoad(r_ohm=kw.get("r_ohm", load.r_ohm), l_h=kw.get("l_h", load.l_h),
                      c_f=kw.get("c_f", load.c_f))


def switch_load_grid(study: Any, params: Mapping[str, Any], f_hz: NDArray[np.float64],
                     zin: NDArray[np.complex128], gain_dbi: float | None,
                     target_hz: float) -> dict[str, Any]:
    """Modulation factor and differential RCS over the load grid, and at the design's loads.

    Parameters
    ----------
    study : studies.config.Study
    params : mapping
        The design's parameters (config units; may include ``switch.*`` keys).
    f_hz, zin : ndarray, shape (F,)
        The stored response (Hz, ohm).
    gain_dbi : float or None
        The design's stored peak gain; without it the RCS is left out.
    target_hz : float

    Returns
    -------
    dict
        ``closed_r_ohm`` (R,), ``open_c_pf`` (C,), ``modulation_factor`` (R, C),
        ``delta_rcs_dbsm`` (R, C) or None, ``za_ohm``, ``closed``/``open`` (the design's
        :class:`~sweeps.design.SwitchLoad`), ``at_design`` (modulation_factor and
        delta_rcs_dbsm at the design's own loads).
    """
    from studies.designio import apply_parameters, switch_states

    _, _, switch = apply_parameters(study, dict(params))
    states = switch_states(switch)
    za = impedance_at(np.asarray(f_hz, float), np.asarray(zin, complex), target_hz)
    if not za.real > 0:
        raise Unavailable(f"Re Zin = {za.real:.4g} ohm <= 0 at the target: power-wave "
                          "reflection coefficients need a positive antenna resistance")
    closed = [_with(states.closed, r_ohm=float(r)).impedance(target_hz) for r in CLOSED_R_OHM]
    opened = [_with(states.open, c_f=float(c) * 1e-12).impedance(target_hz) for c in OPEN_C_PF]
    g_c = backscatter.power_wave_gamma(np.array(closed), za)
    g_o = backscatter.power_wave_gamma(np.array(opened), za)
    mod = backscatter.modulation_factor(g_c[:, None], g_o[None, :])
    g0_c = backscatter.power_wave_gamma(states.closed.impedance(target_hz), za)
    g0_o = backscatter.power_wave_gamma(states.open.impedance(target_hz), za)
    at = {"modulation_factor": float(backscatter.modulation_factor(g0_c, g0_o)),
          "delta_rcs_dbsm": None}
    rcs = None
    if gain_dbi is not None and math.isfinite(gain_dbi):
        g = 10.0 ** (gain_dbi / 10.0)
        with np.errstate(divide="ignore"):
            rcs = 10.0 * np.log10(backscatter.differential_rcs_m2(target_hz, g, g_c[:, None],
                                                                   g_o[None, :]))
            at["delta_rcs_dbsm"] = float(10.0 * np.log10(
                backscatter.differential_rcs_m2(target_hz, g, g0_c, g0_o)))
    return {"closed_r_ohm": CLOSED_R_OHM, "open_c_pf": OPEN_C_PF, "modulation_factor": mod,
            "delta_rcs_dbsm": rcs, "za_ohm": za, "closed": states.closed, "open": states.open,
            "at_design": at, "target_hz": target_hz}


def switch_figure(study: Any, params: Mapping[str, Any], f_hz: NDArray[np.float64],
                  zin: NDArray[np.complex128], gain_dbi: float | None, target_hz: float,
                  label: str) -> tuple[Any, dict]:
    """Two maps over (closed resistance, open capacitance): modulation factor and ΔRCS."""
    data = switch_load_grid(study, params, f_hz, zin, gain_dbi, target_hz)
    panels = [("modulation_factor", "modulation factor (1)")]
    if data["delta_rcs_dbsm"] is not None:
        panels.append(("delta_rcs_dbsm", "differential RCS (dBsm)"))
    fig = new_figure(6.0 * len(panels), 4.4)
    fig.subplots_adjust(wspace=0.45)
    x, y = data["closed_r_ohm"], data["open_c_pf"]
    c_open = data["open"].c_f
    for i, (key, text) in enumerate(panels):
        ax = fig.add_subplot(1, len(panels), i + 1)
        z = np.asarray(data[key], dtype=float).T  # rows: open C, columns: closed R
        z = np.where(np.isfinite(z), z, np.nan)
        cs = ax.contourf(x, y, z, levels=20, cmap="viridis")
        fig.colorbar(cs, ax=ax, label=text)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("closed contact resistance r_ohm (ohm)")
        ax.set_ylabel("open gap capacitance c_pf (pF)")
        if math.isfinite(c_open):
            ax.plot([data["closed"].r_ohm], [c_open * 1e12], "r*", ms=12,
                    label="this design's loads")
            ax.legend(fontsize=8, loc="lower left")
        ax.set_title(text, fontsize=9)
    za = data["za_ohm"]
    fig.suptitle(f"{label}: at {target_hz / 1e6:g} MHz, Zin = {za.real:.1f} "
                 f"{'+' if za.imag >= 0 else '-'} j{abs(za.imag):.1f} ohm", fontsize=10)
    return fig, data
