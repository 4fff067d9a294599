"""Performance measurements behind ``filamant bench`` and ``benchmarks/``.

Machines here are shared and noisy, so every figure is a ratio of two timings taken side by
side in the same process, each the median of several repeats.

- ``design_over_lapack``: one full evaluation of the reference design (a printed dipole with 41
  unknowns, 101 frequencies plus the target, both switch states, all metrics) over the time of
  the LAPACK solves of the same matrices alone (``numpy.linalg.solve`` on the stacked
  matrices). The two are timed alternately; the figure is the median over the repeats of each
  evaluation's time over the mean of the LAPACK runs just before and after it, in CPU time of
  this process (``time.process_time``: with one BLAS thread that is the work done, and time the
  process spends waiting for a core on a loaded machine does not count). The same ratio in
  wall-clock time is reported beside it.
- ``scaling``: fill and solve time per frequency, setup time and peak memory against the
  number of unknowns N = 41 ... 801, with fitted power-law exponents; the memory per frequency
  in flight is the growth of the peak from one to eight frequencies, in units of one complex
  N x N matrix (16 N^2 bytes).
- ``surrogate_speedup``: solver time per design over surrogate prediction time per design in a
  batch (needs the :mod:`surrogates` package).
- ``two_worker_efficiency`` and ``large_study`` come from the study layer
  (:mod:`studies.studybench`); :func:`run_all` collects whatever is available.
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
from numpy.typing import NDArray

from sweeps.design import Band, Design
from sweeps.evaluate import evaluate
from sweeps.geometry import CrossSection
from sweeps.mom.solve import Solver
from sweeps.shapes import build_structure

__all__ = ["reference_design", "design_over_lapack", "scaling", "median_time", "run_all",
           "surrogate_speedup"]


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
    """Result of :func:`design_over_lapack` (seconds and their ratios)."""

    unknowns: int
    frequencies: int
    design_s: float  # median CPU time of one evaluation
    lapack_s: float  # median CPU time of the LAPACK solves
    ratio: float  # median of the per-repeat CPU-time ratios
    design_wall_s: float
    lapack_wall_s: float
    ratio_wall: float


def design_over_lapack(repeats: int = 15) -> DesignOverLapack:
    """Time one full evaluation against the LAPACK solves of its own matrices, side by side."""
    design, band = reference_design()
    solver = Solver(build_structure(design), band.stop_hz)
    f = np.append(band.f_hz, band.target_hz) if band.target_hz not in band.f_hz else band.f_hz
    efie, extra = solver.matrices(f)
    mats = efie + extra
    rhs = np.broadcast_to(solver.mesh.port_vectors, (len(f), *solver.mesh.port_vectors.shape))
    rhs = np.ascontiguousarray(rhs, dtype=complex)

    def lapack() -> tuple[float, float]:
        gc.collect()
        t0, c0 = time.perf_counter(), time.process_time()
        np.linalg.solve(mats, rhs)
        return time.process_time() - c0, time.perf_counter() - t0

    def design_run() -> tuple[float, float]:
        gc.collect()
        t0, c0 = time.perf_counter(), time.process_time()
        evaluate(design, band)
        return time.process_time() - c0, time.perf_counter() - t0

    design_run()  # warm-up: imports, caches of the band grid
    before = lapack()
    d_cpu, d_wall, l_cpu, l_wall, r_cpu, r_wall = [], [], [], [], [], []
    for _ in range(repeats):
        dc, dw = design_run()
        after = lapack()
        lc, lw = 0.5 * (before[0] + after[0]), 0.5 * (before[1] + after[1])
        d_cpu.append(dc)
        d_wall.append(dw)
        l_cpu.append(after[0])
        l_wall.append(after[1])
        r_cpu.append(dc / lc)
        r_wall.append(dw / lw)
        before = after
    med = statistics.median
    return DesignOverLapack(solver.mesh.n_unknowns, len(f), med(d_cpu), med(l_cpu), med(r_cpu),
                            med(d_wall), med(l_wall), med(r_wall))


@dataclass
class ScalingPoint:
    unknowns: int
    fill_s: float  # per frequency, EFIE + loss, direct
    solve_s: float  # per frequency, LU solve
    setup_s: float  # frequency-independent part (mesh, static integrals)
    peak_bytes: int  # peak traced memory of setup + one fill + one solve
    per_frequency_bytes: float  # growth of the fill + solve peak per frequency in flight


def _fit_exponent(n: list[int], t: list[float]) -> float:
    return float(np.polyfit(np.log(n), np.log(t), 1)[0])


def _traced_peak(fn: Callable[[], object]) -> int:
    gc.collect()
    tracemalloc.start()
    fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


def scaling(unknowns: tuple[int, ...] = (41, 81, 161, 321, 641, 801),
            repeats: int = 3) -> dict[str, object]:
    """Fill + solve time per frequency and peak memory against N, with fitted exponents."""
    points: list[ScalingPoint] = []
    for n in unknowns:
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
        del mat

        def setup_fill_solve(s: object = structure, ff: NDArray = f) -> None:
            s2 = Solver(s, 1e9)
            m2 = s2.fill.efie_direct(ff) + s2.fill.loss(ff)
            np.linalg.solve(m2, s2.mesh.port_vectors.astype(complex)[None])

        peak = _traced_peak(setup_fill_solve)

        def fill_solve(k: int, sv: Solver = solver) -> None:
            ff = np.linspace(900e6, 915e6, k)
            m2 = sv.fill.efie_direct(ff)
            sv.fill.add_loss(m2, ff)
            np.linalg.solve(m2, np.broadcast_to(sv.mesh.port_vectors.astype(complex),
                                                (k, *sv.mesh.port_vectors.shape)))

        per_freq = (_traced_peak(lambda: fill_solve(8)) - _traced_peak(lambda: fill_solve(1))) / 7
        points.append(ScalingPoint(solver.mesh.n_unknowns, fill, solve, setup, peak, per_freq))
    ns = [p.unknowns for p in points]
    big = [p for p in points if p.unknowns >= 161] or points
    nb = [p.unknowns for p in big]
    return {
        "points": points,
        "fill_exponent": _fit_exponent(nb, [p.fill_s for p in big]),
        "solve_exponent": _fit_exponent(nb, [p.solve_s for p in big]),
        "memory_exponent": _fit_exponent(ns, [p.peak_bytes for p in points]),
        "bytes_per_16n2": [p.peak_bytes / (16.0 * p.unknowns**2) for p in points],
        "per_frequency_over_16n2": [p.per_frequency_bytes / (16.0 * p.unknowns**2)
                                    for p in points],
    }


def format_scaling(result: dict[str, object]) -> str:
    """A Markdown table of :func:`scaling`."""
    lines = ["| N | setup (ms) | fill / freq (ms) | solve / freq (ms) | peak memory (MB) | "
             "peak / 16 N^2 | per frequency / 16 N^2 |", "|---|---|---|---|---|---|---|"]
    for p, ratio, per in zip(result["points"], result["bytes_per_16n2"],
                             result["per_frequency_over_16n2"], strict=True):
        lines.append(f"| {p.unknowns} | {p.setup_s * 1e3:.1f} | {p.fill_s * 1e3:.2f} | "
                     f"{p.solve_s * 1e3:.2f} | {p.peak_bytes / 1e6:.1f} | {ratio:.1f} | "
                     f"{per:.2f} |")
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
        r = design_over_lapack(repeats=7 if quick else 25)
        out["design_over_lapack"] = {
            "ratio": round(r.ratio, 3), "evaluation_ms": round(r.design_s * 1e3, 3),
            "lapack_ms": round(r.lapack_s * 1e3, 3), "ratio_wall": round(r.ratio_wall, 3),
            "evaluation_wall_ms": round(r.design_wall_s * 1e3, 3),
            "lapack_wall_ms": round(r.lapack_wall_s * 1e3, 3), "unknowns": r.unknowns,
            "frequencies": r.frequencies, "clock": "process CPU time", "target": 3.0,
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
            "per_frequency_over_16n2": [round(x, 2) for x in res["per_frequency_over_16n2"]],
            "fill_exponent": round(res["fill_exponent"], 3),
            "solve_exponent": round(res["solve_exponent"], 3),
            "memory_exponent": round(res["memory_exponent"], 3),
            "table": format_scaling(res),
        }
    if "surrogate_speedup" in want:
        out["surrogate_speedup"] = surrogate_speedup(quick)
    extra = _extra()
    for name in ("two_worker_efficiency", "large_study"):
        if name in want:
            out[name] = extra[name](quick) if name in extra else {
                "available": False, "reason": "the study layer (studies.studybench) is missing"}
    return out


#: Measurements contributed by the study layer: name -> fn(quick) -> dict.
_EXTRA: dict[str, Callable[[bool], dict[str, object]]] = {}


def _extra() -> dict[str, Callable[[bool], dict[str, object]]]:
    try:
        from studies import studybench
    except ImportError:  # pragma: no cover - the study layer ships with the package
        return _EXTRA
    studybench.register(_EXTRA)
    return _EXTRA


def surrogate_speedup(quick: bool = False) -> dict[str, object]:
    """Solver time per design over surrogate prediction time per design in a batch.

    Trains a surrogate of the reference design's ``resonance_mhz`` and ``gain_dbi`` over its
    length (140-160 mm) and trace width (2-4 mm) on designs evaluated here, then times a batch
    prediction of 10,000 designs. The solver time is the median evaluation time of the training
    designs (CPU time, one BLAS thread). Target >= 1000.
    """
    try:
        import pandas as pd

        from surrogates import FeatureSpec, build_dataset, fit_surrogate, forward_table
    except ImportError as exc:
        return {"available": False, "reason": f"needs the surrogates package ({exc})"}
    _, band = reference_design()
    n_train = 24 if quick else 64
    rng = np.random.default_rng(0)
    rows, times = [], []
    for length_mm, width_mm in zip(rng.uniform(140, 160, n_train), rng.uniform(2, 4, n_train),
                                   strict=True):
        design = Design("dipole", {"length_m": length_mm / 1e3},
                        CrossSection.trace(width_mm / 1e3, 0.4e-3), 3e4, gap_m=1e-3, segments=40)
        c0 = time.process_time()
        ev = evaluate(design, band)
        times.append(time.process_time() - c0)
        rows.append({"antenna.length_mm": length_mm, "antenna.width_mm": width_mm,
                     **ev.metrics.ordered()})
    features = [FeatureSpec("antenna.length_mm", min=140.0, max=160.0),
                FeatureSpec("antenna.width_mm", min=2.0, max=4.0)]
    targets = ["resonance_mhz", "gain_dbi"]
    try:
        surrogate = fit_surrogate(build_dataset(pd.DataFrame(rows), features, targets), seed=0)
        n_query = 10_000
        query = pd.DataFrame({"antenna.length_mm": rng.uniform(140, 160, n_query),
                              "antenna.width_mm": rng.uniform(2, 4, n_query)})
        forward_table(surrogate, query)  # warm-up
        per_query = []
        for _ in range(3 if quick else 5):
            c0 = time.process_time()
            forward_table(surrogate, query)
            per_query.append((time.process_time() - c0) / n_query)
    except Exception as exc:  # the surrogate layer's API is not ours: report, do not guess
        return {"available": False, "reason": f"surrogate fit or prediction failed: {exc!r}"}
    solver_s = statistics.median(times)
    predict_s = statistics.median(per_query)
    return {"speedup": round(solver_s / predict_s, 1), "solver_ms_per_design":
            round(solver_s * 1e3, 3), "surrogate_us_per_design": round(predict_s * 1e6, 3),
            "batch": n_query, "training_designs": n_train, "targets": targets, "target": 1000.0}
