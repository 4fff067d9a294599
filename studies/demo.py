"""``make demo``: the example study of ``studies/examples`` end to end, through the CLI.

The scenario (our own): a battery-free tag on a tool-cabinet drawer, read at 915 MHz; the study
compares a metal-filled and a carbon-filled filament and two contact resistances of the printed
switch over the dipole's length and trace width.

Every step is a real ``filamant`` command run in-process (:func:`studies.cli.main`) on copies
of the examples in ``demo-out/`` (or the folder given as the first argument), so the printed
output is what a user sees: evaluate one design → run the study → status → fit the surrogates →
a forward and an inverse ``ask`` → ``tradeoff`` → ``yield`` → ``export`` (table and
Touchstone) → ``report``. The study is run with ``--fresh``, so every demo starts from the
current example. A step whose verb is not in this version yet is listed and left out; a failing
step stops the demo with its exit status.
"""

from __future__ import annotations

import importlib.util
import shutil
import sys
import time
from pathlib import Path

from studies.cli import main as filamant
from studies.cli import verb_module_name

__all__ = ["EXAMPLES", "FILES", "steps", "available_steps", "main"]

EXAMPLES = Path(__file__).resolve().parent / "examples"
FILES = ("drawer_tag.toml", "drawer_study.toml")

#: The design the demo asks about: a metal-filled trace with a good contact. The forward ``ask``
#: predicts where the nominal 150 mm resonates, the inverse one the length that puts the
#: resonance at 915 MHz (about 152.6 mm), and ``yield`` checks that length against the US
#: 902-928 MHz band and a differential RCS floor under print tolerances. The report's
#: trade-off asks how much differential RCS a narrower trace (less filament) costs.
_DESIGN = ["--set", "antenna.width_mm=3", "--set", "antenna.conductivity_s_per_m=3e4",
           "--set", "switch.closed.r_ohm=10"]


def steps(out: Path) -> list[list[str]]:
    """Every command line of the demo (without the leading ``filamant``), in order."""
    design = str(out / "drawer_tag.toml")
    study = str(out / "drawer_study.toml")
    return [
        ["evaluate", design],
        ["evaluate", design, "--touchstone", str(out / "drawer_tag.s1p")],
        ["run", study, "--fresh"],
        ["status", study],
        ["fit", study],
        ["ask", study, "--set", "antenna.length_mm=150", *_DESIGN],
        ["ask", study, "--solve-for", "antenna.length_mm", "--target", "resonance_mhz=915",
         *_DESIGN],
        ["tradeoff", study, "--objective", "efficiency=max", "--objective",
         "delta_rcs_dbsm=max", "--constraint", "resonance_mhz=902:928",
         "--out", str(out / "tradeoff.csv")],
        ["yield", study, "--set", "antenna.length_mm=152.6", *_DESIGN,
         "--tolerance", "antenna.length_mm=±0.3", "--tolerance", "antenna.width_mm=±0.2",
         "--spec", "resonance_mhz=902:928", "--spec", "delta_rcs_dbsm=-13:",
         "--plot", str(out / "yield.png")],
        ["export", study, "--table", str(out / "drawer_study.csv"),
         "--touchstone", str(out / "touchstone")],
        ["report", study, "--out", str(out / "drawer_study-report"),
         "--objective", "delta_rcs_dbsm=max", "--objective", "antenna.width_mm=min",
         "--constraint", "resonance_mhz=902:928"],
    ]


def _available(verb: str) -> bool:
    return importlib.util.find_spec(verb_module_name(verb)) is not None


def available_steps(out: Path) -> tuple[list[list[str]], list[str]]:
    """The steps whose verb is in this version, and the verbs left out."""
    todo, left_out = [], []
    for cmd in steps(out):
        if _available(cmd[0]):
            todo.append(cmd)
        elif cmd[0] not in left_out:
            left_out.append(cmd[0])
    return todo, left_out


def main(argv: list[str] | None = None) -> int:
    """Run the demo into ``argv[0]`` (default ``demo-out``); returns the exit status."""
    out = Path(argv[0] if argv else "demo-out").resolve()
    out.mkdir(parents=True, exist_ok=True)
    for name in FILES:
        shutil.copy(EXAMPLES / name, out / name)
    todo, left_out = available_steps(out)
    t0 = time.perf_counter()
    for cmd in todo:
        print(f"\n$ filamant {' '.join(cmd)}", flush=True)
        t = time.perf_counter()
        status = filamant(cmd)
        sys.stdout.flush()
        if status != 0:
            print(f"demo step failed with status {status}", file=sys.stderr)
            return status
        print(f"({time.perf_counter() - t:.1f} s)", flush=True)
    if left_out:
        print(f"\nnot in this version yet, left out: {', '.join(left_out)}")
    print(f"\ndemo finished in {time.perf_counter() - t0:.1f} s; files in {out}")
    report = out / "drawer_study-report" / "report.html"
    if report.exists():
        print(f"open the report: {report}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
