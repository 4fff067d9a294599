"""Kill the client mid-run (SIGKILL, and Ctrl-C) and resume: nothing lost, nothing repeated.

The issue's "done when": a 200-point Sobol study killed with SIGKILL and resumed matches an
uninterrupted run exactly (same point ids, bit-identical metrics and stored responses).
The reference is an uninterrupted run of the same config into another store; the evaluation is
deterministic (single-threaded workers), so equality is exact, not within a tolerance.
"""

from __future__ import annotations

import signal
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from studies.api import load_context, run_study, table_of
from studies.cli import main
from studies.lease import lease_info
from studies.store import Store
from tests.studies.run_process_support import killpg, run_output, start_run, wait_done
from tests.studies.studies_store_support import write_study

pytestmark = pytest.mark.slow


def _responses(cfg: Path) -> dict[str, tuple]:
    ctx = load_context(cfg)
    with Store(ctx.store_url, create=False) as store:
        return {pid: (f, z, z0) for pid, f, z, z0 in store.responses(ctx.name)}


def _assert_identical(a: Path, b: Path) -> None:
    ta = table_of(load_context(a)).sort_values("point_id").reset_index(drop=True)
    tb = table_of(load_context(b)).sort_values("point_id").reset_index(drop=True)
    pd.testing.assert_frame_equal(ta, tb, check_exact=True)
    ra, rb = _responses(a), _responses(b)
    assert ra.keys() == rb.keys()
    for pid in ra:
        for x, y in zip(ra[pid], rb[pid], strict=True):
            np.testing.assert_array_equal(x, y)


def test_sigkill_and_resume_matches_uninterrupted(tmp_path):
    (tmp_path / "killed").mkdir()
    (tmp_path / "ref").mkdir()
    cfg = write_study(tmp_path / "killed", points=200, workers=2)
    ref = write_study(tmp_path / "ref", points=200, workers=2)

    proc = start_run(cfg)
    try:
        done_at_kill = wait_done(cfg, 30, proc)
        killpg(proc, signal.SIGKILL)  # the client and its local workers, without warning
        proc.wait(timeout=30)
    finally:
        killpg(proc, signal.SIGKILL)
    assert proc.returncode == -signal.SIGKILL
    with Store(load_context(cfg).store_url, create=False) as store:
        counts = store.counts("drawer")
        assert lease_info(store, "drawer") is not None  # left behind by the killed client
    assert counts["total"] == 200 and done_at_kill <= counts["done"] < 200, counts

    resumed = run_study(cfg, progress=False)  # takes over the dead client's lease at once
    assert not resumed.created and resumed.evaluated == 200 - counts["done"]
    assert (resumed.total, resumed.done, resumed.failed) == (200, 200, 0)

    full = run_study(ref, progress=False)
    assert (full.total, full.done) == (200, 200)
    _assert_identical(cfg, ref)


def test_ctrl_c_saves_releases_and_refuses_a_second_run(tmp_path, capsys):
    # slower designs (161 segments, 151 frequencies: about 0.2 s each, 10 s for the study on
    # two workers) so the run is surely still going while we poke it, even on a loaded machine
    cfg = write_study(tmp_path, points=120, workers=2)
    cfg.write_text(cfg.read_text().replace("points = 11", "points = 151")
                   .replace("segments = 9", "segments = 161"))
    proc = start_run(cfg)
    try:
        wait_done(cfg, 2, proc)
        # a second client (this test process) is refused while the first one runs
        code = main(["run", str(cfg)])
        err = capsys.readouterr().err
        assert code == 2 and "being run right now" in err, err
        assert err.count("\n") == 1  # one line
        killpg(proc, signal.SIGINT)  # Ctrl-C reaches the whole foreground group
        proc.wait(timeout=120)
    finally:
        killpg(proc, signal.SIGKILL)
    out, err = run_output(cfg)
    assert proc.returncode == 130, err
    assert "interrupted" in out
    assert "Traceback" not in err  # the workers ignore Ctrl-C; the client stops them
    with Store(load_context(cfg).store_url, create=False) as store:
        counts = store.counts("drawer")
        assert lease_info(store, "drawer") is None, err  # released
    assert 0 < counts["done"] < 120 and counts["failed"] == 0
    resumed = run_study(cfg, progress=False)
    assert resumed.evaluated == 120 - counts["done"] and resumed.done == 120
