"""``filamant bench``: the performance figures of this machine, measured side by side.

Prints a table by default, one JSON object with ``--json``. See :mod:`studies.bench` for what
each figure means and how it is measured (ratios of medians of interleaved repeats).
"""

from __future__ import annotations

import argparse
import logging

from studies.verbs.common import add_json_option, print_json

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = "filamant bench --quick --json"

log = logging.getLogger(__name__)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant bench``."""
    add_json_option(parser)
    parser.add_argument("--quick", action="store_true",
                        help="fewer repeats and a shorter N list (a rough figure in seconds)")
    parser.add_argument("--only", action="append", default=[], metavar="NAME",
                        help="run only this measurement (repeatable): "
                             "design_over_lapack, scaling, two_worker_efficiency, "
                             "surrogate_speedup, large_study")


def run(args: argparse.Namespace) -> int:
    from studies.bench import run_all

    result = run_all(quick=args.quick, only=tuple(args.only))
    if args.json:
        print_json(result)
        return 0
    for name, value in result.items():
        if isinstance(value, dict) and "table" in value:
            print(f"{name}:")
            print(value["table"])
        elif isinstance(value, dict):
            shown = ", ".join(f"{k} = {v}" for k, v in value.items() if k != "table")
            print(f"{name}: {shown}")
        else:
            print(f"{name}: {value}")
    return 0
