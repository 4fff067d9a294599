"""Refinement: new points where the surrogate is least certain, spaced apart."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import qmc

from surrogates import FeatureSpec, build_dataset, fit_surrogate
from surrogates.features import encode
from surrogates.refine import propose_points, refine_points
from sweeps.errors import ConfigError
from tests.surrogates.conftest import ANALYTIC_FEATURES

FEATS = [FeatureSpec("antenna.length_mm", 100.0, 200.0),
         FeatureSpec("antenna.width_mm", 0.5, 4.0)]


@pytest.fixture(scope="module")
def corner_surrogate():
    """Trained only where length < 150 mm: the other half of the space is unknown."""
    u = qmc.Sobol(2, scramble=True, seed=2).random_base2(5)
    df = pd.DataFrame({"antenna.length_mm": 100 + 50 * u[:, 0],
                       "antenna.width_mm": 0.5 + 3.5 * u[:, 1]})
    df["resonance_mhz"] = 1500 - 4 * df["antenna.length_mm"] + 5 * np.sin(df["antenna.width_mm"])
    return fit_surrogate(build_dataset(df, FEATS, ["resonance_mhz"]), "gp",
                         params={"gp": {"n_restarts_optimizer": 0}})


def test_new_points_go_where_the_model_knows_least(corner_surrogate):
    p = propose_points(corner_surrogate, 6, seed=1)
    assert len(p) == 6
    assert (p["antenna.length_mm"] > 150).all()
    assert list(p["score"]) == sorted(p["score"], reverse=True)


def test_spacing_rule_holds(corner_surrogate):
    d_min = 0.5 * (32 + 10) ** -0.5
    p = propose_points(corner_surrogate, 10, seed=1)
    U = encode(FEATS, p)
    d_new = np.linalg.norm(U[:, None] - U[None, :], axis=2)[np.triu_indices(10, 1)]
    d_old = np.linalg.norm(U[:, None] - corner_surrogate.X_train[None, :], axis=2)
    assert d_new.min() >= d_min and d_old.min() >= d_min
    tight = propose_points(corner_surrogate, 50, min_distance=0.45, seed=1)
    assert 0 < len(tight) < 50  # the rule leaves room for only a few


def test_refine_hook_returns_plannable_points(analytic_table):
    points, sur = refine_points(analytic_table, ANALYTIC_FEATURES,
                                ["resonance_mhz", "modulation_factor"], 4, model="gp")
    assert len(points) == 4
    for pt in points:
        assert set(pt) == {f.name for f in ANALYTIC_FEATURES}
        assert 100 <= pt["antenna.length_mm"] <= 200
        assert pt["switch.closed.r_ohm"] in (5.0, 20.0, 50.0)
        assert pt["antenna.filament"] in ("metal", "carbon")
        assert isinstance(pt["antenna.length_mm"], float)
    assert sur.training_sha256
    with pytest.raises(ConfigError, match=">= 1"):
        propose_points(sur, 0)
