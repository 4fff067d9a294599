"""``filamant run STUDY.toml [--set ...] [--fresh] [--json]``: launch a study or resume it.

The first run draws the plan, stores it in the study's database and evaluates every point on
the ``[cluster]``; a later run evaluates only the points still missing. The store's location is
printed first (stderr), the summary last (stdout; one JSON object with ``--json``). Ctrl-C or
SIGTERM stops cleanly: finished batches are stored, the run lease is released, exit status 130.
A config whose plan or solver settings changed is refused (``--fresh`` deletes the stored study
and starts over); so is a second run while one is live.
"""

from __future__ import annotations

import argparse
import logging
import signal
import sys
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from studies.verbs.common import (
    add_json_option,
    add_progress_option,
    add_set_option,
    print_json,
    whole_number,
)
from sweeps.errors import ConfigError

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = "filamant run studies/examples/drawer_study.toml --set sampler.points=64"

log = logging.getLogger(__name__)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant run``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    add_set_option(parser)
    parser.add_argument("--fresh", action="store_true",
                        help="delete the stored results of this study and start over")
    add_progress_option(parser)
    parser.add_argument("--refine", type=whole_number, metavar="N", default=0,
                        help="after the run, add N points where the surrogate is least certain, "
                             "evaluate them and refit the surrogate (sweep studies)")
    add_json_option(parser)



@contextmanager
def _sigterm_as_interrupt() -> Iterator[None]:
    """SIGTERM (a batch system's stop) stops the run like Ctrl-C."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum: int, frame: Any) -> None:
        raise KeyboardInterrupt

    old = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def _refine(ctx: Any, n: int, progress: bool | None,
            started: Any) -> tuple[Any, int, Any]:
    """``--refine N``: propose N points (surrogate_api.add_refinement_points), run, refit."""
    from studies.api import run_context
    from studies.surrogate_api import add_refinement_points, fit_study

    n_new = len(add_refinement_points(ctx, n, seed=ctx.study.sampler.seed))
    summary = run_context(ctx, fresh=False, progress=progress, on_start=started)
    outcome = fit_study(ctx)
    return summary, n_new, outcome.path


def run(args: argparse.Namespace) -> int:
    """Run the study ``args.study``; 0 when finished, 130 when interrupted."""
    from studies.api import load_context, run_context

    ctx = load_context(args.study, args.set)

    what = "trial(s) to complete" if ctx.method == "optimize" else "point(s) to evaluate"

    def started(url: str, todo: int, total: int) -> None:
        sys.stderr.write(f"filamant: study {ctx.name}: store {url} ({todo} of {total} "
                         f"{what})\n")
        sys.stderr.flush()

    if args.refine and ctx.method == "optimize":
        raise ConfigError(f"{args.study}: --refine adds surrogate-chosen points to a sweep study; "
                          "an optimization study chooses its own trials ([optimize] trials)")
    refined = None
    with _sigterm_as_interrupt():
        summary = run_context(ctx, fresh=args.fresh, progress=args.progress, on_start=started)
        if args.refine and not summary.interrupted:
            refined = _refine(ctx, args.refine, args.progress, started)
            summary = refined[0]
    if refined is not None and not args.json:
        n_new, fitted = refined[1], refined[2]
        sys.stdout.write(f"refined: {n_new} point(s) added where the surrogate was least "
                         f"certain; surrogate refitted to {fitted}\n")
    if args.json:
        print_json(summary.as_dict())
    else:
        s = summary
        out = sys.stdout
        out.write(f"study {s.study}: {s.total} point(s) in {s.store}\n")
        out.write(f"  done {s.done}, failed {s.failed}, still planned {s.planned}\n")
        if s.trials is not None:
            t = s.trials
            out.write(f"  trials: {t['complete']} of {t['target']} complete, {t['pruned']} "
                      f"pruned, {t['failed']} failed\n")
            if t.get("stopped"):
                out.write(f"  stopped early: {t['stopped']}\n")
        if s.evaluated:
            per = f", {s.seconds_per_point:.3g} s per point" if s.seconds_per_point else ""
            out.write(f"  this run: {s.evaluated} evaluated in {s.elapsed_s:.1f} s on "
                      f"{s.workers} worker(s){per}\n")
        elif not s.interrupted:
            out.write("  nothing left to evaluate\n")
        if s.failed:
            out.write(f"  failed points keep their reason: filamant status {args.study}\n")
        if s.interrupted:
            out.write("  interrupted: run the same command again to resume\n")
    return 130 if summary.interrupted else 0
