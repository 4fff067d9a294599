"""Helpers for the tests that start ``filamant run`` as a real process and signal it."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from studies.store import Store

ROOT = Path(__file__).resolve().parents[2]


def project_env(**extra: str) -> dict[str, str]:
    """This environment with the project on ``PYTHONPATH`` (plus ``extra`` variables)."""
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env.update(extra)
    return env


def start_run(cfg: Path, *extra: str) -> subprocess.Popen:
    """Start ``filamant run`` in its own process group (the client and its local workers);
    its output goes to ``<cfg>.out`` and ``<cfg>.err``."""
    with open(cfg.with_suffix(".out"), "w") as out, open(cfg.with_suffix(".err"), "w") as err:
        return subprocess.Popen(
            [sys.executable, "-m", "studies.cli", "run", str(cfg), "--no-progress", *extra],
            env=project_env(), stdout=out, stderr=err, text=True, start_new_session=True)


def run_output(cfg: Path) -> tuple[str, str]:
    """What the run started by :func:`start_run` printed: (stdout, stderr)."""
    return cfg.with_suffix(".out").read_text(), cfg.with_suffix(".err").read_text()


def wait_done(cfg: Path, at_least: int, proc: subprocess.Popen, timeout: float = 120) -> int:
    """Wait until the study of ``cfg`` (default SQLite store) has ``at_least`` points done."""
    db = cfg.parent / f"{cfg.stem}.db"
    t0 = time.time()
    while time.time() - t0 < timeout:
        if proc.poll() is not None:
            pytest.fail(f"the run ended early ({proc.returncode}): {run_output(cfg)[1]}")
        if db.exists():
            try:
                with Store(f"sqlite:///{db}", create=False) as store:
                    n = store.counts(cfg.stem)["done"]
            except Exception:  # noqa: BLE001 - tables not created yet
                n = 0
            if n >= at_least:
                return n
        time.sleep(0.05)
    pytest.fail(f"fewer than {at_least} points done after {timeout} s")


def killpg(proc: subprocess.Popen, sig: int) -> None:
    """Send ``sig`` to the process group of ``proc`` (if it is still there)."""
    try:
        os.killpg(proc.pid, sig)
    except ProcessLookupError:
        pass
