"""The surrogate against the solver it stands in for (sweeps.evaluate), on a printed dipole.

Study: 128 Sobol points over length 120-180 mm, width 0.5-4 mm, conductivity 1e3-1e6 S/m (log),
0.4 mm thick trace, 600-1300 MHz, target 915 MHz. Checks on 32 independent random designs
solved separately (never in the training set), an inverse answer confirmed by the solver,
and a yield compared with brute-force Monte Carlo through the solver.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from surrogates.query import forward_table, solve_for
from surrogates.specs import Tolerance
from surrogates.yield_ import draw_parameters, yield_estimate
from tests.surrogates.surrogate_solver_cases import (
    LENGTH,
    SIGMA,
    WIDTH,
    evaluate_point,
    evaluate_points,
)


def test_every_target_picked_by_cross_validation(solver_surrogate):
    for name, tm in solver_surrogate.targets.items():
        assert set(tm.candidates) == {"gp", "boosting"}
        assert tm.cv.r2 >= max(c.r2 for c in tm.candidates.values()) - 1e-3
        assert tm.cv.r2 > 0.99, name
    assert solver_surrogate.targets["resonance_mhz"].n_dropped >= 0


def test_held_out_accuracy(solver_surrogate, solver_study):
    _, held = solver_study
    pred = forward_table(solver_surrogate, held[[LENGTH, WIDTH, SIGMA]])
    ok = held["resonance_mhz"].notna().to_numpy()
    assert ok.sum() >= 28  # a few lossy narrow traces have no resonance at all
    truth = held["resonance_mhz"].to_numpy(float, na_value=np.nan)[ok]
    rel = np.abs(pred["resonance_mhz"].to_numpy()[ok] - truth) / truth
    # issue 6 targets: held-out resonance error < 0.5 % mean and < 1 % max
    assert rel.mean() < 0.005
    assert rel.max() < 0.01
    eff = held["efficiency"].to_numpy(float)
    # issue 6 target: efficiency within 0.02 absolute
    assert np.max(np.abs(pred["efficiency"].to_numpy() - eff)) < 0.02
    assert not pred["extrapolated"].any()


@pytest.mark.parametrize("width_mm, sigma", [(2.0, 3e4), (1.0, 5e3)])
def test_inverse_answer_confirmed_by_the_solver(solver_surrogate, width_mm, sigma):
    r = solve_for(solver_surrogate, [LENGTH], {"resonance_mhz": 915.0},
                  fixed={WIDTH: width_mm, SIGMA: sigma})
    assert r.met and r.warnings == []
    length = r.free[LENGTH]
    assert 120.0 < length < 180.0
    check = evaluate_point((length, width_mm, sigma))
    # issue 6 target: the solver puts the resonance within 1 % of 915 MHz
    assert abs(check["resonance_mhz"] - 915.0) / 915.0 < 0.01
    # and within the surrogate's stated uncertainty plus 0.2 %, in fact
    assert abs(check["resonance_mhz"] - 915.0) < 4 * r.uncertainty["resonance_mhz"] + 1.83


@pytest.mark.slow
def test_yield_agrees_with_brute_force_solver_monte_carlo(solver_surrogate):
    nominal = {LENGTH: 150.0, WIDTH: 1.5, SIGMA: 2e4}
    tol = [Tolerance(LENGTH, 3.0), Tolerance(WIDTH, 0.45), Tolerance(SIGMA, 30.0, percent=True)]
    spec = {"resonance_mhz": (925.0, 945.0), "efficiency": (0.89, 1.0)}
    sur = yield_estimate(solver_surrogate, nominal, tol, spec, n_draws=20_000, seed=8)
    # brute force: 200 independent draws (another seed) each solved
    draws = draw_parameters(nominal, tol, 200, seed=99)
    runs = evaluate_points([tuple(r) for r in draws[[LENGTH, WIDTH, SIGMA]].to_numpy()])
    ok = np.array([
        r["resonance_mhz"] is not None and 925.0 <= r["resonance_mhz"] <= 945.0
        and 0.89 <= r["efficiency"] <= 1.0 for r in runs])
    p_b, n_b = ok.mean(), len(ok)
    # statistical error of the difference of two independent binomial estimates; agreement
    # within 2.58 of it (99 % two-sided), pooled share for the variance
    p = (p_b * n_b + sur.share * sur.n_draws) / (n_b + sur.n_draws)
    se = math.sqrt(p * (1 - p) * (1 / n_b + 1 / sur.n_draws))
    assert 0.2 < sur.share < 0.9  # a case where the answer is not trivially 0 or 1
    assert abs(sur.share - p_b) < 2.58 * se, (sur.share, p_b, se)
    # the surrogate and the solver agree on which spec fails most
    fail_res = np.mean([r["resonance_mhz"] is None or not 925 <= r["resonance_mhz"] <= 945
                        for r in runs])
    fail_eff = np.mean([not 0.89 <= r["efficiency"] <= 1.0 for r in runs])
    assert sur.worst == ("resonance_mhz" if fail_res > fail_eff else "efficiency")
