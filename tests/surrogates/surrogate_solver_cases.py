"""Solver studies for the surrogate tests: a printed dipole over length, width, conductivity.

Designs are evaluated by :func:`sweeps.evaluate.evaluate` directly (``surrogates`` does not
depend on ``studies``). The scenario is our own: a 0.4 mm thick printed dipole read at 915 MHz,
swept 600-1300 MHz so the resonance of every length in 120-180 mm lies inside the band (a few
very lossy, narrow traces have no reactance zero at all; the metric is then null).
"""

from __future__ import annotations

import multiprocessing as mp
import os
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pandas as pd

from surrogates.features import FeatureSpec

LENGTH = "antenna.length_mm"
WIDTH = "antenna.width_mm"
SIGMA = "antenna.conductivity_s_per_m"
FEATURES = (
    FeatureSpec(LENGTH, 120.0, 180.0),
    FeatureSpec(WIDTH, 0.5, 4.0),
    FeatureSpec(SIGMA, 1e3, 1e6, log=True),
)
THICKNESS_MM = 0.4
BAND_MHZ = (600.0, 1300.0, 71, 915.0)
METRICS = ("resonance_mhz", "efficiency", "gain_dbi", "s11_db")


def evaluate_point(point: tuple[float, float, float]) -> dict[str, float | None]:
    """Solver metrics of one (length_mm, width_mm, conductivity_s_per_m) dipole."""
    from sweeps.design import Band, Design
    from sweeps.evaluate import evaluate
    from sweeps.geometry import CrossSection

    length_mm, width_mm, sigma = point
    start, stop, n, target = BAND_MHZ
    design = Design(
        "dipole", {"length_m": length_mm * 1e-3},
        CrossSection.trace(width_mm * 1e-3, THICKNESS_MM * 1e-3),
        conductivity_s_per_m=sigma,
    )
    ev = evaluate(design, Band(start * 1e6, stop * 1e6, n, target * 1e6))
    return {m: ev.metrics.values.get(m) for m in METRICS}


def evaluate_points(points: Sequence[tuple[float, float, float]]) -> list[dict]:
    """Evaluate points on up to two spawned worker processes (results in order)."""
    workers = min(2, os.cpu_count() or 1)
    if workers < 2 or len(points) < 8:
        return [evaluate_point(p) for p in points]
    with ProcessPoolExecutor(workers, mp_context=mp.get_context("spawn")) as pool:
        return list(pool.map(evaluate_point, [tuple(map(float, p)) for p in points],
                             chunksize=8))


def unit_to_points(u: np.ndarray) -> np.ndarray:
    """Unit-cube rows -> (length_mm, width_mm, conductivity) rows (log conductivity)."""
    return np.column_stack([f.from_unit(u[:, i]) for i, f in enumerate(FEATURES)])


def study_table(points: np.ndarray, prefix: str = "p") -> pd.DataFrame:
    """A study table (``point_id``, parameter and metric columns) from solver runs."""
    results = evaluate_points([tuple(p) for p in points])
    df = pd.DataFrame({"point_id": [f"{prefix}{i:04d}" for i in range(len(points))],
                       LENGTH: points[:, 0], WIDTH: points[:, 1], SIGMA: points[:, 2]})
    for m in METRICS:
        df[m] = pd.array([r[m] for r in results], dtype="Float64")
    return df
