"""Helpers shared by the store, runner and cluster tests (not a conftest: plain functions)."""

from __future__ import annotations

import math
import os
import textwrap
import uuid
from pathlib import Path

import numpy as np
import pytest

from studies.points import Point, Record
from studies.store import METRIC_COLUMNS

#: A cheap study for end-to-end runs: a carbon-filled printed dipole at 915 MHz on a drawer
#: tag (our own demo scenario), 9 segments, an 11-point band; about 30 ms per design.
CHEAP_STUDY = """\
[study]
name = "{name}"
{store}

[antenna]
shape = "dipole"
length_mm = 150
width_mm = 2.0
thickness_mm = 0.4
conductivity_s_per_m = 2000
segments = 9

[feed]
gap_mm = 1.0

[band]
start_mhz = 800
stop_mhz = 1050
points = 11
target_mhz = 915

[space]
{space}

[sampler]
method = "sobol"
points = {points}
seed = 7

[cluster]
workers = {workers}
"""


SPACE = """\
length_mm = {min = 130, max = 170}
width_mm = {min = 1.0, max = 4.0}
conductivity_s_per_m = {min = 100, max = 100000, log = true}
"""


def write_study(tmp: Path, *, name: str = "drawer", points: int = 16, workers: int | None = 1,
                store: str | None = None, space: str = SPACE, extra: str = "") -> Path:
    """Write the cheap study config into ``tmp`` and return its path.

    ``extra`` is appended after ``[cluster]``: with ``workers=None`` it can hold
    ``scheduler = "tcp://..."``, or it can open further sections.
    """
    path = tmp / f"{name}.toml"
    store_line = f'store = "{store}"' if store else ""
    text = CHEAP_STUDY.format(name=name, points=points, store=store_line, space=space.strip(),
                              workers=workers)
    if workers is None:
        text = text.replace("workers = None\n", "")
    path.write_text(text + textwrap.dedent(extra))
    return path


def fake_points(n: int, start: int = 0) -> list[Point]:
    return [Point(f"{i:016x}", {"antenna.length_mm": 100.0 + i}, i) for i in range(start,
                                                                                   start + n)]


def fake_record(p: Point, ok: bool = True) -> Record:
    """A record with distinct, exactly representable arrays for round-trip checks."""
    if not ok:
        return Record(p.point_id, ok=False, reason="SolverError: made up for the test")
    i = p.seq
    f = np.linspace(8e8, 1e9, 5)
    z = (50.0 + i + 1j * np.arange(5.0))[:, None, None] * np.ones((5, 1, 1))
    metrics = {m: float(k + i) for k, m in enumerate(METRIC_COLUMNS)}
    metrics[METRIC_COLUMNS[-1]] = None
    return Record(p.point_id, ok=True, metrics=metrics,
                  reasons={METRIC_COLUMNS[-1]: "made up"}, f_hz=f, z=z,
                  z0_ohm=np.array([50.0]), elapsed_s=0.01, worker="test:1")


def postgres_url() -> str:
    """The test server URL, or skip (locally) / fail (CI) when it is not configured."""
    url = os.environ.get("FILAMANT_TEST_POSTGRES_URL", "")
    if not url:
        if os.environ.get("FILAMANT_REQUIRE_POSTGRES"):
            pytest.fail("FILAMANT_REQUIRE_POSTGRES is set but FILAMANT_TEST_POSTGRES_URL is not")
        pytest.skip("no PostgreSQL server (set FILAMANT_TEST_POSTGRES_URL)")
    return url


def unique_name(prefix: str = "t") -> str:
    return f"{prefix}_{uuid.uuid4().hex[:10]}"


# -- worker tasks for runner tests (importable by spawned dask workers) ---------------------

def fake_task(study_json: str, items: list[tuple[str, dict]],
              max_s: float = math.inf) -> list[Record]:
    """A worker task that sleeps 20 ms per point and returns a made-up record; like
    studies.runner.evaluate_batch it starts no point after ``max_s`` (s) but the first."""
    import time as _time

    from studies.runner import started_within

    out: list[Record] = []
    for pid, params in started_within(items, max_s):
        _time.sleep(0.02)
        seq = int(round(params["antenna.length_mm"] - 100.0))
        rec = fake_record(Point(pid, params, seq))
        rec.elapsed_s = 0.02
        out.append(rec)
    return out


def poison_task(study_json: str, items: list[tuple[str, dict]],
                max_s: float = math.inf) -> list[Record]:
    """Like :func:`fake_task`, but the worker process dies on a point whose length is 103 mm."""
    for _pid, params in items:
        if params["antenna.length_mm"] == 103.0:
            os._exit(17)
    return fake_task(study_json, items, max_s)


def stamp_task(seconds: float) -> float:
    """A worker task that notes when it started (time.time(), s) and then sleeps."""
    import time as _time

    start = _time.time()
    _time.sleep(seconds)
    return start


def broken_task(study_json: str, items: list[tuple[str, dict]],
                max_s: float = math.inf) -> list[Record]:
    """A task that fails as a whole (as when filamant is missing on a worker)."""
    raise ModuleNotFoundError("No module named 'filamant_missing'")
