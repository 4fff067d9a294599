"""The same study end to end on a real PostgreSQL server (``FILAMANT_TEST_POSTGRES_URL``;
``.ci/run`` starts one and sets ``FILAMANT_REQUIRE_POSTGRES=1``, so in CI these fail rather
than skip). Each test uses its own study name, so tests never see each other's rows.

The reference is the same config run into an SQLite store: the two databases must hold
identical tables and responses.
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
import pandas as pd
import pytest

from studies.api import load_context, run_study, table_of
from studies.cli import main
from studies.lease import lease_info
from studies.store import Store
from tests.studies.studies_store_support import postgres_url, unique_name, write_study

ROOT = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.postgres


def _pair(tmp_path: Path, points: int, workers: int = 2) -> tuple[Path, Path, str]:
    url = postgres_url()
    name = unique_name("pg")
    (tmp_path / "pg").mkdir()
    (tmp_path / "lite").mkdir()
    pg = write_study(tmp_path / "pg", name=name, points=points, workers=workers, store=url)
    lite = write_study(tmp_path / "lite", name=name, points=points, workers=workers)
    return pg, lite, name


def _same(pg: Path, lite: Path) -> None:
    a, b = load_context(pg), load_context(lite)
    ta = table_of(a).sort_values("point_id").reset_index(drop=True)
    tb = table_of(b).sort_values("point_id").reset_index(drop=True)
    pd.testing.assert_frame_equal(ta, tb, check_exact=True)
    with Store(a.store_url, create=False) as sa, Store(b.store_url, create=False) as sb:
        ra = {p: (f, z) for p, f, z, _ in sa.responses(a.name)}
        rb = {p: (f, z) for p, f, z, _ in sb.responses(b.name)}
    assert ra.keys() == rb.keys()
    for k in ra:
        np.testing.assert_array_equal(ra[k][1], rb[k][1])


def test_run_status_export_on_postgres(tmp_path, capsys):
    pg, lite, name = _pair(tmp_path, points=8, workers=1)
    assert main(["run", str(pg), "--json", "--no-progress"]) == 0
    s = json.loads(capsys.readouterr().out)
    assert (s["total"], s["done"]) == (8, 8) and s["store"].startswith("postgresql")
    assert main(["status", str(pg), "--json"]) == 0
    st = json.loads(capsys.readouterr().out)
    assert (st["planned"], st["done"], st["failed"], st["running"]) == (0, 8, 0, None)
    csv = tmp_path / "pg.csv"
    assert main(["export", str(pg), "--table", str(csv), "--touchstone",
                 str(tmp_path / "s1p")]) == 0
    assert len(pd.read_csv(csv)) == 8 and len(list((tmp_path / "s1p").glob("*.s1p"))) == 8
    # a changed config is refused on PostgreSQL too
    assert main(["run", str(pg), "--set", "antenna.thickness_mm=0.5"]) == 2
    assert "antenna.thickness_mm: 0.4 -> 0.5" in capsys.readouterr().err
    run_study(lite, progress=False)
    _same(pg, lite)


@pytest.mark.slow
def test_sigkill_and_resume_on_postgres(tmp_path):
    pg, lite, name = _pair(tmp_path, points=200)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    with open(tmp_path / "run.err", "w") as err:
        proc = subprocess.Popen([sys.executable, "-m", "studies.cli", "run", str(pg),
                                 "--no-progress"], env=env, stdout=subprocess.DEVNULL,
                                stderr=err, start_new_session=True)
    ctx = load_context(pg)
    try:
        t0 = time.time()
        done = 0
        while done < 30 and time.time() - t0 < 120:
            assert proc.poll() is None, (tmp_path / "run.err").read_text()
            try:
                with Store(ctx.store_url, create=False) as store:
                    done = store.counts(name)["done"]
            except Exception:  # noqa: BLE001 - not created yet
                pass
            time.sleep(0.05)
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    with Store(ctx.store_url, create=False) as store:
        counts = store.counts(name)
        assert lease_info(store, name) is not None
    assert counts["total"] == 200 and 30 <= counts["done"] < 200
    resumed = run_study(pg, progress=False)
    assert resumed.evaluated == 200 - counts["done"] and resumed.done == 200
    run_study(lite, progress=False)
    _same(pg, lite)
