"""The issue's "done when": an NSGA-II study of 60 trials killed with SIGKILL mid-run and
resumed holds 60 complete trials, no point twice, and its exported front is the non-dominated
feasible set of its trials — on the default SQLite store and on a real PostgreSQL server
(``FILAMANT_TEST_POSTGRES_URL``; fails rather than skips when ``FILAMANT_REQUIRE_POSTGRES=1``).

The front is recomputed by brute force from the trials as optuna stores them
(``test_optimize_support.brute_force_front``), not by the code that exports it. Ctrl-C (SIGINT to
the process group) stores what has finished, fails and requeues the trials in flight at once,
and releases the lease.
"""

from __future__ import annotations

import signal
import time
from pathlib import Path

import optuna
import pandas as pd
import pytest

from studies.api import load_context, run_study
from studies.cli import main
from studies.lease import lease_info
from studies.store import Store
from tests.studies.run_process_support import killpg, run_output, start_run, wait_done
from tests.studies.studies_store_support import postgres_url, unique_name
from tests.studies.test_optimize_support import (
    TO_TARGET,
    TWO_OBJECTIVES,
    TWO_SPACE,
    brute_force_front,
    check_trials_match_points,
    optuna_trials,
    stored_points,
    write_optimize_study,
)

C = optuna.trial.TrialState
pytestmark = pytest.mark.slow


def _kill_mid_run(cfg: Path, at_least: int, timeout: float = 120.0) -> int:
    """Start ``filamant run`` in its own process group and SIGKILL the group (client and local
    workers) once ``at_least`` points are done and a trial is in flight; returns the points
    done then."""
    ctx = load_context(cfg)
    proc = start_run(cfg)
    storage = None
    try:
        done, in_flight, t0 = 0, 0, time.time()
        while done < at_least or not in_flight:
            assert proc.poll() is None, f"the run ended early: {run_output(cfg)[1]}"
            assert time.time() - t0 < timeout, f"fewer than {at_least} points done in time"
            try:
                with Store(ctx.store_url, create=False) as store:
                    done = store.counts(ctx.name)["done"]
                if done >= at_least:
                    storage = storage or optuna.storages.RDBStorage(ctx.store_url,
                                                                    skip_table_creation=True)
                    sid = storage.get_study_id_from_name(ctx.name)
                    in_flight = len(storage.get_all_trials(sid, states=(C.RUNNING,)))
            except Exception:  # noqa: BLE001 - the store or its tables are not there yet
                pass
            if not in_flight:
                time.sleep(0.01)
        killpg(proc, signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        killpg(proc, signal.SIGKILL)
        if storage is not None:
            storage.engine.dispose()
    assert proc.returncode == -signal.SIGKILL
    return done


def _killed_and_resumed(cfg: Path, tmp: Path, trials: int) -> None:
    name = load_context(cfg).name
    _kill_mid_run(cfg, at_least=15)
    before = optuna_trials(cfg)
    with Store(load_context(cfg).store_url, create=False) as store:
        assert lease_info(store, name) is not None  # left behind by the killed client
    complete_at_kill = sum(t.state == C.COMPLETE for t in before)
    assert complete_at_kill < trials and any(t.state == C.RUNNING for t in before)

    resumed = run_study(cfg, progress=False)  # takes over the dead client's lease at once
    assert not resumed.created and not resumed.interrupted
    assert resumed.trials["complete"] == trials and resumed.trials["stopped"] is None

    after = optuna_trials(cfg)
    states = [t.state for t in after]
    assert states.count(C.COMPLETE) == trials
    assert C.RUNNING not in states and C.WAITING not in states
    for t in after[:len(before)]:  # what was in flight at the kill failed and was asked again
        if before[t.number].state == C.RUNNING:
            assert t.state == C.FAIL and t.user_attrs["interrupted"] is True
    points = stored_points(cfg)
    assert all(p["status"] != "planned" for p in points.values())
    check_trials_match_points(cfg, ["modulation_depth", "efficiency"])

    front = tmp / "front.csv"
    assert main(["export", str(cfg), "--pareto", str(front)]) == 0
    got = pd.read_csv(front)
    expected = brute_force_front(after, [True, True])
    assert len(got) == len(expected) > 0 and set(got["point_id"]) == expected


def test_nsga2_killed_and_resumed_on_sqlite(tmp_path):
    cfg = write_optimize_study(tmp_path, TWO_OBJECTIVES.format(trials=60, algorithm="nsga2"),
                               space=TWO_SPACE, workers=2)
    _killed_and_resumed(cfg, tmp_path, 60)


@pytest.mark.postgres
def test_nsga2_killed_and_resumed_on_postgres(tmp_path):
    # 40 trials: the same path as on SQLite, a little cheaper
    cfg = write_optimize_study(tmp_path, TWO_OBJECTIVES.format(trials=40, algorithm="nsga2"),
                               space=TWO_SPACE, workers=2, name=unique_name("opt"),
                               store=postgres_url())
    _killed_and_resumed(cfg, tmp_path, 40)


def test_ctrl_c_stores_and_requeues(tmp_path):
    # 41 frequencies: slower solves, so the run is surely still going when Ctrl-C comes
    cfg = write_optimize_study(tmp_path, TWO_OBJECTIVES.format(trials=30, algorithm="tpe"),
                               space=TWO_SPACE, workers=2)
    cfg.write_text(cfg.read_text().replace("points = 11", "points = 41"))
    ctx = load_context(cfg)
    proc = start_run(cfg)
    try:
        wait_done(cfg, 3, proc)
        killpg(proc, signal.SIGINT)  # Ctrl-C reaches the whole foreground group
        proc.wait(timeout=120)
    finally:
        killpg(proc, signal.SIGKILL)
    out, err = run_output(cfg)
    assert proc.returncode == 130, err
    assert "interrupted" in out
    with Store(ctx.store_url, create=False) as store:
        assert lease_info(store, ctx.name) is None  # released
    trials = optuna_trials(cfg)
    assert C.RUNNING not in {t.state for t in trials}  # failed and requeued at once
    assert sum(t.state == C.COMPLETE for t in trials) < 30
    resumed = run_study(cfg, progress=False)
    assert resumed.trials["complete"] == 30
    assert C.WAITING not in {t.state for t in optuna_trials(cfg)}
    check_trials_match_points(cfg, ["modulation_depth", "efficiency"])


def test_a_design_that_kills_its_worker_is_given_up_not_retried_for_ever(tmp_path):
    """``poison_task`` makes the worker process exit on the 103 mm design (as a segfault or
    the out-of-memory killer would); the nanny replaces the worker, the design is tried
    ``max_attempts`` times, then its point is failed and its trial pruned with the reason."""
    import dask

    from studies.api import run_context
    from tests.studies.studies_store_support import poison_task

    cfg = write_optimize_study(tmp_path, TO_TARGET.format(trials=3),
                               space="length_mm = [103.0, 104.0, 105.0]", workers=2)
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        summary = run_context(load_context(cfg), task=poison_task, progress=False,
                              max_attempts=2)
    assert summary.trials["complete"] == 3 and summary.trials["stopped"] is None
    points = {p["params"]["antenna.length_mm"]: p for p in stored_points(cfg).values()}
    bad = points[103.0]
    assert bad["status"] == "failed" and bad["attempts"] == 2
    assert bad["reason"].startswith("gave up after 2 attempts: worker died")
    poisoned = [t for t in optuna_trials(cfg) if t.params["antenna.length_mm"] == 103.0]
    assert poisoned and all(t.state == C.PRUNED and t.user_attrs["failed_solve"]
                            and t.user_attrs["reason"] == bad["reason"] for t in poisoned)
