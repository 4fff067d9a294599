"""What the store, the samplers and the runner need from a validated study config.

The one module that reads :class:`studies.config.Study` for orchestration, so that the store,
samplers and runner stay independent of the config schema's details.
"""

from __future__ import annotations

import inspect
import json
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from studies.points import Point, Record, point_id
from studies.runner import ClusterSettings
from studies.samplers import make_plan
from studies.space import Space
from sweeps.errors import ConfigError

__all__ = ["StudyContext", "point_evaluator", "study_from_json"]


@dataclass(frozen=True)
class StudyContext:
    """The orchestration view of one study config.

    Attributes
    ----------
    study : Study
        The validated config.
    name : str
        ``[study] name``.
    store_url : str
        ``[study] store`` (resolved; the SQLite default sits beside the config).
    space : Space
    method : str
        ``[sampler] method``.
    points : int or None
        ``[sampler] points``.
    seed : int
    canonical : dict
        ``Study.canonical()``.
    canonical_json : str
        The same as compact JSON (handed to workers).
    plan_fingerprint : str
    solver_fingerprint : dict
        ``SolverSettings.fingerprint()`` (includes ``solver_version``).
    cluster : ClusterSettings
    """

    study: Any
    name: str
    store_url: str
    space: Space
    method: str
    points: int | None
    seed: int
    canonical: dict[str, Any]
    canonical_json: str
    plan_fingerprint: str
    solver_fingerprint: dict[str, Any]
    cluster: ClusterSettings

    @classmethod
    def from_study(cls, study: Any) -> StudyContext:
        from studies.designio import solver_settings

        canonical = study.canonical()
        jq = study.cluster.jobqueue
        jobqueue = None
        if jq is not None:
            jobqueue = {k: v for k, v in jq.model_dump(exclude={"options"}).items()
                        if v is not None}
            jobqueue.update(jq.options)
        return cls(
            study=study,
            name=study.name,
            store_url=study.study.store,
            space=Space.from_specs(study.parameters),
            method=study.sampler.method,
            points=study.sampler.points,
            seed=int(study.sampler.seed),
            canonical=canonical,
            canonical_json=json.dumps(canonical, sort_keys=True, separators=(",", ":")),
            plan_fingerprint=study.plan_fingerprint(),
            solver_fingerprint=dict(solver_settings(study).fingerprint()),
            cluster=ClusterSettings(workers=study.cluster.workers,
                                    scheduler=study.cluster.scheduler, jobqueue=jobqueue),
        )

    def point_id(self, params: dict[str, Any], **extra: Any) -> str:
        """Stable id of a point of this study (see :mod:`studies.points`)."""
        return point_id(params, self.solver_fingerprint, self.plan_fingerprint,
                        extra=extra or None)

    def plan(self) -> list[Point]:
        """Draw the plan (once, when the study is created)."""
        if self.method == "optimize":
            raise ConfigError(f"study {self.name!r}: sampler.method = \"optimize\" has no "
                              "plan drawn up front; it is run by the optimizer")
        rows = make_plan(self.space, self.method, self.points, self.seed)
        return [Point(self.point_id(r), r, i, "solver") for i, r in enumerate(rows)]


def study_from_json(text: str) -> Any:
    """Rebuild a :class:`Study` from ``Study.canonical()`` JSON (what workers receive)."""
    from studies.config import Study
    from studies.sections import ParameterSpec

    data = json.loads(text)
    data["space"] = tuple(ParameterSpec(name=k, **v) for k, v in data.get("space", {}).items())
    data = {k: v for k, v in data.items() if v is not None}
    return Study.model_validate(data, strict=False)


def point_evaluator(study_json: str) -> Callable[[dict[str, Any]], Record]:
    """A function ``params -> Record`` evaluating points of the study with the solver."""
    from studies.designio import design_from, solver_settings
    from sweeps.evaluate import evaluate

    study = study_from_json(study_json)
    settings = solver_settings(study)
    # the reader enters read_range_m; older solvers' evaluate() has no reader argument
    with_reader = "reader" in inspect.signature(evaluate).parameters

    def run(params: dict[str, Any]) -> Record:
        design, band, reader = design_from(study, params)
        kw = {"reader": reader} if with_reader else {}
        ev = evaluate(design, band, settings, **kw)
        ports = ev.z.shape[-1]
        return Record(
            point_id="",
            ok=True,
            metrics=dict(ev.metrics.values),
            reasons=dict(ev.metrics.reasons),
            f_hz=np.asarray(ev.f_hz, dtype=float),
            z=np.asarray(ev.z, dtype=complex),
            z0_ohm=np.full(ports, float(design.z0_ohm)),
        )

    return run
