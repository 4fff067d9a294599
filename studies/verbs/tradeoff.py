"""``filamant tradeoff STUDY.toml [--objective metric=max|min ...] [--constraint metric=lo:hi ...]
[--out FILE.csv]``: the trade-off front of the study's surrogate.

Samples at least 1e5 designs over the ``[space]`` (Sobol points; ``--set`` holds a parameter at
a value), predicts every target, keeps those meeting every constraint and reports the
non-dominated ones for the objectives: as a CSV (parameters in config units, predicted metrics
and their ``_std``) and a PNG plot beside it. Objectives and constraints default to
``[optimize] objectives`` / ``constraints``; either may name a metric or a ``[space]`` key.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import tempfile
from pathlib import Path
from typing import Any

from studies.verbs.common import add_json_option, add_set_option, print_json

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = ("filamant tradeoff studies/examples/drawer_study.toml --objective efficiency=max "
           "--objective delta_rcs_dbsm=max --constraint resonance_mhz=905:925 "
           "--out drawer_front.csv")

_SHOWN = 12


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant tradeoff``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    add_set_option(parser)
    parser.add_argument("--objective", action="append", default=[], metavar="METRIC=max|min",
                        help="an objective (repeatable); default [optimize] objectives")
    parser.add_argument("--constraint", action="append", default=[], metavar="METRIC=LO:HI",
                        help="keep designs with LO <= metric <= HI (either side may be empty; "
                             "repeatable); default [optimize] constraints")
    parser.add_argument("--out", metavar="FILE.csv",
                        help="front as CSV (default <study name>.tradeoff.csv beside the "
                             "config); the plot goes beside it as .png")
    parser.add_argument("--candidates", type=int, default=131_072, metavar="N",
                        help="designs sampled (>= 100000, rounded up to a power of two)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the Sobol sample")
    add_json_option(parser)


def _from_config(ctx: Any) -> tuple[dict[str, str], dict[str, tuple[float, float]]]:
    opt = ctx.study.optimize
    if opt is None:
        return {}, {}
    goals = {o.metric: o.goal for o in opt.objectives}
    cons = {c.metric: (-math.inf if c.min is None else float(c.min),
                       math.inf if c.max is None else float(c.max)) for c in opt.constraints}
    return goals, cons


def _write_csv(df: Any, path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        df.to_csv(tmp, index=False)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def run(args: argparse.Namespace) -> int:
    """Compute, save and print the trade-off front of ``args.study``."""
    from studies.surrogate_api import open_query
    from surrogates.specs import parse_assignments, parse_range
    from surrogates.tradeoff import plot_front, tradeoff
    from sweeps.errors import ConfigError

    q = open_query(args.study, args.set)
    ctx, sur, warns, fixed = q.ctx, q.surrogate, q.warnings, q.given
    goals, cons = _from_config(ctx)
    if args.objective:
        goals = dict(parse_assignments(args.objective, "--objective"))
    if args.constraint:
        cons = {k: parse_range(v, f"--constraint {k}")
                for k, v in parse_assignments(args.constraint, "--constraint").items()}
    if not goals:
        raise ConfigError("give at least one --objective metric=max|min (or [optimize] "
                          "objectives in the study)")
    res = tradeoff(sur, goals, constraints=cons, fixed=fixed, n_candidates=args.candidates,
                   seed=args.seed)
    source = getattr(ctx.study, "source", None)
    base = Path(source).resolve().parent if source else Path.cwd()
    csv = Path(args.out) if args.out else base / f"{ctx.name}.tradeoff.csv"
    png = csv.with_suffix(".png")
    _write_csv(res.front, csv)
    plot_front(res, png, title=f"{ctx.name}: trade-off front ({len(res.front)} of "
                              f"{res.n_candidates} sampled designs, surrogate predictions)")
    warnings = warns + res.warnings
    if args.json:
        front = res.front.astype(object).where(res.front.notna(), None)
        print_json({"study": ctx.name, "objectives": res.objectives,
                    "constraints": {k: [None if math.isinf(a) else a for a in v]
                                    for k, v in res.constraints.items()},
                    "candidates": res.n_candidates, "feasible": res.n_feasible,
                    "front": front.to_dict(orient="records"), "csv": str(csv),
                    "png": str(png), "warnings": warnings})
        return 0
    out = sys.stdout
    out.write(f"study {ctx.name}: {res.n_candidates} designs sampled, {res.n_feasible} meet "
              f"the constraints, {len(res.front)} on the front\n")
    out.write("  objectives: " + ", ".join(f"{k} {v}" for k, v in res.objectives.items())
              + "\n")
    if res.constraints:
        out.write("  constraints: " + ", ".join(
            f"{a:g} <= {k} <= {b:g}" for k, (a, b) in res.constraints.items()) + "\n")
    cols = [f.name for f in sur.features if f.name not in fixed]
    cols += [m for m in res.objectives if m not in cols]
    cols += [m for m in res.constraints if m not in cols]
    if len(res.front):
        shown = res.front[cols].head(_SHOWN)
        out.write(shown.to_string(index=False, float_format=lambda v: f"{v:.5g}") + "\n")
        if len(res.front) > _SHOWN:
            out.write(f"  ... {len(res.front) - _SHOWN} more in the CSV\n")
    for w in warnings:
        out.write(f"warning: {w}\n")
    out.write(f"saved {csv}\nsaved {png}\n")
    out.write("Surrogate predictions: confirm a chosen design with filamant evaluate.\n")
    return 0
