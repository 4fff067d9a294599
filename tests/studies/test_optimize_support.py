"""Study configs and independent checks shared by the optimization tests (no tests here).

The checks read the optuna trials straight from the study's database with optuna's own API and
compare them with the filamant points, so they do not go through :mod:`studies.pareto` or
:mod:`studies.optimize`.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import optuna

from studies.api import load_context
from studies.store import Store
from tests.studies.studies_store_support import write_study

#: Bring the resonance to 915 MHz from above: the lowest resonance that is not below the target.
#: For a dipole the resonance falls with length, so this is the longest dipole that still
#: resonates at or above 915 MHz.
TO_TARGET = """\
[optimize]
trials = {trials}
algorithm = "tpe"
objectives = [{{metric = "resonance_mhz", goal = "min"}}]
constraints = [{{metric = "resonance_mhz", min = 915}}]
"""

#: A two-objective drawer-tag optimization (our own demo scenario): as much modulation depth and
#: radiation efficiency as possible (they trade off through the filament's conductivity), with
#: the resonance kept between 880 and 950 MHz.
TWO_OBJECTIVES = """\
[optimize]
trials = {trials}
algorithm = "{algorithm}"
objectives = [{{metric = "modulation_depth", goal = "max"}},
              {{metric = "efficiency", goal = "max"}}]
constraints = [{{metric = "resonance_mhz", min = 880, max = 950}}]
"""

TWO_SPACE = """\
length_mm = {min = 130, max = 170}
width_mm = {min = 1.0, max = 4.0}
conductivity_s_per_m = {min = 1000, max = 1000000, log = true}
"""


def write_optimize_study(tmp: Path, optimize: str, *, space: str, name: str = "opt",
                         workers: int = 1, store: str | None = None, seed: int = 7) -> Path:
    """The cheap study of ``studies_store_support`` turned into an optimization study."""
    path = write_study(tmp, name=name, workers=workers, store=store, space=space)
    text = path.read_text()
    plan = 'method = "sobol"\npoints = 16\nseed = 7\n'
    assert plan in text
    path.write_text(text.replace(plan, f'method = "optimize"\nseed = {seed}\n') + "\n"
                    + optimize)
    return path


def optuna_trials(cfg: Path) -> list[optuna.trial.FrozenTrial]:
    """Every optuna trial of the study of ``cfg``, read with optuna itself."""
    ctx = load_context(cfg)
    storage = optuna.storages.RDBStorage(ctx.store_url, skip_table_creation=True)
    try:
        sid = storage.get_study_id_from_name(ctx.name)
        return storage.get_all_trials(sid)
    finally:
        storage.engine.dispose()


def stored_points(cfg: Path) -> dict[str, dict[str, Any]]:
    """``{point_id: row}`` of the study's points (``Store.results``)."""
    ctx = load_context(cfg)
    with Store(ctx.store_url, create=False) as store:
        return {r["point_id"]: r for r in store.results(ctx.name)}


def brute_force_front(trials: list[optuna.trial.FrozenTrial], maximize: list[bool]) -> set[str]:
    """Point ids of the feasible, non-dominated COMPLETE trials, by the textbook definition
    (Deb 2001, section 2.4 from memory: ``a`` dominates ``b`` if no worse in every objective and
    better in one), with optuna's feasibility rule (every stored constraint value <= 0)."""
    done = [t for t in trials if t.state == optuna.trial.TrialState.COMPLETE
            and all(v <= 0 for v in t.constraints.values())]

    def better_or_equal(a: float, b: float, up: bool) -> bool:
        return a >= b if up else a <= b

    def dominates(a: list[float], b: list[float]) -> bool:
        return (all(better_or_equal(x, y, up) for x, y, up in zip(a, b, maximize, strict=True))
                and any(x != y for x, y in zip(a, b, strict=True)))

    return {t.user_attrs["point_id"] for t in done
            if not any(dominates(o.values, t.values) for o in done)}


def check_trials_match_points(cfg: Path, metrics: list[str]) -> None:
    """Every told trial names a stored point with its parameters (a failed solve is a pruned
    trial of a ``failed`` point); a COMPLETE trial's values are its point's metrics; no two
    points hold the same parameters and none was evaluated twice."""
    trials = optuna_trials(cfg)
    points = stored_points(cfg)
    for t in trials:
        if t.state in (optuna.trial.TrialState.COMPLETE, optuna.trial.TrialState.PRUNED):
            p = points[t.user_attrs["point_id"]]
            failed = t.user_attrs.get("failed_solve", False)
            assert p["status"] == ("failed" if failed else "done") and p["source"] == "optimize"
            assert {k: p["params"][k] for k in t.params} == rounded_params(t.params)
        if t.state == optuna.trial.TrialState.COMPLETE:
            p = points[t.user_attrs["point_id"]]
            assert t.values == [p[m] for m in metrics]
    keys = [json.dumps(p["params"], sort_keys=True) for p in points.values()]
    assert len(keys) == len(set(keys)), "two points hold the same parameters"
    assert all(p["attempts"] == 1 for p in points.values() if p["status"] != "planned")


def rounded_params(params: dict[str, Any]) -> dict[str, Any]:
    """Trial parameters as the point stores them: floats rounded to 12 significant digits
    (``studies.points`` canonical form)."""
    return {k: float(f"{v:.12g}") if isinstance(v, float) and math.isfinite(v) else v
            for k, v in params.items()}
