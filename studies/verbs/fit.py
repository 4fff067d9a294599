"""``filamant fit STUDY.toml [--folds K] [--seed N] [--json]``: fit the study's surrogates.

Reads the study's evaluated points, fits one model per ``[surrogate] targets`` metric over the
``[space]`` parameters (``[surrogate] model``: ``auto`` picks a Gaussian process or boosted trees
per target by k-fold cross-validation), prints the cross-validated R², mean and largest error
of each, and saves the models beside the config as ``<study name>.surrogate.zip`` (numeric
arrays and JSON only; refused later if the config's plan changes).
"""

from __future__ import annotations

import argparse
import sys
from typing import Any

from studies.verbs.common import add_json_option, add_set_option, dash, print_json

__all__ = ["EXAMPLE", "add_arguments", "run"]

EXAMPLE = "filamant fit studies/examples/drawer_study.toml"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant fit``."""
    parser.add_argument("study", metavar="STUDY.toml", help="the study config")
    add_set_option(parser)
    parser.add_argument("--folds", type=int, default=5, metavar="K",
                        help="k of the k-fold cross-validation (default 5)")
    parser.add_argument("--seed", type=int, default=0,
                        help="seed of the folds, optimizer restarts and bootstrap (default 0)")
    add_json_option(parser)


def _num(v: float | None) -> float | None:
    return None if v is None or v != v else float(v)


def run(args: argparse.Namespace) -> int:
    """Fit and save the surrogate of ``args.study``."""
    from studies.api import load_context
    from studies.surrogate_api import fit_study
    from sweeps.errors import ConfigError

    if args.folds < 2:
        raise ConfigError(f"--folds must be >= 2 (got {args.folds})")
    ctx = load_context(args.study, args.set)
    from tqdm import tqdm

    # one step per model fitted and cross-validated; on a terminal only, like `run`'s bar
    bars: list[Any] = []

    def progress(done: int, total: int, msg: str) -> None:
        if not bars:
            bars.append(tqdm(total=total, unit="model", file=sys.stderr, desc="fit",
                             dynamic_ncols=True, disable=args.json or not sys.stderr.isatty()))
        bars[0].n = done
        bars[0].set_postfix_str(msg, refresh=True)

    try:
        res = fit_study(ctx, folds=args.folds, seed=args.seed, progress=progress)
    finally:
        for bar in bars:
            bar.close()
    sur = res.surrogate
    if args.json:
        print_json({
            "study": ctx.name, "surrogate": str(res.path), "points": sur.meta.get("n_done"),
            "features": [f.to_json() for f in sur.features],
            "targets": {n: {"model": t.kind, "unit": t.unit, "n_train": t.n_train,
                            "n_dropped": t.n_dropped, "cv_r2": _num(t.cv.r2),
                            "cv_mean_abs_error": _num(t.cv.mean_abs_error),
                            "cv_max_abs_error": _num(t.cv.max_abs_error),
                            "folds": t.cv.folds,
                            "candidates": {k: {"cv_r2": _num(c.r2),
                                               "cv_max_abs_error": _num(c.max_abs_error)}
                                           for k, c in t.candidates.items()}}
                        for n, t in sur.targets.items()},
            "training_sha256": sur.training_sha256, "notes": res.notes,
        })
        return 0
    out = sys.stdout
    out.write(f"study {ctx.name}: {sur.meta.get('n_done')} evaluated point(s); "
              f"model {ctx.study.surrogate.model}, {args.folds}-fold cross-validation\n")
    rows = [("target", "unit", "model", "points", "CV R2", "mean |err|", "max |err|")]
    for n, t in sur.targets.items():
        rows.append((n, t.unit or dash(), t.kind, str(t.n_train), f"{t.cv.r2:.5f}",
                     f"{t.cv.mean_abs_error:.4g}", f"{t.cv.max_abs_error:.4g}"))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for r in rows:
        out.write("  " + "  ".join(c.ljust(w) if i < 3 else c.rjust(w)
                                   for i, (c, w) in enumerate(zip(r, widths, strict=True)))
                  .rstrip() + "\n")
    for note in res.notes:
        out.write(f"  note: {note}\n")
    out.write(f"saved {res.path}\n")
    return 0
