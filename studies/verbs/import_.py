"""``filamant import STUDY.toml FILES|DIR --params FILE.csv [--port N]``: Touchstone results
(measurements, other simulators) become points of the study.

The CSV's header is ``file`` and every ``[space]`` parameter (dotted names); each line maps one
file name to its parameter values. Metrics come from the S-parameters at the study's target
frequency, reference impedance and switch loads (efficiency and gain need currents and stay
empty, with the reason). Everything is checked first; any error names the file and line and
nothing is imported.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from studies.verbs.common import add_json_option, add_set_option, port_number, print_json

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = ("filamant import studies/examples/drawer_study.toml measured/ "
           "--params measured/params.csv")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant import``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    parser.add_argument("sources", metavar="FILES|DIR", nargs="+", type=Path,
                        help="Touchstone files, or directories of *.sNp files")
    parser.add_argument("--params", metavar="FILE.csv", type=Path, required=True,
                        help="CSV: file, then one column per [space] parameter")
    parser.add_argument("--port", type=port_number, default=1, metavar="N",
                        help="antenna port of multi-port files (default 1)")
    add_set_option(parser)
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    """Import the files into ``args.study``."""
    from studies.api import load_context
    from studies.importer import import_touchstone

    ctx = load_context(args.study, args.set)
    summary = import_touchstone(ctx, args.sources, args.params, port=args.port)
    if args.json:
        print_json(summary.as_dict())
    else:
        sys.stdout.write(f"imported {summary.imported} Touchstone result(s) into study "
                         f"{summary.study} ({summary.store})\n")
    return 0
