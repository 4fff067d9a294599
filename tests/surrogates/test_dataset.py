"""Feature specs, unit-cube encoding and training sets built from study tables."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from surrogates.dataset import MIN_ROWS, build_dataset, training_sha256
from surrogates.features import (
    FeatureSpec,
    decode,
    encode,
    range_warnings,
    unit_of,
)
from sweeps.errors import ConfigError
from tests.surrogates.conftest import ANALYTIC_FEATURES


def test_units_come_from_the_name_suffix():
    assert unit_of("antenna.width_mm") == "mm"
    assert unit_of("antenna.conductivity_s_per_m") == "S/m"
    assert unit_of("switch.closed.l_nh") == "nH"
    assert unit_of("switch.open.c_pf") == "pF"
    assert unit_of("resonance_mhz") == "MHz"
    assert unit_of("delta_rcs_dbsm") == "dBsm"
    assert unit_of("efficiency") == ""


def test_log_feature_maps_decades_evenly_and_round_trips():
    f = FeatureSpec("antenna.conductivity_s_per_m", 1e3, 1e6, log=True)
    u = f.to_unit(np.array([1e3, 1e4, 1e5, 1e6]))
    np.testing.assert_allclose(u, [0, 1 / 3, 2 / 3, 1], atol=1e-15)
    np.testing.assert_allclose(f.from_unit(u), [1e3, 1e4, 1e5, 1e6], rtol=1e-12)


def test_linear_feature_and_categories_encode_and_decode():
    values = {"antenna.length_mm": [100.0, 150.0, 200.0],
              "antenna.conductivity_s_per_m": [1e2, 1e4, 1e6],
              "switch.closed.r_ohm": [5.0, 20.0, 50.0],
              "antenna.filament": ["metal", "carbon", "carbon"]}
    X = encode(ANALYTIC_FEATURES, values)
    assert X.shape == (3, 1 + 1 + 1 + 2)
    np.testing.assert_allclose(X[:, 0], [0, 0.5, 1])
    np.testing.assert_allclose(X[:, 1], [0, 0.5, 1])
    np.testing.assert_allclose(X[:, 2], [0, 15 / 45, 1])
    np.testing.assert_array_equal(X[:, 3:], [[1, 0], [0, 1], [0, 1]])
    back = decode(ANALYTIC_FEATURES, X)
    np.testing.assert_allclose(back["antenna.length_mm"], values["antenna.length_mm"])
    assert list(back["antenna.filament"]) == values["antenna.filament"]


def test_from_parameter_reads_a_study_parameter_spec_by_its_attributes():
    p = SimpleNamespace(name="antenna.width_mm", kind="range", min=0.5, max=4.0, log=False,
                        steps=None, values=None)
    f = FeatureSpec.from_parameter(p)
    assert (f.name, f.min, f.max, f.log, f.kind, f.unit) == ("antenna.width_mm", 0.5, 4.0,
                                                             False, "range", "mm")
    c = FeatureSpec.from_parameter(SimpleNamespace(name="switch.closed.r_ohm", kind="choice",
                                                   min=None, max=None, log=False,
                                                   values=[20, 50]))
    assert c.kind == "levels" and c.values == (20.0, 50.0)


@pytest.mark.parametrize("kwargs, match", [
    ({"min": 4.0, "max": 1.0}, "min < max"),
    ({"min": 0.0, "max": 1.0, "log": True}, "log scaling needs min > 0"),
    ({"values": (1.0,)}, "at least two distinct"),
    ({"min": None, "max": 2.0}, "needs min and max"),
])
def test_bad_feature_specs_name_the_key(kwargs, match):
    with pytest.raises(ConfigError, match=match) as e:
        FeatureSpec("antenna.width_mm", **kwargs)
    assert "antenna.width_mm" in str(e.value)


def test_encode_refuses_unknown_levels_and_bad_values():
    ok = {"antenna.length_mm": 150.0, "antenna.conductivity_s_per_m": 1e4,
          "switch.closed.r_ohm": 20.0, "antenna.filament": "metal"}
    with pytest.raises(ConfigError, match="'wood' is not one of the studied values"):
        encode(ANALYTIC_FEATURES, dict(ok, **{"antenna.filament": "wood"}))
    with pytest.raises(ConfigError, match="log-scaled and must be > 0"):
        encode(ANALYTIC_FEATURES, dict(ok, **{"antenna.conductivity_s_per_m": -1.0}))
    with pytest.raises(ConfigError, match="antenna.length_mm must be a number"):
        encode(ANALYTIC_FEATURES, dict(ok, **{"antenna.length_mm": "long"}))
    missing = dict(ok)
    del missing["switch.closed.r_ohm"]
    with pytest.raises(ConfigError, match="no value for surrogate feature 'switch.closed.r_ohm'"):
        encode(ANALYTIC_FEATURES, missing)


def test_range_warnings_flag_outside_and_between_levels():
    vals = {"antenna.length_mm": 230.0, "antenna.conductivity_s_per_m": 1e4,
            "switch.closed.r_ohm": 30.0, "antenna.filament": "metal"}
    w = range_warnings(ANALYTIC_FEATURES, vals)
    assert len(w) == 2
    assert "antenna.length_mm=230 mm is outside the trained range 100-200 mm" in w[0]
    assert "EXTRAPOLATED" in w[0]
    assert "switch.closed.r_ohm=30 ohm lies between the studied values" in w[1]
    assert range_warnings(ANALYTIC_FEATURES, dict(vals, **{"antenna.length_mm": 200.0,
                                                           "switch.closed.r_ohm": 50.0})) == []


def test_dataset_drops_null_rows_per_target_and_counts_them(analytic_table):
    ds = build_dataset(analytic_table, ANALYTIC_FEATURES,
                       ["resonance_mhz", "modulation_factor"])
    n_null = int(analytic_table["modulation_factor"].isna().sum())
    assert n_null > 0
    assert ds.targets["resonance_mhz"].n_dropped == 0
    mf = ds.targets["modulation_factor"]
    assert mf.n_dropped == n_null
    assert len(mf.y) + n_null == len(analytic_table) == ds.n_rows
    assert mf.X_null.shape == (n_null, 5)
    assert any(f"{n_null} dropped" in line for line in ds.summary())
    assert np.all(np.isfinite(mf.y))


def test_training_hash_ignores_row_order_but_sees_any_value_change(analytic_table):
    names = ["resonance_mhz", "efficiency"]
    h = training_sha256(analytic_table, ANALYTIC_FEATURES, names)
    shuffled = analytic_table.sample(frac=1.0, random_state=1)
    assert training_sha256(shuffled, ANALYTIC_FEATURES, names) == h
    edited = analytic_table.copy()
    edited.loc[3, "efficiency"] += 1e-12
    assert training_sha256(edited, ANALYTIC_FEATURES, names) != h
    assert training_sha256(analytic_table, ANALYTIC_FEATURES, names[:1]) != h


def test_dataset_errors_name_the_column(analytic_table):
    with pytest.raises(ConfigError, match="no metric 'q_factor'"):
        build_dataset(analytic_table, ANALYTIC_FEATURES, ["q_factor"])
    with pytest.raises(ConfigError, match="no column for parameter 'antenna.width_mm'"):
        build_dataset(analytic_table, [FeatureSpec("antenna.width_mm", 1, 2)],
                      ["resonance_mhz"])
    with pytest.raises(ConfigError, match="no evaluated points"):
        build_dataset(analytic_table.iloc[:0], ANALYTIC_FEATURES, ["resonance_mhz"])
    few = analytic_table.copy()
    few.loc[MIN_ROWS - 1:, "efficiency"] = np.nan
    with pytest.raises(ConfigError, match=f"known for only {MIN_ROWS - 1} of"):
        build_dataset(few, ANALYTIC_FEATURES, ["efficiency"])
    text = analytic_table.copy().astype({"efficiency": object})
    text.loc[0, "efficiency"] = "high"
    with pytest.raises(ConfigError, match="non-numeric values"):
        build_dataset(text, ANALYTIC_FEATURES, ["efficiency"])


def test_pandas_nullable_floats_are_read_as_null():
    df = pd.DataFrame({"antenna.length_mm": np.linspace(100, 200, 12),
                       "resonance_mhz": pd.array([1.0] * 10 + [None, None], dtype="Float64")})
    ds = build_dataset(df, [FeatureSpec("antenna.length_mm", 100, 200)], ["resonance_mhz"])
    assert ds.targets["resonance_mhz"].n_dropped == 2


def test_mixed_choice_levels_match_numbers_by_value():
    f = FeatureSpec("antenna.conductivity_s_per_m", values=(3e4, "pec"))
    assert f.kind == "category"
    X = encode([f], {"antenna.conductivity_s_per_m": [30000, "pec", 3.0e4]})
    np.testing.assert_array_equal(X, [[1, 0], [0, 1], [1, 0]])
    with pytest.raises(ConfigError, match="distinct"):
        FeatureSpec("antenna.conductivity_s_per_m", values=(3e4, 30000, "pec"))
