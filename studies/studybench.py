"""Study-layer measurements for ``filamant bench`` (issue 8): dask scaling and a large study.

- ``two_worker_efficiency``: the throughput of a fixed 64-design study of the reference design
  (:func:`studies.bench.reference_design`: printed dipole, 41 unknowns, 101 frequencies) on two
  local workers over twice that on one. A one-worker and a two-worker LocalCluster run side by
  side; each is warmed (imports, the worker's config cache, one untimed study) and the study is
  then run from scratch on each in turn, alternating which goes first, so that the figure is the
  evaluation, scheduling and storing throughput, not process start-up, and the two clocks see
  the same machine (on a shared machine the time per design drifts by 20-30 % within seconds).
- ``large_study``: wall time of a study of the reference design on one worker per core, from
  the plan to the last stored batch (cluster start-up included), with the time per design.

Both run real studies into temporary SQLite stores through the same code as ``filamant run``.
"""

from __future__ import annotations

import statistics
import tempfile
import time
from contextlib import ExitStack
from pathlib import Path
from typing import Any

from studies.api import load_context, open_study
from studies.context import StudyContext
from studies.lease import Lease
from studies.runner import ClusterSettings, default_workers, open_client, run_points
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


def timed_run(ctx: StudyContext, *, warm: bool = True, client: Any = None) -> dict[str, Any]:
    """Run ``ctx`` from scratch; time the evaluation phase (after warm-up if ``warm``).

    ``client`` is an open client to run on (default: a cluster started for this run from
    ``ctx.cluster``). Returns ``{"designs", "wall_s", "eval_s", "workers", "batches"}``:
    ``wall_s`` from opening the store to the last stored batch (cluster start-up included when
    the cluster is started here), ``eval_s`` the run proper.
    """
    t0 = time.perf_counter()
    with Store(ctx.store_url) as store, Lease.acquire(store, ctx.name) as lease:
        open_study(store, ctx, lease, fresh=True)
        todo = store.points(ctx.name, "planned")
        with ExitStack() as stack:
            if client is None:
                client = stack.enter_context(open_client(ctx.cluster))
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

    The ratio of the medians of the timed runs on each cluster: ``clusters`` pairs of a
    one-worker and a two-worker cluster (1 when ``quick``, else 5: a worker process keeps much
    of its speed for its life, and on a shared machine one process can be 20 % slower than the
    next), each pair warmed by one untimed run on each and then timed ``runs`` times on each
    (2 when ``quick``, else 3), alternating which cluster goes first.
    """
    clusters, runs = (1, 2) if quick else (5, 3)
    times: dict[int, list[float]] = {1: [], 2: []}
    with tempfile.TemporaryDirectory(prefix="filamant-bench-") as tmp:
        for c in range(clusters):
            with open_client(ClusterSettings(workers=1)) as one, \
                    open_client(ClusterSettings(workers=2)) as two:
                clients = {1: one, 2: two}
                for i in range(runs + 1):
                    for workers in ((1, 2) if (c + i) % 2 else (2, 1)):
                        d = Path(tmp) / f"c{c}-w{workers}-{i}"
                        d.mkdir()
                        ctx = load_context(reference_study(d, designs, workers))
                        run = timed_run(ctx, client=clients[workers])
                        if i:  # the first round warms the workers and this process
                            times[workers].append(run["eval_s"])
    m1, m2 = statistics.median(times[1]), statistics.median(times[2])
    return {"efficiency": round(m1 / (2.0 * m2), 3), "designs": designs,
            "one_worker_s": round(m1, 3), "two_workers_s": round(m2, 3),
            "runs": len(times[1]), "cores": default_workers(), "target": 0.85}


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
