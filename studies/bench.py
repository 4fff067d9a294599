"""Performance measurements behind ``filamant bench`` and ``benchmarks/``.

Machines here are shared and noisy, so every figure is a ratio of two timings taken side by
side in the same process, each the median of several repeats.

- ``design_over_lapack``: one full evaluation of the reference design (a printed dipole with 41
  unknowns, 101 frequencies, both switch states, all metrics) over the time of the 101 LAPACK
  solves of the same matrices alone (``numpy.linalg.solve`` on the stacked matrices).
- ``scaling``: fill and solve time per frequency and peak memory against the number of unknowns
  N = 41 ... 801, with fitted power-law exponents.
- ``two_worker_efficiency`` and ``surrogate_speedup`` are added by the study and surrogate
  layers (:func:`run_all` collects whatever is available).
"""

from __future__ import annotations

import gc
import math
import statistics
import time
import tracemalloc
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from sweeps.design import Band, Design
from sweeps.evaluate import evaluate
from sweeps.geometry import CrossSection
from sweeps.mom.solve import Solver
from sweeps.shapes import build_structure

__all__ = ["reference_design", "design_over_lapack", "scaling", "median_time", "run_all"]


def reference_design(unknowns: int = 41) -> tuple[Design, Band]:
    """The benchmark's reference design: a 150 mm printed dipole, 3 x 0.4 mm metal-filled trace.

    ``unknowns - 1`` segments plus the two end caps give ``unknowns`` unknowns; 101 frequencies
    from 800 to 1000 MHz, target 915 MHz.
    """
    design = Design(
        "dipole", {"length_m": 0.150}, CrossSection.trace(3e-3, 0.4e-3), 3e4,
        gap_m=1e-3, segments=unknowns - 1,
    )
    return design, Band(800e6, 1000e6, 101, 915e6)


def median_time(fn: Callable[[], object], repeats: int = 7, warmup: int = 1) -> float:
    """Median wall time of ``fn()`` in seconds over ``repeats`` runs after ``warmup`` runs."""
    for _ in range(warmup):
        fn()
    times = []
    for _ in range(repeats):
        gc.collect()
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


@dataclass
class DesignOverLapack:
    """Result of :func:`design_over_lapack` (seconds and their ratio)."""

    unknowns: int
    frequencies: int
    design_s: float
    lapack_s: float

    @property
    def ratio(self) -> float:
        return self.design_s / self.lapack_s


def design_over_lapack(repeats: int = 9) -> DesignOverLapack:
    """Time one full evaluation against the LAPACK solves of its own matrices, side by side."""
    design, band = reference_design()
    solver = Solver(build_structure(design), band.stop_hz)
    f = np.append(band.f_hz, band.target_hz) if band.target_hz not in band.f_hz else band.f_hz
    efie, extra = solver.matrices(f)
    mats = efie + extra
    rhs = np.broadcast_to(solver.mesh.port_vectors, (len(f), *solver.mesh.port_vectors.shape))
    rhs = np.ascontiguousarray(rhs, dtype=complex)
    # interleave the two measurements so that machine load affects both alike
    d_times, l_times = [], []
    evaluate(design, band)
    np.linalg.solve(mats, rhs)
    for _ in range(repeats):
        gc.collect()
        t0 = time.perf_counter()
        evaluate(design, band)
        d_times.append(time.perf_counter() - t0)
        gc.collect()
        t0 = time.perf_counter()
        np.linalg.solve(mats, rhs)
        l_times.append(time.perf_counter() - t0)
    return DesignOverLapack(solver.mesh.n_unknowns, len(f), statistics.median(d_times),
                            statistics.median(l_times))


@dataclass
class ScalingPoint:
    unknowns: int
    fill_s: float  # per frequency, EFIE + loss, direct
    solve_s: float  # per frequency, LU solve
    setup_s: float  # frequency-independent part (mesh, static integrals)
    peak_bytes: int  # peak traced memory of setup + one fill + one solve


def _fit_exponent(n: list[int], t: list[float]) -> float:
    return float(np.polyfit(np.log(n), np.log(t), 1)[0])


def scaling(unknowns: tuple[int, ...] = (41, 81, 161, 321, 641, 801),
            repeats: int = 3) -> dict[str, object]:
    """Fill + solve time per frequency and peak memory against N, with fitted exponents."""
    points: list[ScalingPoint] = []
    for n in unknowns:
        design, _ = reference_design(n)
        # a narrower trace keeps N = 801 segments above the kernel's shortest allowed length
        design = Design("dipole", {"length_m": 0.150}, CrossSection.trace(0.5e-3, 0.1e-3), 3e4,
                        gap_m=1e-3, segments=n - 1)
        # a high band keeps the segments long enough for the kernel even at N = 801
        f = np.array([915e6])
        structure = build_structure(design)
        setup = median_time(lambda s=structure: Solver(s, 1e9), repeats=repeats, warmup=0)
        solver = Solver(structure, 1e9)
        fill = median_time(lambda sv=solver, ff=f: sv.fill.efie_direct(ff) + sv.fill.loss(ff),
                           repeats=repeats)
        mat = solver.fill.efie_direct(f) + solver.fill.loss(f)
        rhs = solver.mesh.port_vectors.astype(complex)[None]
        solve = median_time(lambda m=mat, r=rhs: np.linalg.solve(m, r), repeats=repeats)
        gc.collect()
        tracemalloc.start()
        s2 = Solver(structure, 1e9)
        m2 = s2.fill.efie_direct(f) + s2.fill.loss(f)
        np.linalg.solve(m2, rhs)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        del s2, m2
        points.append(ScalingPoint(solver.mesh.n_unknowns, fill, solve, setup, peak))
    ns = [p.unknowns for p in points]
    big = [p for p in points if p.unknowns >= 161] or points
    nb = [p.unknowns for p in big]
    return {
        "points": points,
        "fill_exponent": _fit_exponent(nb, [p.fill_s for p in big]),
        "solve_exponent": _fit_exponent(nb, [p.solve_s for p in big]),
        "memory_exponent": _fit_exponent(ns, [p.peak_bytes for p in points]),
        "bytes_per_16n2": [p.peak_bytes / (16.0 * p.unknowns**2) for p in points],
    }


def format_scaling(result: dict[str, object]) -> str:
    """A Markdown table of :func:`scaling`."""
    lines = ["| N | setup (ms) | fill / freq (ms) | solve / freq (ms) | peak memory (MB) | "
             "peak / 16 N^2 |", "|---|---|---|---|---|---|"]
    for p, ratio in zip(result["points"], result["bytes_per_16n2"], strict=True):
        lines.append(f"| {p.unknowns} | {p.setup_s * 1e3:.1f} | {p.fill_s * 1e3:.2f} | "
                     f"{p.solve_s * 1e3:.2f} | {p.peak_bytes / 1e6:.1f} | {ratio:.1f} |")
    lines.append("")
    lines.append(f"fitted exponents (N >= 161): fill {result['fill_exponent']:.2f}, solve "
                 f"{result['solve_exponent']:.2f}; memory {result['memory_exponent']:.2f}")
    return "\n".join(lines)


def _fmt(x: float) -> str:
    return f"{x:.3g}" if math.isfinite(x) else str(x)


MEASUREMENTS = ("design_over_lapack", "scaling", "two_worker_efficiency", "surrogate_speedup",
                "large_study")


def run_all(quick: bool = False, only: tuple[str, ...] = ()) -> dict[str, object]:
    """Run the measurements (all, or those named in ``only``) and return a JSON-ready dict.

    The per-design figures run with one BLAS thread, as a study worker does (one
    single-threaded worker process per core), for the evaluation and its LAPACK reference alike.
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(1):
        return _run_all(quick, only)


def _run_all(quick: bool, only: tuple[str, ...]) -> dict[str, object]:
    from sweeps.errors import ConfigError

    unknown = [o for o in only if o not in MEASUREMENTS]
    if unknown:
        raise ConfigError(f"bench --only: unknown measurement {unknown[0]!r}; expected one of "
                          f"{', '.join(MEASUREMENTS)}")
    want = set(only or MEASUREMENTS)
    out: dict[str, object] = {}
    if "design_over_lapack" in want:
        r = design_over_lapack(repeats=5 if quick else 15)
        out["design_over_lapack"] = {
            "ratio": round(r.ratio, 3), "evaluation_ms": round(r.design_s * 1e3, 3),
            "lapack_ms": round(r.lapack_s * 1e3, 3), "unknowns": r.unknowns,
            "frequencies": r.frequencies, "target": 3.0,
        }
    if "scaling" in want:
        res = scaling((41, 81, 161, 321) if quick else (41, 81, 161, 321, 641, 801),
                      repeats=2 if quick else 3)
        out["scaling"] = {
            "unknowns": [p.unknowns for p in res["points"]],
            "fill_ms": [round(p.fill_s * 1e3, 3) for p in res["points"]],
            "solve_ms": [round(p.solve_s * 1e3, 3) for p in res["points"]],
            "setup_ms": [round(p.setup_s * 1e3, 3) for p in res["points"]],
            "peak_mb": [round(p.peak_bytes / 1e6, 3) for p in res["points"]],
            "peak_over_16n2": [round(x, 2) for x in res["bytes_per_16n2"]],
            "fill_exponent": round(res["fill_exponent"], 3),
            "solve_exponent": round(res["solve_exponent"], 3),
            "memory_exponent": round(res["memory_exponent"], 3),
            "table": format_scaling(res),
        }
    for name in ("two_worker_efficiency", "surrogate_speedup", "large_study"):
        if name in want and name in _EXTRA:
            out[name] = _EXTRA[name](quick)
    return out


#: Measurements contributed by the study and surrogate layers: name -> fn(quick) -> dict.
_EXTRA: dict[str, Callable[[bool], dict[str, object]]] = {}
