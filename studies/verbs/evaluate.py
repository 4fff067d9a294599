"""``filamant evaluate``: one design (TOML) or one Touchstone result → every metric.

``filamant evaluate DESIGN.toml [--set ...] [--json] [--touchstone PATH]`` loads the design,
solves it over its band (:func:`sweeps.evaluate.evaluate`) and prints the metrics at
``target_mhz``; ``--touchstone`` writes the port result as a Touchstone file (S-parameters
referred to ``feed.z0_ohm``) with the design's parameters in comment lines.

``filamant evaluate RESULT.sNp [--port N] [--target-mhz F] [--set ...]`` takes a measured or
simulated Touchstone file in place of a design (recognised by the ``.sNp`` suffix). The
metrics are read at ``--target-mhz`` (default: the middle of the file's frequency range),
``s11_db`` against ``feed.z0_ohm`` if set (default: the file's reference impedance). Only
``--set switch.*``, ``reader.*``, ``feed.z0_ohm`` and ``band.target_mhz`` apply to such a file;
the switch loads default to those of a design file without ``[switch]``.

``--json`` prints one JSON object: every metric name of DESIGN.md as a key (``null`` where the
metric does not exist), ``"reasons"`` (metric → why it is null), ``"target_mhz"`` and
``"cautions"`` (non-empty whenever a read range is given).
"""

from __future__ import annotations

import argparse
import logging
import sys
from pathlib import Path
from typing import Any

from studies.cautions import read_range_cautions
from studies.config import DesignConfig, load_design, touchstone_options
from studies.constants import METRIC_NAMES
from studies.designio import design_from, reader_from, solver_settings, switch_states
from studies.verbs.common import (
    add_json_option,
    add_set_option,
    dash,
    format_number,
    is_touchstone_path,
    port_number,
    print_json,
)
from sweeps.errors import ConfigError

__all__ = ["EXAMPLE", "add_arguments", "run", "design_comments", "metrics_report"]

EXAMPLE = ("filamant evaluate studies/examples/drawer_tag.toml --set antenna.length_mm=145 "
           "--json")

log = logging.getLogger(__name__)

_NOT_COMPUTED = "not computed by this version"



def _mhz(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a frequency in MHz (got {text!r})") from None
    if not (value > 0 and value < float("inf")):
        raise argparse.ArgumentTypeError(f"must be a frequency > 0 in MHz (got {text})")
    return value


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant evaluate``."""
    parser.add_argument("source", metavar="DESIGN.toml|RESULT.sNp",
                        help="a design file, or a Touchstone result (.s1p, .s2p, ...)")
    add_set_option(parser)
    add_json_option(parser)
    parser.add_argument("--touchstone", metavar="PATH", type=Path,
                        help="also write the port result as a Touchstone file (.s1p)")
    parser.add_argument("--port", type=port_number, metavar="N",
                        help="antenna port of a Touchstone result (default 1)")
    parser.add_argument("--target-mhz", type=_mhz, metavar="F",
                        help="frequency of the metrics in MHz (default: the design's "
                             "band.target_mhz; for a Touchstone file the middle of its range)")


def design_comments(config: DesignConfig, source: str | Path | None = None) -> list[str]:
    """Comment lines describing a design: ``section.key = value`` in config units.

    Used for the ``!`` lines of Touchstone files so a file says which design it holds.
    """
    lines = ["filamant evaluate" + (f" {source}" if source is not None else "")]
    canon = config.canonical()
    for section in ("antenna", "feed", "switch", "band"):
        lines += [f"{k} = {v}" for k, v in _flatten(canon[section], section)]
    return lines


def _flatten(value: Any, prefix: str) -> list[tuple[str, Any]]:
    if isinstance(value, dict):
        out: list[tuple[str, Any]] = []
        for k, v in value.items():
            out += _flatten(v, f"{prefix}.{k}")
        return out
    return [(prefix, value)]


def _evaluate(config: DesignConfig):  # noqa: ANN202  (sweeps.evaluate.Evaluation)
    from sweeps.evaluate import evaluate

    design, band, reader = design_from(config)
    return evaluate(design, band, solver_settings(config), reader=reader)


def metrics_report(values: dict[str, float | None], reasons: dict[str, str],
                   target_mhz: float) -> dict[str, Any]:
    """The ``--json`` object: every metric name, ``reasons``, ``target_mhz``, ``cautions``."""
    names = list(METRIC_NAMES) + [n for n in values if n not in METRIC_NAMES]
    out: dict[str, Any] = {}
    why: dict[str, str] = {}
    for name in names:
        value = values.get(name)
        out[name] = value
        if value is None:
            why[name] = reasons.get(name) or _NOT_COMPUTED
    out["reasons"] = why
    out["target_mhz"] = target_mhz
    out["cautions"] = read_range_cautions(values)
    return out


def _units() -> dict[str, str]:
    from sweeps.metrics import METRIC_UNITS

    return dict(METRIC_UNITS)


def _table_notes(notes: dict[str, str]) -> dict[str, str]:
    """Notes for the table, without the read-range caution (printed once below the table)."""
    from sweeps.backscatter import READ_RANGE_CAUTION

    out = {}
    for name, note in notes.items():
        note = note.replace(READ_RANGE_CAUTION, "").strip().rstrip(";").strip()
        if note:
            out[name] = note
    return out


def _print_table(title: str, report: dict[str, Any], notes: dict[str, str]) -> None:
    units = _units()
    notes = _table_notes(notes)
    names = [k for k in report if k not in ("reasons", "target_mhz", "cautions")]
    width = max(len(n) for n in names)
    shown = {n: ("" if units.get(n, "") == "1" else units.get(n, "")) for n in names}
    uw = max(4, *(len(u) for u in shown.values()))
    missing = dash()
    out = sys.stdout
    out.write(f"{title}\n")
    out.write(f"metrics at {format_number(report['target_mhz'])} MHz\n\n")
    out.write(f"  {'metric':<{width}}  {'value':>11}  {'unit':<{uw}}  note\n")
    for name in names:
        value = report[name]
        if value is None:
            text, note = missing, report["reasons"][name]
        else:
            text, note = format_number(value), notes.get(name, "")
        line = f"  {name:<{width}}  {text:>11}  {shown[name]:<{uw}}  {note}"
        out.write(line.rstrip() + "\n")
    if report["cautions"]:
        out.write("\nCaution:\n")
        for line in report["cautions"]:
            out.write(f"  - {line}\n")


def _run_design(args: argparse.Namespace) -> int:
    if args.port is not None:
        raise ConfigError(f"--port: applies to a Touchstone result only, not to {args.source}")
    overrides = list(args.set)
    if args.target_mhz is not None:
        overrides.append(f"band.target_mhz={args.target_mhz!r}")
    config = load_design(args.source, overrides)
    log.info("evaluating %s: %s over %d frequencies", args.source, config.antenna.shape,
             config.band.points)
    ev = _evaluate(config)
    log.info("solved %d unknowns", ev.n_unknowns)
    ms = ev.metrics
    if args.touchstone is not None:
        from sweeps.touchstone import write_touchstone

        written = write_touchstone(args.touchstone, ev.f_hz, ev.z, config.feed.z0_ohm,
                                   comments=design_comments(config, args.source))
        sys.stderr.write(f"filamant: wrote {written}\n")
    report = metrics_report(ms.values, ms.reasons, config.band.target_mhz)
    if args.json:
        print_json(report)
    else:
        a = config.antenna
        size = f"{a.length_mm:g} mm" if a.length_mm is not None else (
            f"{a.circumference_mm:g} mm around" if a.circumference_mm is not None else
            f"{len(a.wires or ())} wires")
        title = (f"{args.source}: {a.shape}, {size}, {ev.n_unknowns} unknowns, "
                 f"{config.band.points} frequencies {config.band.start_mhz:g}-"
                 f"{config.band.stop_mhz:g} MHz")
        _print_table(title, report, dict(ms.notes))
    return 0


def _run_touchstone(args: argparse.Namespace) -> int:
    if args.touchstone is not None:
        raise ConfigError(f"--touchstone: {args.source} is already a Touchstone result")
    opts = touchstone_options(args.set, target_mhz=args.target_mhz)
    from sweeps.touchstone import evaluate_touchstone

    ms = evaluate_touchstone(
        args.source, args.port or 1,
        target_hz=None if opts.target_mhz is None else opts.target_mhz * 1e6,
        z0_ohm=opts.z0_ohm, switch=switch_states(opts.switch), reader=reader_from(opts.reader),
    )
    if opts.target_mhz is not None:
        target = opts.target_mhz
    else:  # evaluate_touchstone's default: the middle of the data's range
        f = ms.arrays["f_hz"]
        target = 0.5 * (float(f[0]) + float(f[-1])) / 1e6
    report = metrics_report(ms.values, ms.reasons, target)
    if args.json:
        print_json(report)
    else:
        title = f"{args.source}: Touchstone result, port {args.port or 1}"
        _print_table(title, report, dict(ms.notes))
    return 0


def run(args: argparse.Namespace) -> int:
    """Evaluate the design or Touchstone file ``args.source`` and print its metrics."""
    if is_touchstone_path(args.source):
        return _run_touchstone(args)
    return _run_design(args)
