"""Issue 2 benchmark: one evaluation vs its LAPACK solves, and scaling with N.

Run: ``.venv/bin/python benchmarks/run_solver_bench.py`` (or ``make bench`` for everything).
Prints Markdown for the README. Ratios are measured side by side; absolute times vary with the
machine's load.
"""

from __future__ import annotations

from studies.bench import design_over_lapack, format_scaling, scaling


def main() -> None:
    r = design_over_lapack()
    print(f"design_over_lapack: {r.ratio:.2f}  (evaluation {r.design_s * 1e3:.1f} ms, "
          f"{r.frequencies} LAPACK solves of N = {r.unknowns}: {r.lapack_s * 1e3:.2f} ms)")
    print()
    print(format_scaling(scaling()))


if __name__ == "__main__":
    main()
