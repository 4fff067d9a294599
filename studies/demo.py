"""``make demo``: the example study of ``studies/examples`` end to end, through the CLI.

Every step is a real ``filamant`` command run in-process (``studies.cli.main``) on copies of
the examples in ``demo-out/`` beside the current directory, so the printed output is what a user
sees. A failing step stops the demo with its exit status.
"""

from __future__ import annotations

import shutil
import sys
import time
from pathlib import Path

from studies.cli import main as filamant

EXAMPLES = Path(__file__).resolve().parent / "examples"


def steps(out: Path) -> list[list[str]]:
    """The demo's command lines (without the leading ``filamant``)."""
    design = str(out / "drawer_tag.toml")
    return [
        ["evaluate", design],
        ["evaluate", design, "--touchstone", str(out / "drawer_tag.s1p")],
    ]


def main(argv: list[str] | None = None) -> int:
    out = Path(argv[0] if argv else "demo-out").resolve()
    out.mkdir(parents=True, exist_ok=True)
    for name in ("drawer_tag.toml", "drawer_study.toml"):
        shutil.copy(EXAMPLES / name, out / name)
    t0 = time.perf_counter()
    for cmd in steps(out):
        print(f"\n$ filamant {' '.join(cmd)}", flush=True)
        status = filamant(cmd)
        if status != 0:
            print(f"demo step failed with status {status}", file=sys.stderr)
            return status
    print(f"\ndemo finished in {time.perf_counter() - t0:.1f} s; files in {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
