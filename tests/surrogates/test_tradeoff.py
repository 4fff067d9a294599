"""Non-dominated filtering and trade-off fronts through a surrogate."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import qmc

from surrogates import FeatureSpec, build_dataset, fit_surrogate
from surrogates.tradeoff import non_dominated, plot_front, tradeoff
from sweeps.errors import ConfigError


def _brute(F):
    """O(n^2) definition: i is dominated if some j is <= everywhere and < somewhere."""
    keep = []
    for i in range(len(F)):
        dom = np.all(F <= F[i], axis=1) & np.any(F < F[i], axis=1)
        if not dom.any():
            keep.append(i)
    return set(keep)


@pytest.mark.parametrize("k", [1, 2, 3, 4])
@pytest.mark.parametrize("decimals", [1, 2, 6])
def test_non_dominated_equals_the_definition(k, decimals):
    rng = np.random.default_rng(k * 10 + decimals)
    F = np.round(rng.random((1200, k)), decimals)  # rounding makes ties and duplicates
    assert set(non_dominated(F, block=128).tolist()) == _brute(F)


def test_non_dominated_finds_a_known_front():
    # points on the quarter circle x^2 + y^2 = 1 (mutually non-dominated) plus points each
    # dominated by one of them
    rng = np.random.default_rng(0)
    t = np.linspace(0, np.pi / 2, 50)
    circle = np.column_stack([np.cos(t), np.sin(t)])
    behind = circle[rng.integers(0, 50, 2000)] + rng.random((2000, 2)) * 0.5 + 1e-9
    F = np.vstack([behind, circle])
    assert set(non_dominated(F).tolist()) == set(range(2000, 2050))


def test_three_objective_sweep_handles_many_points_quickly():
    # points on the simplex f1 + f2 + f3 = 1 are all non-dominated; shifted copies are not
    rng = np.random.default_rng(1)
    p = rng.dirichlet(np.ones(3), 50_000)
    F = np.vstack([p, p + 0.01])
    assert set(non_dominated(F).tolist()) == set(range(50_000))


@pytest.fixture(scope="module")
def zdt2_surrogate():
    """Surrogate of the ZDT2 test problem (E. Zitzler, K. Deb & L. Thiele, Evolutionary
    Computation 8(2), 2000): f1 = x1, f2 = g (1 - (x1/g)^2), g = 1 + 9 x2, both minimised;
    the Pareto front is x2 = 0, f2 = 1 - f1^2 (non-convex)."""
    u = qmc.Sobol(2, scramble=True, seed=4).random_base2(6)
    g = 1.0 + 9.0 * u[:, 1]
    df = pd.DataFrame({"geom.x1": u[:, 0], "geom.x2": u[:, 1], "f1": u[:, 0],
                       "f2": g * (1.0 - (u[:, 0] / g) ** 2)})
    feats = [FeatureSpec("geom.x1", 0.0, 1.0), FeatureSpec("geom.x2", 0.0, 1.0)]
    return fit_surrogate(build_dataset(df, feats, ["f1", "f2"]), "gp",
                         params={"gp": {"n_restarts_optimizer": 1}})


def test_front_of_zdt2_through_the_surrogate(zdt2_surrogate, tmp_path):
    r = tradeoff(zdt2_surrogate, {"f1": "min", "f2": "min"})
    assert r.n_candidates >= 100_000
    f = r.front
    assert len(f) >= 20
    # on the analytic front x2 = 0. The candidates with the very smallest f1 are
    # non-dominated whatever their f2 (no other candidate beats them in f1): the finite
    # sample's end points, excluded here.
    inner = f[f["f1"] > 0.01]
    assert len(inner) >= 0.9 * len(f)
    assert inner["geom.x2"].max() < 0.01
    # the predictions along the front match ZDT2 at those points: 0.03 is 0.3 % of f2's span
    # (0-10) for a 64-point GP on the boundary of its data, where the front lies and where
    # picking minima favours points the model underestimates ...
    x1, g = inner["geom.x1"], 1.0 + 9.0 * inner["geom.x2"]
    assert np.max(np.abs(inner["f2"] - g * (1.0 - (x1 / g) ** 2))) < 0.03
    assert np.max(np.abs(inner["f1"] - x1)) < 0.01
    # ... and so lie within 0.03 + 2 (g - 1) of the ideal front f2 = 1 - f1^2
    assert np.all(np.abs(inner["f2"] - (1.0 - inner["f1"] ** 2)) < 0.03 + 2 * (g - 1))
    assert f["f1"].min() < 0.01 and f["f1"].max() > 0.99  # it spans the whole front
    assert list(f["f1"]) == sorted(f["f1"])  # sorted by the first objective
    assert {"f1_std", "f2_std", "flags"} <= set(f.columns)
    png = plot_front(r, tmp_path / "front.png")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 10_000


def test_constraints_and_feature_objectives(zdt2_surrogate, tmp_path):
    r = tradeoff(zdt2_surrogate, {"f2": "min", "geom.x1": "max"},
                 constraints={"f1": (0.2, 0.6), "geom.x2": (0.1, 1.0)})
    assert 0 < r.n_feasible < r.n_candidates
    assert r.front["f1"].between(0.2, 0.6).all()
    assert (r.front["geom.x2"] >= 0.1).all()
    empty = tradeoff(zdt2_surrogate, {"f1": "min"}, constraints={"f2": (50.0, 60.0)})
    assert len(empty.front) == 0 and "front is empty" in empty.warnings[0]
    three = tradeoff(zdt2_surrogate, {"f1": "min", "f2": "min", "geom.x2": "max"},
                     constraints={"f1": (0.3, 0.35)})
    assert len(three.front) > 100
    assert plot_front(three, tmp_path / "front3.png").stat().st_size > 10_000


def test_tradeoff_arguments_are_checked(zdt2_surrogate):
    with pytest.raises(ConfigError, match="'gain_dbi' is neither a surrogate target"):
        tradeoff(zdt2_surrogate, {"gain_dbi": "max"})
    with pytest.raises(ConfigError, match="goal must be max or min"):
        tradeoff(zdt2_surrogate, {"f1": "up"})
    with pytest.raises(ConfigError, match="at least 100000 candidates"):
        tradeoff(zdt2_surrogate, {"f1": "min"}, n_candidates=1000)
    with pytest.raises(ConfigError, match="at least one"):
        tradeoff(zdt2_surrogate, {})


def test_candidates_where_a_used_metric_does_not_exist_are_left_out(analytic_surrogate):
    r = tradeoff(analytic_surrogate, {"modulation_factor": "max", "efficiency": "max"})
    assert any("left out" in w and "modulation_factor" in w for w in r.warnings)
    # the analytic study has modulation_factor only below 185 mm
    assert r.front["antenna.length_mm"].max() < 190.0
    assert (r.front["flags"] == "").all()
