"""Surrogate-layer measurement for ``filamant bench`` (issue 8): ``surrogate_speedup``.

Solver time per design (the reference design of :func:`studies.bench.reference_design`: printed
dipole, 41 unknowns, 101 frequencies, all metrics; median of repeats) over the surrogate's
prediction time per design in one batch (every target's mean and standard deviation for 1e5
designs; median of repeats). The surrogate is a Gaussian process per target fitted to 128
(quick: 32) solver evaluations of the reference design over its length, width and
conductivity, as ``filamant fit`` would fit it. A GP's prediction costs O(n) per design for the
mean and O(n^2) for the standard deviation (n training points). Target: >= 1000.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

__all__ = ["surrogate_speedup", "register"]

_TARGETS = ("resonance_mhz", "efficiency", "s11_db")


def surrogate_speedup(quick: bool = False, batch: int = 100_000) -> dict[str, object]:
    """Solver seconds per design over surrogate seconds per design (batched prediction)."""
    from dataclasses import replace

    from scipy.stats import qmc

    from studies.bench import median_time, reference_design
    from surrogates import FeatureSpec, build_dataset, fit_surrogate
    from sweeps.evaluate import evaluate
    from sweeps.geometry import CrossSection

    design, band = reference_design()
    solver_s = median_time(lambda: evaluate(design, band), repeats=3 if quick else 7)
    feats = (FeatureSpec("antenna.length_mm", 140.0, 160.0),
             FeatureSpec("antenna.width_mm", 2.0, 4.0),
             FeatureSpec("antenna.conductivity_s_per_m", 1e4, 1e5, log=True))
    u = qmc.Sobol(3, scramble=True, seed=0).random_base2(5 if quick else 7)
    rows: list[dict[str, Any]] = []
    for x in u:
        p = {f.name: float(f.from_unit(np.array(v))) for f, v in zip(feats, x, strict=True)}
        d = replace(design, dimensions={"length_m": p["antenna.length_mm"] * 1e-3},
                    section=CrossSection.trace(p["antenna.width_mm"] * 1e-3, 0.4e-3),
                    conductivity_s_per_m=p["antenna.conductivity_s_per_m"])
        p.update({m: evaluate(d, band).metrics.values.get(m) for m in _TARGETS})
        rows.append(p)
    sur = fit_surrogate(build_dataset(pd.DataFrame(rows), feats, list(_TARGETS)), "gp",
                        params={"gp": {"n_restarts_optimizer": 1}})
    U = np.random.default_rng(0).random((batch, sur.n_columns))
    pred_s = median_time(lambda: sur.predict_unit(U), repeats=2 if quick else 5)
    per = pred_s / batch
    return {"speedup": round(solver_s / per, 1), "solver_ms_per_design": round(solver_s * 1e3, 3),
            "surrogate_us_per_design": round(per * 1e6, 3), "batch": batch,
            "targets": list(_TARGETS), "training_points": len(rows), "model": "gp",
            "target": 1000.0}


def register(extra: dict[str, Any]) -> None:
    """Add the measurement to ``studies.bench``'s registry (``_EXTRA``)."""
    extra["surrogate_speedup"] = surrogate_speedup
