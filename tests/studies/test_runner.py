"""The dask runner on a real LocalCluster, with made-up worker tasks (the solver path is covered
end to end in ``test_runner_study.py``)."""

from __future__ import annotations

import dask
import pytest

from studies.lease import Lease
from studies.runner import (
    ClusterError,
    ClusterSettings,
    make_jobqueue_cluster,
    open_client,
    run_points,
)
from studies.store import Store
from sweeps.errors import ConfigError
from tests.studies.studies_store_support import (
    broken_task,
    fake_points,
    fake_task,
    poison_task,
    unique_name,
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
    assert stats.batch_sizes[0] == 1  # timing batch
    assert max(stats.batch_sizes) > 1 and max(stats.batch_sizes) <= 8
    assert sum(stats.batch_sizes) == 40
    assert stats.workers == 2
    assert abs(stats.seconds_per_point - 0.02) < 1e-9


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


def test_jobqueue_bad_options():
    with pytest.raises(ConfigError, match="cluster.jobqueue.system"):
        make_jobqueue_cluster({"system": "cron"})
    with pytest.raises(ConfigError, match="cluster.jobqueue.acount: .*did you mean account"):
        make_jobqueue_cluster({"system": "slurm", "cores": 1, "memory": "1GB", "acount": "x"})


def test_scheduler_unreachable():
    with pytest.raises(ConfigError, match="cluster.scheduler: cannot reach"):
        with open_client(ClusterSettings(scheduler="tcp://127.0.0.1:9")):
            pass
