"""Issues 2 and 8 benchmark: one evaluation vs its LAPACK solves, and scaling with N.

Run: ``.venv/bin/python benchmarks/run_solver_bench.py`` (or ``make bench`` for everything).
Prints Markdown for the README. Ratios are measured side by side (interleaved repeats, CPU time
of this process, one BLAS thread as in a study worker); absolute times vary with the machine's
load.
"""

from __future__ import annotations

from threadpoolctl import threadpool_limits

from studies.bench import design_over_lapack, format_scaling, scaling


def main() -> None:
    with threadpool_limits(1):
        r = design_over_lapack(repeats=25)
        print(f"design_over_lapack: {r.ratio:.2f} CPU time, {r.ratio_wall:.2f} wall clock  "
              f"(evaluation {r.design_s * 1e3:.1f} ms, {r.frequencies} LAPACK solves of "
              f"N = {r.unknowns}: {r.lapack_s * 1e3:.2f} ms)")
        print()
        print(format_scaling(scaling()))


if __name__ == "__main__":
    main()
