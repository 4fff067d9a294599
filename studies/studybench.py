"""Study-layer measurements for ``filamant bench`` (issue 8): dask scaling and a large study.

- ``two_worker_efficiency``: the throughput of a fixed 64-design study of the reference design
  (:func:`studies.bench.reference_design`: printed dipole, 41 unknowns, 101 frequencies) on two
  local workers over twice that on one. Each run starts its own LocalCluster and warms its
  workers (imports, the worker's config cache) before the clock starts, so the figure is the
  evaluation, scheduling and storing throughput, not process start-up.
- ``large_study``: wall time of a study of the reference design on one worker per core, from
  the plan to the last stored batch (cluster start-up included), with the time per design.

Both run real studies into temporary SQLite stores through the same code as ``filamant run``.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path
from typing import Any

from studies.api import load_context, open_study
from studies.context import StudyContext
from studies.lease import Lease
from studies.runner import default_workers, open_client, run_points
from studies.store import Store

__all__ = ["reference_study", "timed_run", "two_worker_efficiency", "large_study", "register"]

_STUDY = """\
# the benchmark reference design (studies.bench.reference_design) swept over its length
[study]
name = "bench"

[antenna]
shape = "dipole"
length_mm = 150
width_mm = 3.0
thickness_mm = 0.4
conductivity_s_per_m = 3e4
segments = 40

[feed]
gap_mm = 1.0

[band]
start_mhz = 800
stop_mhz = 1000
points = 101
target_mhz = 915

[space]
length_mm = {{min = 140, max = 160}}

[sampler]
method = "sobol"
points = {points}
seed = 0

[cluster]
workers = {workers}
"""


def reference_study(directory: Path, points: int, workers: int) -> Path:
    """Write the benchmark study (``points`` Sobol designs, ``workers`` local workers)."""
    path = Path(directory) / "bench.toml"
    path.write_text(_STUDY.format(points=points, workers=workers))
    return path


def _warm(study_json: str) -> int:
    """Worker-side warm-up: import everything and build the worker's evaluator."""
    import os

    from studies.runner import _evaluator

    _evaluator(study_json)
    return os.getpid()


def timed_run(ctx: StudyContext, *, warm: bool = True) -> dict[str, Any]:
    """Run ``ctx`` from scratch; time the evaluation phase (after warm-up if ``warm``).

    Returns ``{"designs", "wall_s", "eval_s", "workers", "batches"}``: ``wall_s`` from opening
    the store to the last stored batch (cluster start-up included), ``eval_s`` the run proper.
    """
    t0 = time.perf_counter()
    with Store(ctx.store_url) as store, Lease.acquire(store, ctx.name) as lease:
        open_study(store, ctx, lease, fresh=True)
        todo = store.points(ctx.name, "planned")
        with open_client(ctx.cluster) as client:
            if warm:
                client.run(_warm, ctx.canonical_json)
            stats = run_points(store, ctx.name, ctx.canonical_json, todo, lease, client,
                               progress=False)
        wall = time.perf_counter() - t0
        done = store.counts(ctx.name)["done"]
    if done != len(todo):
        raise RuntimeError(f"benchmark study: {done} of {len(todo)} designs done")
    return {"designs": len(todo), "wall_s": wall, "eval_s": stats.elapsed_s,
            "workers": stats.workers, "batches": stats.batches}


def two_worker_efficiency(quick: bool = False, designs: int = 64) -> dict[str, object]:
    """Throughput on two workers over twice the throughput on one (target >= 0.85).

    The median of ``1`` (quick) or ``5`` repeats of each configuration, taken alternately.
    """
    repeats = 1 if quick else 5
    t1: list[float] = []
    t2: list[float] = []
    with tempfile.TemporaryDirectory(prefix="filamant-bench-") as tmp:
        for i in range(repeats):
            for workers, sink in ((1, t1), (2, t2)):
                d = Path(tmp) / f"w{workers}-{i}"
                d.mkdir()
                ctx = load_context(reference_study(d, designs, workers))
                sink.append(timed_run(ctx)["eval_s"])
    m1, m2 = sorted(t1)[len(t1) // 2], sorted(t2)[len(t2) // 2]
    return {"efficiency": round(m1 / (2.0 * m2), 3), "designs": designs,
            "one_worker_s": round(m1, 3), "two_workers_s": round(m2, 3),
            "cores": default_workers(), "target": 0.85}


def large_study(quick: bool = False, designs: int = 10_000) -> dict[str, object]:
    """Wall time of a ``designs``-design study (1,000 when ``quick``) on one worker per core."""
    n = 1_000 if quick else designs
    with tempfile.TemporaryDirectory(prefix="filamant-bench-") as tmp:
        ctx = load_context(reference_study(Path(tmp), n, default_workers()))
        r = timed_run(ctx, warm=False)
    return {"designs": n, "wall_s": round(r["wall_s"], 2),
            "ms_per_design": round(1e3 * r["wall_s"] / n, 3), "workers": r["workers"],
            "batches": r["batches"],
            "projected_10000_s": round(r["wall_s"] * 10_000 / n, 1),
            "target_10000_s": 300.0}


def register(extra: dict[str, Any]) -> None:
    """Add the measurements to ``studies.bench``'s registry (``_EXTRA``)."""
    extra["two_worker_efficiency"] = two_worker_efficiency
    extra["large_study"] = large_study
