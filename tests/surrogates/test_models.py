"""Model kinds: scikit-learn's estimator contract, agreement with scikit-learn's own predictors,
and one conformance suite (fit / predict / uncertainty / state round trip) run on every kind.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.ensemble import GradientBoostingRegressor
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.utils.estimator_checks import parametrize_with_checks
from sklearn.utils.validation import check_random_state

from surrogates.boosting import BoostingSurrogate
from surrogates.gp import GPSurrogate
from surrogates.kinds import MODEL_CLASSES, make_model, rebuild


# scikit-learn's full estimator check suite (sklearn.utils.estimator_checks). Nothing is
# skipped; the array-API check skips itself unless SCIPY_ARRAY_API is set.
@parametrize_with_checks(
    [GPSurrogate(n_restarts_optimizer=0), BoostingSurrogate(n_members=3, n_estimators=20)]
)
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)


def _data(n=60, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.random((n, 3))
    y = np.sin(3 * X[:, 0]) + X[:, 1] ** 2 - 0.5 * X[:, 2]
    return X, y


#: lighter settings per kind so the suite stays fast (defaults are exercised elsewhere)
_LIGHT = {"gp": {"n_restarts_optimizer": 1}, "boosting": {"n_members": 4, "n_estimators": 60}}


def _model(kind, seed=0):
    return make_model(kind, seed, **_LIGHT.get(kind, {}))


@pytest.mark.parametrize("kind", sorted(MODEL_CLASSES))
class TestModelConformance:
    """Every surrogate kind must pass these (see surrogates/kinds.py, "to add one")."""

    def test_fit_returns_self_and_predicts_with_std(self, kind):
        X, y = _data()
        m = _model(kind, 0)
        assert m.fit(X, y) is m
        mean, std = m.predict(X[:10], return_std=True)
        assert mean.shape == std.shape == (10,)
        assert np.all(std >= 0)
        assert np.allclose(m.predict(X[:10]), mean)

    def test_learns_a_smooth_function(self, kind):
        X, y = _data(120)
        Xt, yt = _data(200, seed=1)
        m = _model(kind, 0).fit(X, y)
        # R^2 on fresh points; a smooth 3-D function with 120 samples (loose: both kinds)
        assert m.score(Xt, yt) > 0.9

    def test_seeded_fits_are_reproducible(self, kind):
        X, y = _data()
        a = _model(kind, 3).fit(X, y).predict(X[:5], return_std=True)
        b = _model(kind, 3).fit(X, y).predict(X[:5], return_std=True)
        np.testing.assert_array_equal(a[0], b[0])
        np.testing.assert_array_equal(a[1], b[1])

    def test_state_round_trip_predicts_identically(self, kind):
        X, y = _data()
        m = _model(kind, 0).fit(X, y)
        params, arrays = m.to_state()
        assert all(a.dtype.kind in "fiub" for a in arrays.values())
        m2 = rebuild(kind, params, {k: a.copy() for k, a in arrays.items()})
        Xt = np.random.default_rng(9).random((50, 3))
        for a, b in zip(m.predict(Xt, return_std=True), m2.predict(Xt, return_std=True),
                        strict=True):
            np.testing.assert_array_equal(a, b)


def test_gp_uncertainty_grows_away_from_data():
    """A GP's predictive std rises with distance from the data (Rasmussen & Williams 2006,
    eq. 2.26). The bootstrap trees' spread does not (trees extrapolate flat), which is why
    refinement adds a spacing rule; so this is a GP-only property."""
    X, y = _data(80)
    m = _model("gp").fit(X * 0.5, y)  # data only in the lower corner of the cube
    _, near = m.predict(np.full((1, 3), 0.25), return_std=True)
    _, far = m.predict(np.full((1, 3), 0.95), return_std=True)
    assert far[0] > 5 * near[0]


def test_gp_prediction_equals_sklearn_gpr_with_the_same_kernel():
    """Our Algorithm 2.1 (Rasmussen & Williams 2006) against scikit-learn's GPR."""
    X, y = _data(50)
    m = GPSurrogate(n_restarts_optimizer=1).fit(X, y)
    ref = GaussianProcessRegressor(m.learned_kernel(), alpha=GPSurrogate.JITTER,
                                   optimizer=None).fit(X, (y - m.y_mean_) / m.y_std_)
    Xt = np.random.default_rng(2).random((40, 3))
    rm, rs = ref.predict(Xt, return_std=True)
    mean, std = m.predict(Xt, return_std=True)
    # the two kernels agree to ~1e-12; the near-noise-free K^-1 y (|alpha| ~ 1e3 here)
    # amplifies that to ~1e-7 in the mean, so compare at 1e-6
    np.testing.assert_allclose(mean, rm * m.y_std_ + m.y_mean_, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(std, rs * m.y_std_, rtol=1e-5, atol=1e-6)
    # our closed-form Matern 5/2 cross-kernel against scikit-learn's Matern
    np.testing.assert_allclose(m._cross(Xt), m.learned_kernel()(Xt, X), rtol=1e-9, atol=1e-12)
    # the learned kernel is anisotropic Matern 2.5
    assert m.learned_kernel().k1.k2.nu == 2.5
    assert m.length_scale_.shape == (3,)


def test_boosting_tree_walk_equals_sklearn_gbr():
    """Our array walk of member b against scikit-learn's own predict of the same fit."""
    X, y = _data(70)
    m = BoostingSurrogate(n_members=3, n_estimators=30, random_state=4).fit(X, y)
    rng = check_random_state(4)
    Xt = np.random.default_rng(5).random((300, 3))
    members = m._members(Xt)
    for b in range(3):
        idx = rng.randint(0, len(y), len(y))
        bias = y[idx].mean()
        gbr = GradientBoostingRegressor(n_estimators=30, max_depth=3, learning_rate=0.1,
                                        init="zero", random_state=rng.randint(0, 2**31 - 1))
        gbr.fit(X[idx], y[idx] - bias)
        np.testing.assert_allclose(members[b], gbr.predict(Xt) + bias, rtol=0, atol=1e-12)


def test_gp_rebuild_refuses_a_foreign_cholesky_factor():
    X, y = _data(40)
    a = GPSurrogate(n_restarts_optimizer=0).fit(X, y)
    b = GPSurrogate(n_restarts_optimizer=0).fit(X[::-1], y[::-1])
    params, arrays = a.to_state()
    arrays = dict(arrays, L=b.to_state()[1]["L"])
    with pytest.raises(ValueError, match="Cholesky"):
        GPSurrogate.from_state(params, arrays)


def test_boosting_rebuild_refuses_broken_tree_links():
    X, y = _data(40)
    m = BoostingSurrogate(n_members=2, n_estimators=5).fit(X, y)
    params, arrays = m.to_state()
    left = arrays["left"].copy()
    left[np.flatnonzero(left >= 0)[0]] = len(left) + 7
    with pytest.raises(ValueError, match="tree links"):
        BoostingSurrogate.from_state(params, dict(arrays, left=left))


def test_fit_reports_one_step_per_model_then_the_end(analytic_table):
    """``progress(done, total, message)``: "auto" fits every kind for each target; the bar of
    `filamant fit` counts those fits and ends at its total."""
    from surrogates.dataset import build_dataset
    from surrogates.fit import fit_surrogate
    from tests.surrogates.conftest import ANALYTIC_FEATURES

    calls = []
    ds = build_dataset(analytic_table.iloc[:40], ANALYTIC_FEATURES,
                       ["resonance_mhz", "efficiency"])
    fit_surrogate(ds, {"resonance_mhz": "auto", "efficiency": "gp"}, seed=0, folds=2,
                  progress=lambda *a: calls.append(a))
    total = len(MODEL_CLASSES) + 1
    assert [c[:2] for c in calls] == [(i, total) for i in range(total)] + [(total, total)]
    assert calls[0][2].startswith("resonance_mhz: ") and calls[-2][2].startswith("efficiency: gp")
    assert calls[-1][2] == ""
