"""The dask runner on a real LocalCluster, with made-up worker tasks (the solver path is covered
end to end in ``test_runner_study.py``)."""

from __future__ import annotations

import json
from pathlib import Path

import dask
import pytest

from studies.api import load_context
from studies.context import study_from_json
from studies.lease import Lease
from studies.runner import (
    ClusterError,
    ClusterSettings,
    evaluate_batch,
    gc_frozen,
    make_jobqueue_cluster,
    open_client,
    run_points,
    submit_queued_many,
)
from studies.store import Store
from sweeps.errors import ConfigError
from tests.studies.studies_store_support import (
    broken_task,
    fake_points,
    fake_task,
    poison_task,
    stamp_task,
    unique_name,
    write_study,
)


@pytest.fixture
def study(tmp_path):
    name = unique_name("run")
    store = Store(f"sqlite:///{tmp_path / 'run.db'}")
    lease = Lease.acquire(store, name)
    store.create_study(name, {}, "p", {"solver_version": "1"}, fake_points(40),
                       owner=lease.owner)
    yield store, name, lease
    lease.release()
    store.close()


@pytest.fixture(scope="module")
def client():
    with open_client(ClusterSettings(workers=2)) as c:
        yield c


def test_all_points_stored_batches_grow(study, client):
    store, name, lease = study
    stats = run_points(store, name, "{}", store.points(name, "planned"), lease, client,
                       task=fake_task, progress=False, target_batch_s=0.2, max_batch=8)
    assert store.counts(name) == {"planned": 0, "done": 40, "failed": 0, "total": 40}
    assert stats.evaluated == 40 and not stats.interrupted
    assert 1 <= stats.batch_sizes[0] <= 4  # small batches until the first timing
    assert max(stats.batch_sizes) > 1 and max(stats.batch_sizes) <= 8
    assert sum(stats.batch_sizes) == 40
    assert stats.workers == 2
    assert abs(stats.seconds_per_point - 0.02) < 1e-9


def test_batches_cut_short_hand_their_rest_back(study, client):
    """A worker stops a batch at max_batch_s; the points it did not start are queued again and
    every point is stored exactly once (conservation: done == planned, no duplicate refused)."""
    store, name, lease = study
    stats = run_points(store, name, "{}", store.points(name, "planned"), lease, client,
                       task=fake_task, progress=False, target_batch_s=0.2, max_batch_s=0.05)
    assert store.counts(name) == {"planned": 0, "done": 40, "failed": 0, "total": 40}
    assert stats.evaluated == 40 and stats.requeued > 0
    assert sum(stats.batch_sizes) == 40 + stats.requeued
    results = store.results(name)
    assert len({r["point_id"] for r in results}) == 40


def test_evaluate_batch_starts_no_point_after_max_s(tmp_path):
    """The worker side of the cut: the first point always runs, none starts after max_s, and
    what runs is the batch's first points in order, each the same record as uncut."""
    ctx = load_context(write_study(tmp_path))
    items = [(f"p{i}", {"antenna.length_mm": 140.0 + 5 * i}) for i in range(3)]
    full = evaluate_batch(ctx.canonical_json, items)
    assert [r.point_id for r in full] == ["p0", "p1", "p2"] and all(r.ok for r in full)
    cut = evaluate_batch(ctx.canonical_json, items, 0.0)
    assert [r.point_id for r in cut] == ["p0"]
    assert cut[0].metrics == full[0].metrics


def test_queued_batches_start_in_the_order_submitted():
    """submit_queued_many: within one call and across calls, a free worker thread takes the
    oldest queued task (first in, first out, what the batch planner assumes)."""
    with open_client(ClusterSettings(workers=1)) as one:
        first = submit_queued_many(one, [(f"fifo-a{i}", stamp_task, (0.05,)) for i in range(3)])
        second = submit_queued_many(one, [(f"fifo-b{i}", stamp_task, (0.05,)) for i in range(2)])
        starts = one.gather(first + second)
    assert starts == sorted(starts)


def test_cluster_error_stops_without_marking_failed(study, client):
    store, name, lease = study
    with pytest.raises(ClusterError, match="ModuleNotFoundError.*installed"):
        run_points(store, name, "{}", store.points(name, "planned"), lease, client,
                   task=broken_task, progress=False)
    assert store.counts(name)["planned"] == 40  # nothing blamed on the points


@pytest.mark.slow
def test_point_that_kills_workers_is_isolated_and_failed(study):
    """The worker dies on one point: its batch is lost, resubmitted point by point, the poison
    point fails after max_attempts, every other point is done."""
    store, name, lease = study
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
            open_client(ClusterSettings(workers=2)) as c:
        stats = run_points(store, name, "{}", store.points(name, "planned"), lease, c,
                           task=poison_task, progress=False, max_attempts=2,
                           target_batch_s=0.2, max_batch=8)
    counts = store.counts(name)
    assert counts == {"planned": 0, "done": 39, "failed": 1, "total": 40}
    bad = [r for r in store.results(name) if r["status"] == "failed"]
    assert bad[0]["params"] == {"antenna.length_mm": 103.0}
    assert "gave up after 2 attempts: worker died" in bad[0]["reason"]
    assert bad[0]["attempts"] == 2
    assert stats.lost_batches >= 2


def test_jobqueue_cluster_construction_only():
    """A SLURM cluster object and its job script (no batch system here: nothing is submitted)."""
    cluster, jobs = make_jobqueue_cluster({
        "system": "slurm", "queue": "rf", "cores": 4, "memory": "8GB", "walltime": "01:00:00",
        "jobs": 3, "account": "tags"})
    try:
        script = cluster.job_script()
    finally:
        cluster.close()
    assert jobs == 3
    assert "#SBATCH -p rf" in script and "#SBATCH -A tags" in script
    assert "#SBATCH -t 01:00:00" in script
    assert "--nworkers 4" in script and "--nthreads 1" in script  # single-threaded workers


def test_jobqueue_import_keeps_the_ctrl_c_handler():
    """dask-jobqueue sets SIGINT to sys.exit when imported; a jobqueue cluster must not leave
    this process's Ctrl-C raising SystemExit (a fresh interpreter: the import happens once)."""
    import subprocess
    import sys

    # Python's own Ctrl-C handler first: a shell that starts the tests in the background
    # passes SIGINT down ignored, and the child would inherit that
    code = ("import signal\n"
            "signal.signal(signal.SIGINT, signal.default_int_handler)\n"
            "from studies.runner import make_jobqueue_cluster\n"
            "c, _ = make_jobqueue_cluster({'system': 'slurm', 'cores': 1, 'memory': '1GB'})\n"
            "c.close()\n"
            "assert signal.getsignal(signal.SIGINT) is signal.default_int_handler\n")
    root = Path(__file__).resolve().parents[2]
    done = subprocess.run([sys.executable, "-c", code], cwd=root, capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]


def test_jobqueue_bad_options():
    with pytest.raises(ConfigError, match="cluster.jobqueue.system"):
        make_jobqueue_cluster({"system": "cron"})
    with pytest.raises(ConfigError, match="cluster.jobqueue.acount: .*did you mean account"):
        make_jobqueue_cluster({"system": "slurm", "cores": 1, "memory": "1GB", "acount": "x"})


def test_scheduler_unreachable():
    with pytest.raises(ConfigError, match="cluster.scheduler: cannot reach"):
        with open_client(ClusterSettings(scheduler="tcp://127.0.0.1:9"), connect_timeout_s=1):
            pass


EXAMPLES = Path(__file__).resolve().parents[2] / "studies" / "examples"


def test_workers_rebuild_the_study_exactly():
    """Workers receive ``Study.canonical()`` as JSON; the study they rebuild has the same
    canonical form and plan fingerprint (choices, switch keys and all)."""
    ctx = load_context(EXAMPLES / "drawer_study.toml")
    again = study_from_json(ctx.canonical_json)
    assert again.canonical() == ctx.study.canonical()
    assert again.plan_fingerprint() == ctx.plan_fingerprint
    plan = ctx.plan()
    assert len(plan) == 32 and len({p.point_id for p in plan}) == 32
    assert {p.params["antenna.conductivity_s_per_m"] for p in plan} == {3e4, 30.0}
    assert {p.params["switch.closed.r_ohm"] for p in plan} == {10.0, 50.0}


def test_jobqueue_from_a_study_config(tmp_path):
    cfg = write_study(tmp_path, workers=None, extra="""
        [cluster.jobqueue]
        system = "pbs"
        queue = "rf"
        cores = 2
        memory = "4GB"
        walltime = "00:30:00"
        jobs = 2
        options = { resource_spec = "select=1:ncpus=2" }
        """)
    settings = load_context(cfg).cluster
    assert settings.jobqueue["system"] == "pbs" and settings.jobqueue["jobs"] == 2
    cluster, jobs = make_jobqueue_cluster(settings.jobqueue)
    try:
        script = cluster.job_script()
    finally:
        cluster.close()
    assert jobs == 2 and "#PBS -q rf" in script and "#PBS -l select=1:ncpus=2" in script
    assert "#PBS -l walltime=00:30:00" in script and "--nthreads 1" in script


@pytest.mark.slow
def test_example_study_run_status_export(tmp_path, capsys):
    """The shipped example study goes through run, status and both exports."""
    import shutil

    from studies.cli import main

    cfg = tmp_path / "drawer_study.toml"
    shutil.copy(EXAMPLES / "drawer_study.toml", cfg)
    assert main(["run", str(cfg), "--no-progress"]) == 0
    assert main(["status", str(cfg), "--json"]) == 0
    capsys.readouterr()
    assert main(["status", str(cfg), "--json"]) == 0
    st = json.loads(capsys.readouterr().out)
    assert st["done"] + st["failed"] == st["total"] == 32 and st["planned"] == 0
    assert main(["export", str(cfg), "--table", str(tmp_path / "d.parquet"),
                 "--touchstone", str(tmp_path / "ts")]) == 0
    assert len(list((tmp_path / "ts").glob("*.s1p"))) == st["done"]


def test_gc_frozen_skips_older_objects_and_hands_them_back():
    """Python's gc.freeze semantics (library reference, gc module): a cycle made before the
    block survives full collections inside it, one made inside does not, and the older one
    is collected after the block."""
    import gc
    import weakref

    class Node:
        pass

    def cycle() -> weakref.ref:
        a, b = Node(), Node()
        a.other, b.other = b, a
        return weakref.ref(a)

    if gc.get_freeze_count():
        pytest.skip("objects were frozen before this test")
    old = cycle()
    with gc_frozen():
        assert gc.get_freeze_count() > 0
        new = cycle()
        gc.collect()
        assert old() is not None and new() is None
    assert gc.get_freeze_count() == 0
    gc.collect()
    assert old() is None
