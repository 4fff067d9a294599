"""Shared fixtures: one solver study per session, and small analytic data sets."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import qmc

from surrogates import FeatureSpec, build_dataset, fit_surrogate
from tests.surrogates.surrogate_solver_cases import FEATURES, study_table, unit_to_points


@pytest.fixture(scope="session")
def solver_study() -> tuple[pd.DataFrame, pd.DataFrame]:
    """128 Sobol training points and 32 independent random held-out points, solved."""
    train = unit_to_points(qmc.Sobol(3, scramble=True, seed=11).random_base2(7))
    held = unit_to_points(np.random.default_rng(20260).random((32, 3)))
    return study_table(train, "t"), study_table(held, "h")


@pytest.fixture(scope="session")
def solver_surrogate(solver_study):
    """``model = "auto"`` surrogate of resonance and efficiency on the 128-point study."""
    train, _ = solver_study
    ds = build_dataset(train, FEATURES, ["resonance_mhz", "efficiency"])
    return fit_surrogate(ds, "auto", seed=0, plan_fingerprint="plan-dipole-128")


ANALYTIC_FEATURES = (
    FeatureSpec("antenna.length_mm", 100.0, 200.0),
    FeatureSpec("antenna.conductivity_s_per_m", 1e2, 1e6, log=True),
    FeatureSpec("switch.closed.r_ohm", values=(5.0, 20.0, 50.0)),
    FeatureSpec("antenna.filament", values=("metal", "carbon")),
)


def analytic_metrics(df: pd.DataFrame) -> pd.DataFrame:
    """Smooth made-up responses of the analytic features (not physics: model tests only)."""
    x = (df["antenna.length_mm"].to_numpy(float) - 100.0) / 100.0
    s = np.log10(df["antenna.conductivity_s_per_m"].to_numpy(float))
    r = df["switch.closed.r_ohm"].to_numpy(float)
    carbon = (df["antenna.filament"] == "carbon").to_numpy()
    out = df.copy()
    out["resonance_mhz"] = 1200.0 - 400.0 * x + 10.0 * np.sin(3.0 * x) - 15.0 * carbon
    out["efficiency"] = 1.0 / (1.0 + np.exp(-(s - 3.0))) - 0.002 * r
    mod = 0.3 + 0.2 * np.cos(2.0 * x) - 0.003 * r
    # null where the made-up metric "does not exist", as a study table has it
    out["modulation_factor"] = pd.array(np.where(x > 0.85, np.nan, mod), dtype="Float64")
    return out


@pytest.fixture(scope="session")
def analytic_table() -> pd.DataFrame:
    rng = np.random.default_rng(5)
    n = 96
    u = qmc.Sobol(2, scramble=True, seed=3).random_base2(7)[:n]
    df = pd.DataFrame({
        "point_id": [f"a{i:03d}" for i in range(n)],
        "antenna.length_mm": 100.0 + 100.0 * u[:, 0],
        "antenna.conductivity_s_per_m": 10 ** (2.0 + 4.0 * u[:, 1]),
        "switch.closed.r_ohm": rng.choice([5.0, 20.0, 50.0], n),
        "antenna.filament": rng.choice(["metal", "carbon"], n),
    })
    return analytic_metrics(df)


@pytest.fixture(scope="session")
def analytic_surrogate(analytic_table):
    ds = build_dataset(analytic_table, ANALYTIC_FEATURES,
                       ["resonance_mhz", "efficiency", "modulation_factor"])
    return fit_surrogate(ds, "gp", seed=1, plan_fingerprint="plan-analytic",
                         params={"gp": {"n_restarts_optimizer": 1}})
