"""``filamant ask STUDY.toml --set section.key=value ... [--json]``: instant answers.

Forward: every surrogate target predicted at the given ``[space]`` values (the others at the
config's nominal values), each with one predictive standard deviation. Inverse:
``--solve-for section.key ... --target metric=value ...`` finds the free parameters, within
their studied ranges, that put the predicted metrics on the targets (bounded multi-start
optimisation on the surrogate). ``--verify`` runs one real solver evaluation of the answer.
Values outside the studied ranges are answered but flagged in the warnings.

``--json`` prints one object: metric names as keys for the predicted values, ``uncertainty``
(metric -> one standard deviation), ``warnings`` (list); with ``--solve-for`` also the free
parameters under their key names, ``targets``, ``residual`` (predicted - target), ``met`` and
``alternatives``; with ``--verify`` a ``verify`` object of solver metrics.
"""

from __future__ import annotations

import argparse
import sys
from typing import Any

from studies.verbs.common import add_json_option, add_set_option, dash, print_json

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = ("filamant ask studies/examples/drawer_study.toml --solve-for antenna.length_mm "
           "--target resonance_mhz=915 --set antenna.width_mm=2.5 --verify")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant ask``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    add_set_option(parser)
    parser.add_argument("--solve-for", action="append", default=[], metavar="SECTION.KEY",
                        help="a [space] parameter to solve for (repeatable)")
    parser.add_argument("--target", action="append", default=[], metavar="METRIC=VALUE",
                        help="a metric value to hit, e.g. resonance_mhz=915 (repeatable)")
    parser.add_argument("--verify", action="store_true",
                        help="also evaluate the answer once with the solver")
    parser.add_argument("--seed", type=int, default=0, help="seed of the inverse search")
    add_json_option(parser)


def _targets(items: list[str]) -> dict[str, float]:
    from surrogates.specs import parse_assignments
    from sweeps.errors import ConfigError

    out = {}
    for k, v in parse_assignments(items, "--target").items():
        try:
            out[k] = float(v)
        except ValueError:
            raise ConfigError(f"--target {k}: {v!r} is not a number") from None
    return out


def _fmt(v: Any, unit: str = "") -> str:
    if isinstance(v, float):
        s = f"{v:.6g}"
    else:
        s = str(v)
    return f"{s} {unit}".rstrip()


def run(args: argparse.Namespace) -> int:
    """Answer a forward or inverse question from the study's surrogate."""
    from studies.cautions import read_range_cautions
    from studies.surrogate_api import nominal_values, open_query, verify_point
    from surrogates.query import forward, solve_for
    from sweeps.errors import ConfigError

    q = open_query(args.study, args.set)
    ctx, sur, path, warns, given = q.ctx, q.surrogate, q.path, q.warnings, q.given
    nominal = nominal_values(ctx)
    inverse = bool(args.solve_for or args.target)
    if inverse and not (args.solve_for and args.target):
        raise ConfigError("an inverse question needs both --solve-for section.key and "
                          "--target metric=value")
    if inverse:
        res = solve_for(sur, args.solve_for, _targets(args.target), fixed=given,
                        defaults=nominal, seed=args.seed)
        params = {**res.fixed, **res.free}
        report = res.to_json()
        values, unc = res.predicted, res.uncertainty
    else:
        pred = forward(sur, given, defaults=nominal)
        params = pred.parameters
        report = pred.to_json()
        values, unc = pred.values, pred.uncertainty
    report["warnings"] = warns + report["warnings"]
    solver = verify_point(ctx, params) if args.verify else None
    if solver is not None:
        report["verify"] = {m: solver.get(m) for m in values}
    cautions = read_range_cautions(values)
    if cautions:
        report["cautions"] = cautions
    if args.json:
        print_json(report)
        return 0
    out = sys.stdout
    out.write(f"study {ctx.name}: surrogate {path.name}\n")
    out.write("parameters:\n")
    for f in sur.features:
        if inverse and f.name in res.free:
            mark = "  (solved)"
        elif f.name not in given:
            mark = "  (nominal)"
        else:
            mark = ""
        out.write(f"  {f.name:<34} {_fmt(params[f.name], f.unit)}{mark}\n")
    if inverse:
        miss = ", ".join(f"{m} {res.residual[m]:+.3g}" for m in res.targets)
        out.write(f"  targets {'met' if res.met else 'NOT met'} (predicted - target: {miss})\n")
    head = ["metric", "predicted", "± 1 sigma", "unit"] + (["solver"] if solver else [])
    rows = [head]
    for m, v in values.items():
        unit = sur.targets[m].unit
        row = [m, f"{v:.6g}", f"{unc[m]:.3g}", unit or dash()]
        if solver is not None:
            sv = solver.get(m)
            row.append(dash() if sv is None else f"{sv:.6g}")
        rows.append(row)
    widths = [max(len(r[i]) for r in rows) for i in range(len(head))]
    for r in rows:
        out.write("  " + "  ".join(c.ljust(w) if i in (0, 3) else c.rjust(w)
                                   for i, (c, w) in enumerate(zip(r, widths, strict=True)))
                  .rstrip() + "\n")
    if inverse and res.alternatives:
        out.write(f"  {len(res.alternatives)} other solution(s), e.g. "
                  + ", ".join(f"{k} = {_fmt(v)}" for k, v in res.alternatives[0].items())
                  + "\n")
    for w in report["warnings"]:
        out.write(f"warning: {w}\n")
    for c in cautions:
        out.write(f"caution: {c}\n")
    out.write("Surrogate predictions with one predictive standard deviation; confirm a design "
              "with --verify or filamant evaluate.\n")
    return 0
