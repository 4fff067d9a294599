"""``filamant export STUDY.toml --table FILE.csv|FILE.parquet``, ``--touchstone DIR`` and/or
``--pareto FILE.csv|FILE.parquet``.

``--table`` writes one row per point: ``point_id``, the parameters (dotted names, config
units), every metric (empty where missing), then ``status``, ``source`` and
``failure_reason``. ``--touchstone`` writes one ``<point_id>.sNp`` file per point with a stored
response, S-parameters referred to the stored reference impedance, the study, point id and
parameters in ``!`` comment lines. ``--pareto`` (optimization studies) writes the
non-dominated feasible points over the ``[optimize]`` objectives, one row each with the columns
of ``--table`` (see :mod:`studies.pareto`). Nothing is re-solved.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from studies.verbs.common import add_json_option, add_set_option, print_json
from sweeps.errors import ConfigError

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = ("filamant export studies/examples/drawer_study.toml --table drawer.csv "
           "--touchstone drawer_s1p")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant export``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    parser.add_argument("--table", metavar="FILE", type=Path,
                        help="write the results table (.csv or .parquet)")
    parser.add_argument("--touchstone", metavar="DIR", type=Path,
                        help="write one Touchstone file per point into DIR")
    parser.add_argument("--pareto", metavar="FILE", type=Path,
                        help="write the Pareto front of an optimization study (.csv or "
                             ".parquet)")
    add_set_option(parser)
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    """Export ``args.study``."""
    from studies.api import load_context
    from studies.export import export_table, export_touchstone

    if args.table is None and args.touchstone is None and args.pareto is None:
        raise ConfigError("export: give --table FILE.csv|FILE.parquet, --touchstone DIR and/or "
                          "--pareto FILE.csv")
    ctx = load_context(args.study, args.set)
    report: dict[str, object] = {"study": ctx.name}
    if args.table is not None:
        path, rows = export_table(ctx, args.table)
        report.update(table=str(path), rows=rows)
        if not args.json:
            sys.stdout.write(f"wrote {rows} row(s) to {path}\n")
    if args.touchstone is not None:
        files = export_touchstone(ctx, args.touchstone)
        report.update(touchstone=str(args.touchstone), files=len(files))
        if not args.json:
            sys.stdout.write(f"wrote {len(files)} Touchstone file(s) to {args.touchstone}\n")
    if args.pareto is not None:
        from studies.pareto import export_pareto

        path, rows = export_pareto(ctx, args.pareto)
        report.update(pareto=str(path), pareto_rows=rows)
        if not args.json:
            sys.stdout.write(f"wrote the Pareto front, {rows} row(s), to {path}\n")
    if args.json:
        print_json(report)
    return 0
