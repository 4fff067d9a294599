"""A study on a real dask cluster started with the dask command line on loopback: one
scheduler and two single-threaded workers; one worker is killed with SIGKILL mid-run and the
study still completes with nothing lost (its nanny replaces it, dask re-runs its batch).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from studies.api import load_context, table_of
from studies.context import point_evaluator
from studies.store import Store
from tests.studies.run_process_support import project_env
from tests.studies.studies_store_support import write_study

DASK = str(Path(sys.executable).parent / "dask")
pytestmark = [pytest.mark.cluster, pytest.mark.slow]


def _env() -> dict[str, str]:
    # one task per worker thread, so a dead worker takes only the batch it was running
    return project_env(DASK_DISTRIBUTED__SCHEDULER__WORKER_SATURATION="1.0")


def _spawn(args: list[str], log: Path) -> subprocess.Popen:
    with open(log, "w") as fh:
        return subprocess.Popen(args, env=_env(), stdout=fh, stderr=subprocess.STDOUT,
                                start_new_session=True)


def _stop(proc: subprocess.Popen) -> None:
    for sig in (signal.SIGTERM, signal.SIGKILL):
        if proc.poll() is not None:
            return
        try:
            os.killpg(proc.pid, sig)
            proc.wait(timeout=15)
        except (ProcessLookupError, subprocess.TimeoutExpired):
            pass


@pytest.fixture
def cluster(tmp_path):
    """``(address, client)`` of a scheduler and two workers started with ``dask ...``."""
    from distributed import Client

    sfile = tmp_path / "scheduler.json"
    procs = [_spawn([DASK, "scheduler", "--host", "127.0.0.1", "--port", "0",
                     "--no-dashboard", "--scheduler-file", str(sfile)], tmp_path / "sch.log")]
    try:
        t0 = time.time()
        while not sfile.exists() and time.time() - t0 < 60:
            time.sleep(0.1)
        for i in range(2):
            procs.append(_spawn([DASK, "worker", "--scheduler-file", str(sfile), "--nthreads",
                                 "1", "--host", "127.0.0.1", "--no-dashboard", "--name",
                                 f"w{i}"], tmp_path / f"w{i}.log"))
        client = Client(scheduler_file=str(sfile), timeout="30s")
        client.wait_for_workers(2, timeout=60)
        yield json.loads(sfile.read_text())["address"], client
        client.close()
    finally:
        for p in reversed(procs):
            _stop(p)


def test_worker_killed_mid_run_nothing_lost(tmp_path, cluster):
    address, client = cluster
    cfg = write_study(tmp_path, points=160, workers=None, extra=f'scheduler = "{address}"\n')
    cfg.write_text(cfg.read_text().replace("points = 11", "points = 41"))  # slower points
    with open(tmp_path / "run.err", "w") as err:
        run = subprocess.Popen([sys.executable, "-m", "studies.cli", "run", str(cfg),
                                "--no-progress", "--json"], env=_env(), stdout=subprocess.PIPE,
                               stderr=err, text=True)
    try:
        db = tmp_path / "drawer.db"
        t0 = time.time()
        done, seen = 0, 0
        # kill once both workers have stored results: a run of a few large batches can otherwise
        # reach 20 points on one worker while the other's first batch still runs
        while (done < 20 or seen < 2) and time.time() - t0 < 120:
            assert run.poll() is None, (tmp_path / "run.err").read_text()
            if db.exists():
                try:
                    with Store(f"sqlite:///{db}", create=False) as store:
                        done = store.counts("drawer")["done"]
                        with store.read() as conn:
                            seen = len(conn.exec_driver_sql(
                                "SELECT DISTINCT worker FROM filamant_results").all())
                except Exception:  # noqa: BLE001 - tables not there yet
                    pass
            time.sleep(0.05)
        pids_before = client.run(os.getpid)  # {worker address: pid}
        victim = sorted(pids_before.values())[0]
        os.kill(victim, signal.SIGKILL)  # the worker process; its nanny starts a new one
        out, _ = run.communicate(timeout=300)
    finally:
        if run.poll() is None:
            run.kill()
            run.communicate()
    assert run.returncode == 0, (tmp_path / "run.err").read_text()
    summary = json.loads(out)
    assert done < 160  # the kill happened mid-run
    assert (summary["total"], summary["done"], summary["failed"]) == (160, 160, 0)

    ctx = load_context(cfg)
    df = table_of(ctx)
    assert len(df) == 160 and df["point_id"].is_unique and (df["status"] == "done").all()
    with Store(ctx.store_url, create=False) as store:
        stored = {pid: z for pid, _, z, _ in store.responses(ctx.name)}
        with store.read() as conn:
            hosts = {r[0] for r in conn.exec_driver_sql(
                "SELECT DISTINCT worker FROM filamant_results")}
    assert len(stored) == 160
    assert len(hosts) >= 2
    client.wait_for_workers(2, timeout=60)  # the killed worker was replaced
    pids_after = set(client.run(os.getpid).values())
    assert victim not in pids_after and len(pids_after) == 2
    # a few points re-evaluated here give bit-identical results
    ev = point_evaluator(ctx.canonical_json)
    for _, row in df.sample(3, random_state=1).iterrows():
        rec = ev({n: row[n] for n in ctx.space.names})
        np.testing.assert_array_equal(rec.z, stored[row["point_id"]])
        assert rec.metrics["resonance_mhz"] == row["resonance_mhz"] or (
            rec.metrics["resonance_mhz"] is None and np.isnan(row["resonance_mhz"]))
