"""``filamant report STUDY.toml [--out DIR] [--best N]``: an HTML report of a study.

Writes ``report.html`` (self-contained: figures embedded as PNG, no network needed to view it)
and one PNG per figure into ``DIR`` (default ``<config dir>/<study name>-report``). The best
designs are chosen by the rule of :mod:`studies.report.select`, stated on the page. The
trade-off and yield figures ask the fitted surrogate (``filamant fit``) the questions of
:mod:`studies.report.surrogate`; ``--objective``, ``--constraint``, ``--tolerance`` and
``--spec`` ask others, in the syntax of ``filamant tradeoff`` and ``filamant yield``.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from studies.verbs.common import (
    add_json_option,
    add_progress_option,
    add_set_option,
    print_json,
    whole_number,
)
from sweeps.errors import ConfigError

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = "filamant report studies/examples/drawer_study.toml --out drawer-report"


def _count(text: str) -> int:
    return whole_number(text, most=10)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant report``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    parser.add_argument("--out", metavar="DIR", type=Path,
                        help="folder for report.html and the PNGs "
                             "(default: <config dir>/<study name>-report)")
    parser.add_argument("--best", type=_count, default=3, metavar="N",
                        help="how many best designs to show (default 3)")
    parser.add_argument("--objective", action="append", default=[], metavar="METRIC=max|min",
                        help="trade-off objective (repeatable; default: each surrogate target "
                             "in its better direction, resonance_mhz as a constraint)")
    parser.add_argument("--constraint", action="append", default=[], metavar="METRIC=LO:HI",
                        help="trade-off constraint (repeatable)")
    parser.add_argument("--tolerance", action="append", default=[],
                        metavar="SECTION.KEY=±VALUE",
                        help="yield tolerance (repeatable; default ±0.1 on every varied mm "
                             "length)")
    parser.add_argument("--spec", action="append", default=[], metavar="METRIC=LO:HI",
                        help="yield spec (repeatable; default resonance_mhz within 2 %% of "
                             "the target)")
    add_set_option(parser)
    add_progress_option(parser)
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    """Write the report of ``args.study``."""
    os.environ.setdefault("MPLBACKEND", "Agg")  # no display needed, before matplotlib loads
    from studies.api import load_context
    from studies.report import build_report
    from studies.report.surrogate import parse_questions

    ctx = load_context(args.study, args.set)
    if args.out is not None and args.out.exists() and not args.out.is_dir():
        raise ConfigError(f"--out {args.out}: exists and is not a folder")
    questions = parse_questions(args.objective, args.constraint, args.tolerance, args.spec)
    rep = build_report(ctx, args.out, best=args.best, questions=questions,
                       progress=args.progress)
    if args.json:
        print_json(rep.as_dict())
        return 0
    out = sys.stdout
    shown = [f.key for f in rep.figures if f.available]
    out.write(f"wrote {rep.page} ({len(shown)} of {len(rep.figures)} figures, "
              f"{rep.elapsed_s:.1f} s)\n")
    for key, why in rep.missing.items():
        out.write(f"  not shown: {key}: {why}\n")
    return 0
