"""``filamant yield STUDY.toml --set ... --tolerance section.key=±value|±percent% ...
--spec metric=lo:hi ...``: the share of prints that meets every spec.

Monte Carlo through the study's surrogate (at least 1e4 draws) around the nominal design
(``--set`` values over the config's base design). A tolerance ``±v`` is, by default, three
standard deviations of a normal spread (about 99.7 % of prints inside); ``±v,uniform`` spreads
evenly within ``±v``; ``%`` is relative to the nominal. Prints the yield with its Wilson 95 %
interval (Monte Carlo error only), the share failing each spec and the metric that fails most.
``--model-uncertainty`` adds the surrogate's own predictive error to every draw.
"""

from __future__ import annotations

import argparse
import math
import sys

from studies.verbs.common import add_json_option, add_set_option, print_json

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = ("filamant yield studies/examples/drawer_study.toml --set antenna.length_mm=152 "
           "--tolerance antenna.width_mm=±0.2 --tolerance antenna.length_mm=±1% "
           "--spec resonance_mhz=905:925 --spec efficiency=0.5:")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant yield``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    add_set_option(parser)
    parser.add_argument("--tolerance", action="append", default=[],
                        metavar="SECTION.KEY=±VALUE[%][,uniform]",
                        help="print tolerance of a [space] parameter (repeatable); ±v is 3 "
                             "sigma of a normal spread unless ,uniform")
    parser.add_argument("--spec", action="append", default=[], metavar="METRIC=LO:HI",
                        help="a metric's allowed interval (either side may be empty; "
                             "repeatable; at least one)")
    parser.add_argument("--draws", type=int, default=20_000, metavar="N",
                        help="Monte Carlo draws (>= 10000, default 20000)")
    parser.add_argument("--model-uncertainty", action="store_true",
                        help="add the surrogate's predictive error to each draw")
    parser.add_argument("--plot", metavar="FILE.png", help="also draw the metric histograms")
    parser.add_argument("--seed", type=int, default=0, help="seed of the draws")
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    """Estimate the yield of the nominal design of ``args.study``."""
    from studies.surrogate_api import nominal_values, open_query
    from surrogates.specs import parse_assignments, parse_range, parse_tolerance
    from surrogates.yield_ import plot_yield, yield_estimate
    from sweeps.errors import ConfigError

    q = open_query(args.study, args.set)
    ctx, sur, warns, given = q.ctx, q.surrogate, q.warnings, q.given
    if not args.spec:
        raise ConfigError("give at least one --spec metric=lo:hi")
    specs = {k: parse_range(v, f"--spec {k}")
             for k, v in parse_assignments(args.spec, "--spec").items()}
    tols = [parse_tolerance(k, v)
            for k, v in parse_assignments(args.tolerance, "--tolerance").items()]
    res = yield_estimate(sur, given, tols, specs, defaults=nominal_values(ctx),
                         n_draws=args.draws, seed=args.seed,
                         include_model_uncertainty=args.model_uncertainty)
    res.warnings[:0] = warns
    if args.plot:
        plot_yield(res, args.plot)
    if args.json:
        out = res.to_json()
        out["study"] = ctx.name
        if args.plot:
            out["png"] = str(args.plot)
        print_json(out)
        return 0
    out = sys.stdout
    out.write(f"study {ctx.name}: yield {res.share:.1%} (95% Wilson interval "
              f"{res.ci_low:.1%} to {res.ci_high:.1%}; {res.n_draws} draws, "
              f"{res.n_pass} pass)\n")
    out.write("nominal:\n")
    for f in sur.features:
        v = res.nominal[f.name]
        tol = next((t for t in tols if t.name == f.name), None)
        spread = ""
        if tol is not None:
            hw = tol.half_width(float(v))
            spread = (f"  ± {hw:.4g} {f.unit}".rstrip() + (" (3 sigma, normal)"
                      if tol.distribution == "normal" else " (uniform)"))
        shown = f"{v:.6g}" if isinstance(v, float) else str(v)
        out.write(f"  {f.name:<34} {shown} {f.unit}{spread}\n".replace("  \n", "\n"))
    out.write("specs:\n")
    for m, (lo, hi) in res.specs.items():
        p = res.nominal["predicted"][m]
        rng = (f"{lo:g}" if math.isfinite(lo) else "") + " to " + \
            (f"{hi:g}" if math.isfinite(hi) else "")
        out.write(f"  {m:<18} {rng:<20} fails {res.fail_share[m]:6.1%}   nominal "
                  f"{p['value']:.5g} ± {p['std']:.2g}\n")
    if res.worst:
        out.write(f"fails most: {res.worst}\n")
    for w in res.warnings:
        out.write(f"warning: {w}\n")
    if args.plot:
        out.write(f"saved {args.plot}\n")
    out.write("Through the surrogate: the interval covers the Monte Carlo error only"
              + ("; the model's own error is included in the draws" if args.model_uncertainty
                 else "; add --model-uncertainty to include the model's error") + ".\n")
    return 0
