"""``filamant status STUDY.toml [--json]``: how far a study is, and whether it is running.

Prints the points still ``planned``, ``done`` and ``failed`` (and the ``total``), the store
URL, the live run (host, pid, heartbeat age) if any, whether the config still matches the
stored study, and the most common failure reasons; for an optimization study also the trials
(complete, pruned, failed) and the best value (one objective) or the size of the Pareto front
(several). ``--json`` prints the same as one object (keys of :func:`studies.api.status_of`).
Never creates a store.
"""

from __future__ import annotations

import argparse
import sys
from typing import TextIO

from studies.verbs.common import add_json_option, add_set_option, format_number, print_json

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = "filamant status studies/examples/drawer_study.toml --json"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant status``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    add_set_option(parser)
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    """Print the status of ``args.study``."""
    from studies.api import load_context, status_of

    st = status_of(load_context(args.study, args.set))
    if args.json:
        print_json(st)
        return 0
    out = sys.stdout
    out.write(f"study {st['study']}: store {st['store']}\n")
    if not st["exists"]:
        out.write("  not started (filamant run creates it)\n")
        return 0
    out.write(f"  {st['total']} point(s): done {st['done']}, failed {st['failed']}, "
              f"still planned {st['planned']}\n")
    run_ = st["running"]
    if run_:
        out.write(f"  running: {run_['command']} by pid {run_['pid']} on {run_['host']} "
                  f"(heartbeat {run_['heartbeat_age_s']:.0f} s ago)\n")
    else:
        out.write("  not running\n")
    if st["config_matches"] is False:
        out.write("  the config differs from the stored study: "
                  + "; ".join(st["config_changes"]) + "\n")
    for reason, n in st["failure_reasons"].items():
        out.write(f"  failed x{n}: {reason}\n")
    if "optimize" in st:
        _optimize_lines(st["optimize"], out)
    return 0


def _optimize_lines(o: dict, out: TextIO) -> None:
    """The optimization part of the status (``studies.optimize.optimize_status``)."""
    out.write(f"  optimization ({o['algorithm']}): {o['complete']} of {o['trials']} trial(s) "
              f"complete, {o['pruned']} pruned, {o['failed']} failed"
              + (f", {o['running']} running" if o["running"] else "") + "\n")
    goals = ", ".join(f"{x['goal']} {x['metric']}" for x in o["objectives"])
    best = o["best"]
    if best is not None:
        params = ", ".join(f"{k} = {format_number(v) if isinstance(v, float) else v}"
                           for k, v in best["params"].items())
        out.write(f"  best {best['metric']} = {format_number(best['value'])} at point "
                  f"{best['point_id']} ({params})\n")
    elif len(o["objectives"]) > 1:
        out.write(f"  Pareto front ({goals}): {o['front_size']} feasible point(s); "
                  "filamant export --pareto FILE.csv writes them\n")
    else:
        out.write(f"  no feasible point yet ({goals})\n")
