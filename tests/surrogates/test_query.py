"""Forward and inverse queries on an analytic surrogate (fast; the solver case is in
test_solver_surrogate.py)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import brentq

from surrogates.query import forward, forward_table, solve_for
from sweeps.errors import ConfigError
from tests.surrogates.conftest import analytic_metrics

NOMINAL = {"antenna.length_mm": 150.0, "antenna.conductivity_s_per_m": 1e4,
           "switch.closed.r_ohm": 20.0, "antenna.filament": "metal"}


def _truth(**values):
    row = dict(NOMINAL, **values)
    return analytic_metrics(pd.DataFrame({k: [v] for k, v in row.items()})).iloc[0]


def test_forward_answers_every_target_with_uncertainty(analytic_surrogate):
    p = forward(analytic_surrogate, {"antenna.length_mm": 140.0}, defaults=NOMINAL)
    truth = _truth(**{"antenna.length_mm": 140.0})
    assert set(p.values) == set(p.uncertainty) == {"resonance_mhz", "efficiency",
                                                   "modulation_factor"}
    # GP on 96 samples of a smooth function: within 1 MHz and within 4 sigma
    assert abs(p.values["resonance_mhz"] - truth["resonance_mhz"]) < 1.0
    assert abs(p.values["resonance_mhz"] - truth["resonance_mhz"]) < \
        4 * p.uncertainty["resonance_mhz"] + 1e-3
    assert p.warnings == [] and not p.extrapolated
    js = json.loads(json.dumps(p.to_json()))
    assert js["resonance_mhz"] == p.values["resonance_mhz"]
    assert set(js["uncertainty"]) == set(p.values) and js["warnings"] == []


def test_out_of_range_queries_are_answered_but_flagged(analytic_surrogate):
    inside = forward(analytic_surrogate, {}, defaults=NOMINAL)
    p = forward(analytic_surrogate, {"antenna.length_mm": 260.0}, defaults=NOMINAL)
    assert p.extrapolated
    assert any("antenna.length_mm=260 mm is outside the trained range 100-200 mm" in w
               and "EXTRAPOLATED" in w for w in p.warnings)
    # and the model says it knows less there
    assert p.uncertainty["resonance_mhz"] > 3 * inside.uncertainty["resonance_mhz"]
    t = forward_table(analytic_surrogate, pd.DataFrame([NOMINAL, dict(
        NOMINAL, **{"antenna.conductivity_s_per_m": 1e8})]))
    assert list(t["extrapolated"]) == [False, True]
    assert "antenna.conductivity_s_per_m outside" in t.loc[1, "warnings"]


def test_a_query_where_the_metric_did_not_exist_is_flagged(analytic_surrogate, analytic_table):
    # modulation_factor is null for lengths above 185 mm in the analytic study: ask next to
    # such a study point, and next to one where it exists
    names = list(NOMINAL)
    null_row = analytic_table[analytic_table["modulation_factor"].isna()].iloc[0][names]
    ok_row = analytic_table[analytic_table["antenna.length_mm"] < 150].iloc[0][names]
    for row, flagged in ((null_row, True), (ok_row, False)):
        q = dict(row.to_dict(), **{"antenna.length_mm": row["antenna.length_mm"] - 0.2})
        p = forward(analytic_surrogate, q)
        hit = any(w.startswith("modulation_factor: the nearest study point had no")
                  for w in p.warnings)
        assert hit is flagged
        assert not any(w.startswith("resonance_mhz:") for w in p.warnings)


def test_query_errors_name_the_key(analytic_surrogate):
    with pytest.raises(ConfigError, match="'antenna.thickness_mm' is not a surrogate feature"):
        forward(analytic_surrogate, {"antenna.thickness_mm": 0.4}, defaults=NOMINAL)
    with pytest.raises(ConfigError, match="no value for 'antenna.filament'"):
        forward(analytic_surrogate, {k: v for k, v in NOMINAL.items()
                                     if k != "antenna.filament"})
    with pytest.raises(ConfigError, match="'gold' is not one of the studied values"):
        forward(analytic_surrogate, {"antenna.filament": "gold"}, defaults=NOMINAL)


def test_solve_for_length_matches_the_analytic_root(analytic_surrogate):
    r = solve_for(analytic_surrogate, ["antenna.length_mm"], {"resonance_mhz": 1000.0},
                  defaults=NOMINAL)
    # reference: the root of the analytic response (scipy brentq)
    root = brentq(lambda x: _truth(**{"antenna.length_mm": x})["resonance_mhz"] - 1000.0,
                  100.0, 200.0)
    assert r.met
    assert abs(r.free["antenna.length_mm"] - root) < 0.3  # mm; ~0.2 MHz of model error
    assert abs(r.residual["resonance_mhz"]) < 1e-3
    assert r.fixed["antenna.filament"] == "metal"
    js = r.to_json()
    assert js["antenna.length_mm"] == r.free["antenna.length_mm"]
    assert set(js["uncertainty"]) == {"resonance_mhz", "efficiency", "modulation_factor"}


def test_solve_for_enumerates_free_choices(analytic_surrogate):
    # carbon lowers resonance by 15 MHz: with length fixed at 100 mm (1200 MHz metal),
    # 1185 MHz needs carbon
    r = solve_for(analytic_surrogate, ["antenna.filament"], {"resonance_mhz": 1185.0},
                  defaults=dict(NOMINAL, **{"antenna.length_mm": 100.0}))
    assert r.free == {"antenna.filament": "carbon"}


def test_two_targets_two_unknowns(analytic_surrogate):
    want = _truth(**{"antenna.length_mm": 130.0, "antenna.conductivity_s_per_m": 3e3})
    r = solve_for(analytic_surrogate, ["antenna.length_mm", "antenna.conductivity_s_per_m"],
                  {"resonance_mhz": float(want["resonance_mhz"]),
                   "efficiency": float(want["efficiency"])}, defaults=NOMINAL)
    assert r.met
    assert abs(r.free["antenna.length_mm"] - 130.0) < 0.5
    assert abs(np.log10(r.free["antenna.conductivity_s_per_m"]) - np.log10(3e3)) < 0.05


def test_unreachable_targets_are_reported_not_faked(analytic_surrogate):
    r = solve_for(analytic_surrogate, ["antenna.length_mm"], {"resonance_mhz": 500.0},
                  defaults=NOMINAL)
    assert not r.met
    assert any("not reached" in w for w in r.warnings)
    assert any("at the edge of its trained range" in w for w in r.warnings)
    assert r.free["antenna.length_mm"] == pytest.approx(200.0, abs=1e-6)


def test_solve_for_validates_its_arguments(analytic_surrogate):
    with pytest.raises(ConfigError, match="'q_factor' is not a surrogate target"):
        solve_for(analytic_surrogate, ["antenna.length_mm"], {"q_factor": 10.0},
                  defaults=NOMINAL)
    with pytest.raises(ConfigError, match="both free and set"):
        solve_for(analytic_surrogate, ["antenna.length_mm"], {"resonance_mhz": 1e3},
                  fixed={"antenna.length_mm": 120.0}, defaults=NOMINAL)
    with pytest.raises(ConfigError, match="not a surrogate feature"):
        solve_for(analytic_surrogate, ["antenna.radius_mm"], {"resonance_mhz": 1e3},
                  defaults=NOMINAL)
