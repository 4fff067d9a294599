"""Yield by Monte Carlo through a surrogate: interval, tolerance semantics, analytic cases."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binomtest, norm, qmc

from surrogates import FeatureSpec, build_dataset, fit_surrogate
from surrogates.specs import Tolerance, parse_range, parse_tolerance
from surrogates.yield_ import draw_parameters, plot_yield, wilson_interval, yield_estimate
from sweeps.errors import ConfigError


@pytest.mark.parametrize("k, n", [(0, 20), (3, 20), (95, 100), (9_000, 10_000), (20, 20)])
@pytest.mark.parametrize("conf", [0.9, 0.95, 0.99])
def test_wilson_interval_matches_scipy(k, n, conf):
    """Against scipy.stats.binomtest(...).proportion_ci(method="wilson")."""
    ref = binomtest(k, n).proportion_ci(confidence_level=conf, method="wilson")
    lo, hi = wilson_interval(k, n, conf)
    assert lo == pytest.approx(ref.low, abs=1e-12)
    assert hi == pytest.approx(ref.high, abs=1e-12)


def test_tolerance_parsing():
    assert parse_tolerance("antenna.width_mm", "±0.1") == Tolerance("antenna.width_mm", 0.1)
    t = parse_tolerance("antenna.width_mm", "+-5%")
    assert t.percent and t.value == 5.0 and t.half_width(2.0) == pytest.approx(0.1)
    assert parse_tolerance("a.b_mm", "0.2,uniform").distribution == "uniform"
    for bad in ("about 1", "±", "±1,triangular"):
        with pytest.raises(ConfigError, match="a.b_mm|tolerance"):
            parse_tolerance("a.b_mm", bad)
    assert parse_range("900:930") == (900.0, 930.0)
    assert parse_range("0.5:") == (0.5, math.inf)
    with pytest.raises(ConfigError, match="lo <= hi"):
        parse_range("930:900")


def test_normal_tolerance_is_three_sigma_and_uniform_is_the_interval():
    nominal = {"a.x_mm": 10.0, "a.y_mm": 5.0}
    d = draw_parameters(nominal, [Tolerance("a.x_mm", 0.3),
                                  Tolerance("a.y_mm", 10.0, percent=True,
                                            distribution="uniform")], 200_000, seed=2)
    assert d["a.x_mm"].std() == pytest.approx(0.1, rel=0.01)
    assert d["a.x_mm"].mean() == pytest.approx(10.0, abs=0.001)
    assert d["a.y_mm"].min() >= 4.5 and d["a.y_mm"].max() <= 5.5
    assert d["a.y_mm"].std() == pytest.approx(1.0 / math.sqrt(12.0), rel=0.01)


@pytest.fixture(scope="module")
def linear_surrogate():
    """y = 2 x1 + x2 over [0, 10]^2: a GP reproduces a plane almost exactly."""
    u = qmc.Sobol(2, scramble=True, seed=7).random_base2(5)
    df = pd.DataFrame({"a.x1_mm": 10 * u[:, 0], "a.x2_mm": 10 * u[:, 1]})
    df["resonance_mhz"] = 2.0 * df["a.x1_mm"] + df["a.x2_mm"]
    feats = [FeatureSpec("a.x1_mm", 0.0, 10.0), FeatureSpec("a.x2_mm", 0.0, 10.0)]
    return fit_surrogate(build_dataset(df, feats, ["resonance_mhz"]), "gp",
                         params={"gp": {"n_restarts_optimizer": 0}})


def test_yield_of_a_linear_response_matches_the_normal_distribution(linear_surrogate, tmp_path):
    # y = 2 x1 + x2 with x1 ~ N(5, 0.1), x2 ~ N(5, 0.2): y ~ N(15, sqrt(0.04 + 0.04))
    tol = [Tolerance("a.x1_mm", 0.3), Tolerance("a.x2_mm", 0.6)]
    spec = {"resonance_mhz": (14.8, 15.3)}
    r = yield_estimate(linear_surrogate, {"a.x1_mm": 5.0, "a.x2_mm": 5.0}, tol, spec,
                       n_draws=40_000, seed=3)
    sd = math.sqrt(0.08)
    exact = norm.cdf(0.3 / sd) - norm.cdf(-0.2 / sd)
    # 99.9 % two-sided binomial band around the exact share
    assert abs(r.share - exact) < 3.3 * math.sqrt(exact * (1 - exact) / r.n_draws)
    assert r.ci_low < exact < r.ci_high
    assert r.worst == "resonance_mhz" and r.fail_share["resonance_mhz"] == pytest.approx(
        1 - r.share)
    assert r.outside_share == 0.0 and r.warnings == []
    js = r.to_json()
    assert js["yield"] == r.share and js["worst_metric"] == "resonance_mhz"
    assert js["specs"]["resonance_mhz"] == [14.8, 15.3]
    png = plot_yield(r, tmp_path / "yield.png")
    assert png.read_bytes()[:4] == b"\x89PNG"


def test_model_uncertainty_adds_the_predictive_error_to_each_draw(analytic_surrogate):
    nominal = {"antenna.length_mm": 150.0, "antenna.conductivity_s_per_m": 1e3,
               "switch.closed.r_ohm": 20.0, "antenna.filament": "metal"}
    tol = [Tolerance("antenna.length_mm", 3.0)]
    spec = {"resonance_mhz": (-math.inf, math.inf)}
    a = yield_estimate(analytic_surrogate, nominal, tol, spec, seed=4)
    b = yield_estimate(analytic_surrogate, nominal, tol, spec, seed=4,
                       include_model_uncertainty=True)
    assert a.share == b.share == 1.0
    # same parameter draws; the difference is the predictive std times a standard normal
    np.testing.assert_array_equal(a.samples["antenna.length_mm"], b.samples["antenna.length_mm"])
    q = a.samples.drop(columns=["resonance_mhz", "pass"]).assign(**{
        k: v for k, v in nominal.items() if k != "antenna.length_mm"})
    std = analytic_surrogate.predict_values(q, ["resonance_mhz"])["resonance_mhz_std"]
    z = (b.samples["resonance_mhz"] - a.samples["resonance_mhz"]) / std
    assert abs(z.mean()) < 0.05 and z.std() == pytest.approx(1.0, abs=0.03)


def test_draws_outside_the_trained_range_are_flagged(linear_surrogate):
    r = yield_estimate(linear_surrogate, {"a.x1_mm": 9.9, "a.x2_mm": 5.0},
                       [Tolerance("a.x1_mm", 0.6)], {"resonance_mhz": (20.0, 30.0)})
    assert 0.3 < r.outside_share < 0.7
    assert any("outside the trained ranges" in w and "EXTRAPOLATED" in w for w in r.warnings)


def test_yield_arguments_are_checked(linear_surrogate, analytic_surrogate):
    nominal = {"a.x1_mm": 5.0, "a.x2_mm": 5.0}
    with pytest.raises(ConfigError, match="at least 10000 draws"):
        yield_estimate(linear_surrogate, nominal, [], {"resonance_mhz": (0, 1)}, n_draws=100)
    with pytest.raises(ConfigError, match="'efficiency' is not a surrogate target"):
        yield_estimate(linear_surrogate, nominal, [], {"efficiency": (0, 1)})
    with pytest.raises(ConfigError, match="given twice"):
        yield_estimate(linear_surrogate, nominal, [Tolerance("a.x1_mm", 1.0)] * 2,
                       {"resonance_mhz": (0, 1)})
    nominal_a = {"antenna.length_mm": 150.0, "antenna.conductivity_s_per_m": 1e3,
                 "switch.closed.r_ohm": 20.0, "antenna.filament": "metal"}
    with pytest.raises(ConfigError, match="choice parameter"):
        yield_estimate(analytic_surrogate, nominal_a, [Tolerance("switch.closed.r_ohm", 1.0)],
                       {"efficiency": (0, 1)})
    with pytest.raises(ConfigError, match="reaches values <= 0"):
        yield_estimate(analytic_surrogate, nominal_a,
                       [Tolerance("antenna.conductivity_s_per_m", 60.0, percent=True)],
                       {"efficiency": (0, 1)})


def test_draws_where_the_metric_does_not_exist_fail_its_spec(analytic_surrogate):
    # modulation_factor is null above 185 mm in the analytic study: a nominal at 190 mm
    nominal = {"antenna.length_mm": 190.0, "antenna.conductivity_s_per_m": 1e3,
               "switch.closed.r_ohm": 20.0, "antenna.filament": "metal"}
    r = yield_estimate(analytic_surrogate, nominal, [Tolerance("antenna.length_mm", 3.0)],
                       {"modulation_factor": (-1.0, 1.0)})
    assert r.share < 0.5 and r.worst == "modulation_factor"
    assert any("count as failing its spec" in w for w in r.warnings)
