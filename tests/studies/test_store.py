"""The study store and its run lease, on a real SQLite file (and PostgreSQL when configured).

Checks are of the store's own contract: one transaction per batch (all or nothing), exact
round trips of the stored arrays, refusal of changed plans, and the lease's mutual exclusion.
"""

from __future__ import annotations

import multiprocessing as mp
import socket
import subprocess
import sys
import time

import numpy as np
import pytest
from sqlalchemy import inspect, select, text, update

from studies.lease import Lease, lease_info, pid_alive, process_start
from studies.store import METRIC_COLUMNS, Store, lease_table
from sweeps.errors import StoreError
from tests.studies.studies_store_support import fake_points, fake_record, postgres_url, unique_name

CONFIG = {"antenna": {"length_mm": 150, "width_mm": 2}, "sampler": {"points": 4}}
SOLVER = {"kernel": "exact", "solver_version": "1"}


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def url(request, tmp_path):
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'store.db'}"
    return postgres_url()


@pytest.fixture
def study(url):
    """(store, name, lease) of a fresh study with 4 planned points."""
    name = unique_name("store")
    store = Store(url)
    lease = Lease.acquire(store, name)
    store.create_study(name, CONFIG, "plan-a", SOLVER, fake_points(4), owner=lease.owner)
    yield store, name, lease
    lease.release()
    store.close()


def test_plan_stored_up_front(study):
    store, name, _ = study
    assert store.counts(name) == {"planned": 4, "done": 0, "failed": 0, "total": 4}
    pts = store.points(name, "planned")
    assert [p.point_id for p in pts] == [p.point_id for p in fake_points(4)]
    assert pts[2].params == {"antenna.length_mm": 102.0}
    rec = store.study(name)
    assert rec.config == CONFIG and rec.plan_fingerprint == "plan-a" and rec.solver == SOLVER


def test_batch_round_trip_exact(study):
    store, name, lease = study
    pts = fake_points(4)
    recs = [fake_record(pts[0]), fake_record(pts[1]), fake_record(pts[2], ok=False)]
    store.write_batch(name, recs, owner=lease.owner)
    assert store.counts(name) == {"planned": 1, "done": 2, "failed": 1, "total": 4}
    rows = {r["point_id"]: r for r in store.results(name)}
    r1 = rows[pts[1].point_id]
    for m in METRIC_COLUMNS[:-1]:
        assert r1[m] == recs[1].metrics[m]
    assert r1[METRIC_COLUMNS[-1]] is None and r1["reasons"] == {METRIC_COLUMNS[-1]: "made up"}
    assert rows[pts[2].point_id]["status"] == "failed"
    assert rows[pts[2].point_id]["reason"] == "SolverError: made up for the test"
    assert rows[pts[2].point_id]["attempts"] == 1
    got = {pid: (f, z, z0) for pid, f, z, z0 in store.responses(name)}
    assert set(got) == {pts[0].point_id, pts[1].point_id}
    f, z, z0 = got[pts[1].point_id]
    np.testing.assert_array_equal(f, recs[1].f_hz)
    np.testing.assert_array_equal(z, recs[1].z)
    assert z.dtype == np.complex128 and z.shape == (5, 1, 1)
    np.testing.assert_array_equal(z0, [50.0])


def test_batch_is_all_or_nothing(study):
    store, name, lease = study
    pts = fake_points(4)
    store.write_batch(name, [fake_record(pts[0])], owner=lease.owner)
    before = store.results(name)
    # a batch holding one new and one already stored point is refused as a whole
    with pytest.raises(StoreError, match="duplicate|twice"):
        store.write_batch(name, [fake_record(pts[1]), fake_record(pts[0])], owner=lease.owner)
    assert store.results(name) == before
    assert store.counts(name)["done"] == 1


def test_write_needs_the_lease(study):
    store, name, _ = study
    with pytest.raises(StoreError, match="no longer holds the run lease"):
        store.write_batch(name, [fake_record(fake_points(1)[0])], owner="not-me")
    assert store.counts(name)["done"] == 0


def test_changed_plan_refused_naming_keys(study):
    store, name, _ = study
    assert store.check_compatible(name, CONFIG, "plan-a", SOLVER) is not None
    new = {"antenna": {"length_mm": 150, "width_mm": 3}, "sampler": {"points": 4}}
    with pytest.raises(StoreError, match=r"antenna.width_mm: 2 -> 3.*--fresh"):
        store.check_compatible(name, new, "plan-b", SOLVER)
    with pytest.raises(StoreError, match=r"solver.solver_version: \"1\" -> \"2\""):
        store.check_compatible(name, CONFIG, "plan-a", {**SOLVER, "solver_version": "2"})
    assert store.check_compatible(unique_name(), CONFIG, "x", SOLVER) is None


def test_drop_study_removes_only_that_study(study, url):
    store, name, lease = study
    other = unique_name("other")
    with Lease.acquire(store, other) as l2:
        store.create_study(other, CONFIG, "plan-a", SOLVER, fake_points(2), owner=l2.owner)
        store.write_batch(other, [fake_record(fake_points(1)[0])], owner=l2.owner)
    store.write_batch(name, [fake_record(fake_points(1)[0])], owner=lease.owner)
    assert store.drop_study(name, owner=lease.owner) == 4
    assert store.study(name) is None and store.counts(name)["total"] == 0
    assert list(store.responses(name)) == []
    assert store.counts(other) == {"planned": 1, "done": 1, "failed": 0, "total": 2}


def test_lost_attempts_capped(study):
    store, name, lease = study
    ids = [p.point_id for p in fake_points(2)]
    assert store.record_lost_attempt(name, ids, "worker died", owner=lease.owner,
                                     max_attempts=2) == []
    assert store.record_lost_attempt(name, ids[:1], "worker died", owner=lease.owner,
                                     max_attempts=2) == ids[:1]
    rows = {r["point_id"]: r for r in store.results(name)}
    assert rows[ids[0]]["status"] == "failed"
    assert "gave up after 2 attempts: worker died" in rows[ids[0]]["reason"]
    assert rows[ids[1]]["status"] == "planned" and rows[ids[1]]["attempts"] == 1


def test_missing_store_not_created(tmp_path):
    path = tmp_path / "nothing.db"
    with pytest.raises(StoreError, match="no store yet"):
        Store(f"sqlite:///{path}", create=False)
    assert not path.exists()


def test_bad_url():
    with pytest.raises(StoreError, match="study.store"):
        Store("not a url at all")


def test_sqlite_pragmas(tmp_path):
    store = Store(f"sqlite:///{tmp_path / 's.db'}")
    with store.read() as conn:
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
    store.close()


def test_new_metric_columns_added(tmp_path):
    """A store made before a metric existed gains its column on open (data kept)."""
    url = f"sqlite:///{tmp_path / 'old.db'}"
    store = Store(url)
    victim = METRIC_COLUMNS[3]
    with store.write() as conn:
        conn.execute(text(f'ALTER TABLE filamant_results DROP COLUMN "{victim}"'))
    store.close()
    assert victim in {c["name"] for c in inspect(Store(url).engine)
                          .get_columns("filamant_results")}


# -- lease ---------------------------------------------------------------------------------

def test_second_lease_refused_naming_holder(url):
    store = Store(url)
    name = unique_name("lease")
    with Lease.acquire(store, name):
        with pytest.raises(StoreError) as ei:
            Lease.acquire(store, name)
        msg = str(ei.value)
        assert "being run right now" in msg and socket.gethostname() in msg
        info = lease_info(store, name)
        assert info is not None and not info.stale
    assert lease_info(store, name) is None  # released on exit
    Lease.acquire(store, name).release()
    store.close()


def test_stale_heartbeat_taken_over_and_fenced(url):
    store = Store(url)
    name = unique_name("stale")
    old = Lease.acquire(store, name)
    store.create_study(name, CONFIG, "p", SOLVER, fake_points(1), owner=old.owner)
    with store.write() as conn:  # pretend the holder stopped beating 2 minutes ago
        conn.execute(update(lease_table).where(lease_table.c.study == name)
                     .values(heartbeat_at=time.time() - 120))
    new = Lease.acquire(store, name, stale_after_s=60)
    assert new.owner != old.owner
    # the old holder can no longer write, its heartbeat notices
    with pytest.raises(StoreError, match="no longer holds"):
        store.write_batch(name, [fake_record(fake_points(1)[0])], owner=old.owner)
    assert not old.beat() and old.lost.is_set()
    new.release()
    store.close()


def test_dead_process_lease_taken_over(url):
    """A client killed with SIGKILL on this host leaves a lease whose pid is gone."""
    store = Store(url)
    name = unique_name("dead")
    proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    start = process_start(proc.pid)
    assert pid_alive(proc.pid, start)
    now = time.time()
    with store.write() as conn:
        conn.execute(lease_table.insert().values(
            study=name, owner="dead-owner", host=socket.gethostname(), pid=proc.pid,
            proc_start=start, command="run", started_at=now, heartbeat_at=now))
    with pytest.raises(StoreError, match="being run"):
        Lease.acquire(store, name)  # alive: refused
    proc.kill()
    proc.wait()
    assert not pid_alive(proc.pid, start)
    lease = Lease.acquire(store, name)  # fresh heartbeat, but the process is gone
    assert lease_info(store, name).owner == lease.owner
    lease.release()
    store.close()


def test_reused_pid_is_not_alive():
    import os

    assert pid_alive(os.getpid(), process_start(os.getpid()))
    assert not pid_alive(os.getpid(), "1")  # same pid, different start time


def test_heartbeat_thread_beats(url):
    store = Store(url)
    name = unique_name("beat")
    with Lease.acquire(store, name, heartbeat_s=0.05):
        t0 = lease_info(store, name).heartbeat_at
        time.sleep(0.4)
        assert lease_info(store, name).heartbeat_at > t0
    store.close()


def _race(url: str, name: str, start: float, q, done) -> None:
    store = Store(url)
    while time.time() < start:
        time.sleep(0.001)
    try:
        lease = Lease.acquire(store, name)
    except StoreError:
        q.put("refused")
        return
    q.put("won")
    # hold the lease (stay alive) until every contender has tried: a winner that exited would
    # leave a dead owner, whose lease a later contender may rightly take over
    done.wait(timeout=120)
    lease.release()


@pytest.mark.slow
def test_lease_race_has_one_winner(url):
    """Four processes ask for the same lease at the same instant: exactly one gets it."""
    Store(url).close()  # tables exist before the race
    name = unique_name("race")
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    done = ctx.Event()
    start = time.time() + 1.5
    procs = [ctx.Process(target=_race, args=(url, name, start, q, done)) for _ in range(4)]
    for p in procs:
        p.start()
    try:
        results = sorted(q.get(timeout=120) for _ in procs)
        with Store(url) as store, store.read() as conn:
            held = conn.execute(select(lease_table).where(lease_table.c.study == name)).all()
    finally:
        done.set()
        for p in procs:
            p.join(timeout=30)
    assert results == ["refused"] * 3 + ["won"]
    assert len(held) == 1


@pytest.mark.parametrize("array", [
    np.linspace(8e8, 1e9, 101), np.ones((101, 1, 1), complex) * (73 + 42j), np.array([50.0]),
    np.zeros(0), np.arange(6, dtype=np.int32).reshape(2, 3).T, np.array([[1.5 - 2j]]),
])
def test_stored_array_bytes_are_numpys_own_npy_format(array):
    """The store's array encoding (built-once headers) gives exactly the bytes of ``np.save``,
    so any numpy can read a store (reference: numpy's own .npy writer, NEP 1)."""
    import io

    from studies.store import decode_array, encode_array

    buf = io.BytesIO()
    np.save(buf, np.ascontiguousarray(array), allow_pickle=False)
    assert encode_array(array) == buf.getvalue()
    assert encode_array(array) == buf.getvalue()  # the cached header again
    back = decode_array(encode_array(array))
    assert back.dtype == array.dtype and np.array_equal(back, array)


def test_object_arrays_are_refused_not_pickled():
    from studies.store import encode_array

    with pytest.raises(ValueError, match="allow_pickle"):
        encode_array(np.array([object()]))
