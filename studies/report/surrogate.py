"""The report's surrogate figures: trade-off front, parameter sensitivity, yield.

They read the study's fitted surrogate (``filamant fit`` writes it beside the config) and ask
it the questions below; without a surrogate, or with one trained on another config, the page
says so instead of showing a figure.

Defaults, each overridden by the ``report`` options of the same name as the query verbs:

trade-off (``--objective``, ``--constraint``)
    The objectives of ``[optimize]`` for an optimization study; otherwise every surrogate
    target with a natural direction (:data:`NATURAL_GOALS`: more efficiency, gain, bandwidth,
    modulation, differential RCS and read range; less Q and reflection). When
    ``resonance_mhz`` is a target it becomes a constraint instead: within
    :data:`RESONANCE_WINDOW` (2 %) of ``band.target_mhz``.
yield (``--tolerance``, ``--spec``)
    Around the best design of the page: ``±0.1 mm`` (normal, 3 sigma) on every varied length in
    mm, a common print tolerance of fused-filament printers (common practice); spec
    ``resonance_mhz`` within 2 % of the target, when it is a target.
sensitivity
    Sobol' first-order and total indices of every target over the study's space.
"""

from __future__ import annotations

import importlib.util
import logging
import math
import tempfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from studies.report.figures import Unavailable
from sweeps.errors import ConfigError, FilamantError

__all__ = ["NATURAL_GOALS", "RESONANCE_WINDOW", "PRINT_TOLERANCE_MM", "SurrogateQuestions",
           "load_study_surrogate", "tradeoff_png", "sensitivity_png", "yield_png"]

logger = logging.getLogger(__name__)

#: The direction in which a metric is better, for the default trade-off objectives.
NATURAL_GOALS: dict[str, str] = {
    "bandwidth_mhz": "max",
    "fractional_bandwidth": "max",
    "efficiency": "max",
    "gain_dbi": "max",
    "modulation_depth": "max",
    "modulation_factor": "max",
    "delta_rcs_dbsm": "max",
    "read_range_m": "max",
    "s11_db": "min",
    "q_factor": "min",
    "chu_ratio": "min",
}

#: Relative window around ``band.target_mhz`` for the default resonance constraint and spec.
RESONANCE_WINDOW = 0.02

#: The default print tolerance (±, mm) on every varied length in mm for the yield.
PRINT_TOLERANCE_MM = 0.1


@dataclass
class SurrogateQuestions:
    """What the report asks the surrogate; empty fields take the module's defaults.

    Attributes
    ----------
    objectives : dict
        Metric or parameter -> ``"max"`` / ``"min"``.
    constraints : dict
        Metric or parameter -> ``"lo:hi"``.
    tolerances : dict
        Parameter -> ``"±value"`` / ``"±percent%"``.
    specs : dict
        Metric -> ``"lo:hi"``.
    """

    objectives: dict[str, str] = field(default_factory=dict)
    constraints: dict[str, str] = field(default_factory=dict)
    tolerances: dict[str, str] = field(default_factory=dict)
    specs: dict[str, str] = field(default_factory=dict)


def _window(target_mhz: float) -> str:
    return f"{target_mhz * (1 - RESONANCE_WINDOW):.6g}:{target_mhz * (1 + RESONANCE_WINDOW):.6g}"


def load_study_surrogate(ctx: Any) -> tuple[Any, list[str]]:
    """The fitted surrogate of the study of ``ctx``, checked against its config, and warnings
    (the study has changed since the fit).

    Raises
    ------
    Unavailable
        No surrogates in this version, no surrogate fitted yet, or a surrogate file that is
        refused (trained on another config, damaged, tampered with).
    """
    if importlib.util.find_spec("studies.surrogate_api") is None:
        raise Unavailable("surrogate models are not available in this version of filamant")
    from studies.surrogate_api import load_study_surrogate as load

    try:
        sur, _path, warnings = load(ctx)
    except FilamantError as exc:  # missing (StoreError), or refused (ConfigError, StoreError)
        raise Unavailable(str(exc)) from None
    for w in warnings:
        logger.warning("report: %s", w)
    return sur, list(warnings)


def _render(plot: Any, result: Any) -> bytes:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "figure.png"
        plot(result, path)
        return path.read_bytes()


def _ranges(items: Mapping[str, str], flag: str) -> dict[str, tuple[float, float]]:
    from surrogates.specs import parse_range

    return {k: parse_range(v, f"{flag} {k}") for k, v in items.items()}


def default_objectives(sur: Any, study: Any) -> tuple[dict[str, str], dict[str, str]]:
    """The trade-off objectives and constraints the report uses by default (module doc)."""
    targets = list(sur.target_names)
    constraints: dict[str, str] = {}
    if getattr(study, "optimize", None) is not None:
        objectives = {o.metric: o.goal for o in study.optimize.objectives
                      if o.metric in targets}
        for c in study.optimize.constraints:
            if c.metric in targets:
                lo = "" if c.min is None else f"{c.min:g}"
                hi = "" if c.max is None else f"{c.max:g}"
                constraints[c.metric] = f"{lo}:{hi}"
        if objectives:
            return objectives, constraints
    objectives = {t: NATURAL_GOALS[t] for t in targets if t in NATURAL_GOALS}
    if "resonance_mhz" in targets:
        constraints["resonance_mhz"] = _window(study.band.target_mhz)
    return objectives, constraints


def tradeoff_png(sur: Any, study: Any, q: SurrogateQuestions, *, seed: int = 0
                 ) -> tuple[bytes, dict, str]:
    """The trade-off front: PNG bytes, data (front table, objectives, constraints), caption."""
    from surrogates.tradeoff import plot_front, tradeoff

    objectives, constraints = default_objectives(sur, study)
    if q.objectives:
        objectives = dict(q.objectives)
    if q.constraints or q.objectives:
        constraints = dict(q.constraints)
    if not objectives:
        raise Unavailable(f"no surrogate target has a natural direction to trade "
                          f"({', '.join(sur.target_names)}): give --objective metric=max|min")
    result = tradeoff(sur, objectives, constraints=_ranges(constraints, "--constraint"),
                      seed=seed)
    if not len(result.front):
        raise Unavailable("; ".join(result.warnings) or "the front is empty")
    goals = ", ".join(f"{g} {m}" for m, g in result.objectives.items())
    cons = ", ".join(f"{m} in {lo:g}..{hi:g}" for m, (lo, hi) in result.constraints.items())
    caption = (f"{len(result.front)} non-dominated designs of {result.n_candidates} "
               f"surrogate candidates ({result.n_feasible} feasible); objectives: {goals}"
               + (f"; constraints: {cons}" if cons else "") + ". Surrogate predictions: "
               "confirm a chosen design with filamant evaluate.")
    if len(result.front) == 1 and len(result.objectives) > 1:
        caption += (" One design is best in every objective: these objectives do not conflict "
                    "in this study. Ask for another pair, for example --objective "
                    "delta_rcs_dbsm=max --objective antenna.width_mm=min (less filament).")
    if result.warnings:
        caption += " Warnings: " + "; ".join(result.warnings)
    data = {"front": result.front, "objectives": result.objectives,
            "constraints": result.constraints}
    return _render(plot_front, result), data, caption


def sensitivity_png(sur: Any, best: Mapping[str, Any] | None = None, *, n: int = 2048,
                    seed: int = 0) -> tuple[bytes, dict, str]:
    """Sobol' indices of every target: PNG bytes, data (index tables), caption.

    The choice parameters (a filament, a contact) are held at the best design's values, so the
    indices rank the continuous parameters for the design the page recommends; a choice
    between very different filaments would otherwise swamp every other parameter (and stand
    for metrics, like a resonance, that the other filament may not have at all).
    """
    from surrogates.sensitivity import plot_sensitivity, surrogate_sobol

    fixed = {f.name: best[f.name] for f in sur.features
             if f.discrete and best is not None and f.name in best}
    free = [f.name for f in sur.features if f.name not in fixed]
    if not free:
        raise Unavailable("every parameter of the surrogate is a choice: no continuous "
                          "parameter to rank")
    indices = {t: surrogate_sobol(sur, t, fixed=fixed, n=n, seed=seed)
               for t in sur.target_names}
    held = ", ".join(f"{k} = {v:g}" if isinstance(v, int | float) else f"{k} = {v}"
                     for k, v in fixed.items())
    caption = ("Sobol' first-order (alone) and total (with interactions) indices of each "
               "target's surrogate mean over the study's ranges (Saltelli et al., Comput. Phys. "
               "Commun. 181, 2010): the share of the target's variance each parameter "
               "explains; bars show the bootstrap confidence intervals."
               + (f" Choices held at the best design's: {held}." if held else ""))
    return _render(plot_sensitivity, indices), {"indices": indices, "fixed": fixed}, caption


def default_tolerances(sur: Any) -> dict[str, str]:
    """``±0.1 mm`` on every surrogate feature that is a varied length in mm (a range)."""
    return {f.name: f"±{PRINT_TOLERANCE_MM:g}" for f in sur.features
            if f.name.endswith("_mm") and not f.discrete}


def yield_png(sur: Any, study: Any, nominal: Mapping[str, Any], q: SurrogateQuestions, *,
              seed: int = 0) -> tuple[bytes, dict, str]:
    """Yield around ``nominal``: PNG bytes, data (the result's JSON), caption."""
    from surrogates.specs import parse_tolerance
    from surrogates.yield_ import plot_yield, yield_estimate

    tol_text = dict(q.tolerances) or default_tolerances(sur)
    if not tol_text:
        raise Unavailable("no varied length in mm to put a print tolerance on: give "
                          "--tolerance section.key=±value")
    specs = dict(q.specs)
    if not specs:
        if "resonance_mhz" not in sur.target_names:
            raise Unavailable("resonance_mhz is not a surrogate target, so there is no "
                              "default spec: give --spec metric=lo:hi")
        specs = {"resonance_mhz": _window(study.band.target_mhz)}
    tolerances = [parse_tolerance(k, v) for k, v in tol_text.items()]
    feats = set(sur.feature_names)
    nominal = {k: v for k, v in nominal.items() if k in feats}
    try:
        result = yield_estimate(sur, nominal, tolerances, _ranges(specs, "--spec"), seed=seed)
    except ConfigError as exc:
        if q.tolerances or q.specs:  # the user's question: bad input
            raise
        raise Unavailable(f"yield not computed with the default question: {exc}") from None
    tol = ", ".join(f"{k} {v}" for k, v in tol_text.items())
    spec = ", ".join(f"{m} in {lo:g}..{hi:g}" for m, (lo, hi) in result.specs.items())
    worst = f"; fails most on {result.worst}" if result.worst else ""
    share = (f"{result.share:.1%} of {result.n_draws} draws meet every spec "
             f"({result.confidence:.0%} interval {result.ci_low:.1%} to {result.ci_high:.1%})")
    caption = (f"Around the best design, tolerances {tol} (normal, ± = 3 sigma); specs {spec}: "
               f"{share}{worst}. Through the surrogate.")
    if result.warnings:
        caption += " Warnings: " + "; ".join(result.warnings)
    if not math.isfinite(result.share):
        raise Unavailable("yield is not finite")
    return _render(plot_yield, result), {"result": result.to_json()}, caption


def check_questions(sur: Any, q: SurrogateQuestions) -> None:
    """Refuse a question naming something the surrogate does not know, before any work.

    Objectives and constraints may name a target or a parameter; specs a target; tolerances a
    parameter. Goals, ranges and tolerances are parsed here too.

    Raises
    ------
    ConfigError
        Naming the option, the name and the closest valid one.
    """
    from studies.tomlfile import suggest
    from surrogates.specs import parse_goal, parse_range, parse_tolerance

    targets, feats = list(sur.target_names), list(sur.feature_names)
    for flag, items, known in (("--objective", q.objectives, targets + feats),
                               ("--constraint", q.constraints, targets + feats),
                               ("--spec", q.specs, targets), ("--tolerance", q.tolerances, feats)):
        for name in items:
            if name not in known:
                what = {"--spec": "a surrogate target", "--tolerance": "a parameter"}.get(
                    flag, "a surrogate target or a parameter")
                raise ConfigError(f"{flag} {name}: not {what}" + suggest(name, known))
    for k, v in q.objectives.items():
        parse_goal(v, f"--objective {k}")
    for flag, items in (("--constraint", q.constraints), ("--spec", q.specs)):
        for k, v in items.items():
            parse_range(v, f"{flag} {k}")
    for k, v in q.tolerances.items():
        parse_tolerance(k, v)


def parse_questions(objectives: Sequence[str], constraints: Sequence[str],
                    tolerances: Sequence[str], specs: Sequence[str]) -> SurrogateQuestions:
    """``name=value`` command-line items into :class:`SurrogateQuestions` (keys unique)."""
    from surrogates.specs import parse_assignments

    return SurrogateQuestions(objectives=parse_assignments(objectives, "--objective"),
                              constraints=parse_assignments(constraints, "--constraint"),
                              tolerances=parse_assignments(tolerances, "--tolerance"),
                              specs=parse_assignments(specs, "--spec"))
