"""Metric assembly: names, closed-form checks on circuits, and null-with-reason semantics."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from sweeps import backscatter as bs
from sweeps.design import Reader, SwitchLoad, SwitchStates
from sweeps.errors import ConfigError
from sweeps.materials import C0
from sweeps.metrics import (
    ARRAY_NAMES,
    METRIC_NAMES,
    METRIC_UNITS,
    compute_metrics,
    resonances_hz,
)
from tests.sweeps.circuit_models import F0, W0, series_rlc


def test_names_follow_design_md() -> None:
    # DESIGN.md "Metric names", in that order
    assert METRIC_NAMES == (
        "resonance_mhz", "match_mhz", "s11_db", "bandwidth_mhz", "fractional_bandwidth",
        "q_factor", "chu_ratio", "efficiency", "gain_dbi", "zin_re_ohm", "zin_im_ohm",
        "gamma_closed", "gamma_open", "modulation_depth", "modulation_factor",
        "delta_rcs_dbsm", "read_range_m",
    )
    assert set(METRIC_UNITS) == set(METRIC_NAMES)
    for name, unit in METRIC_UNITS.items():  # the unit is in the name where it has one
        suffix = {"MHz": "_mhz", "dB": "_db", "ohm": "_ohm", "dBi": "_dbi", "dBsm": "_dbsm",
                  "m": "_m"}.get(unit)
        assert suffix is None or name.endswith(suffix), name


def test_series_rlc_closed_forms() -> None:
    """Series RLC, R = 50 = z0, Q = 30: every impedance metric has a closed form.

    |S11| <= -10 dB  <=>  |X| <= 2R/3, so the -10 dB band is exactly d(omega) = 2R/(3L)
    (the difference of the roots of omega L - 1/(omega C) = +-2R/3).
    """
    q, r = 30.0, 50.0
    f = np.linspace(0.95 * F0, 1.05 * F0, 1000)
    z = series_rlc(f, r, q)
    ms = compute_metrics(f, z, target_hz=F0, z0_ohm=r)
    v = ms.values
    assert v["resonance_mhz"] == pytest.approx(F0 / 1e6, rel=1e-9)
    assert v["match_mhz"] == pytest.approx(F0 / 1e6, rel=1e-6)
    assert v["zin_re_ohm"] == pytest.approx(r, rel=1e-12)
    assert v["zin_im_ohm"] == pytest.approx(0.0, abs=1e-6)
    ell = q * r / W0
    bw_exact = 2 * r / (3 * ell) / (2 * math.pi)
    # edges interpolated linearly in dB on 1e-4 relative steps: 1e-4 relative is plenty
    assert v["bandwidth_mhz"] * 1e6 == pytest.approx(bw_exact, rel=1e-4)
    assert v["fractional_bandwidth"] == pytest.approx(bw_exact / F0, rel=1e-4)
    assert v["q_factor"] == pytest.approx(q, rel=1e-6)
    # no geometry: chu_ratio explains itself
    assert v["chu_ratio"] is None and "size" in ms.reasons["chu_ratio"]
    # with a 40 mm enclosing sphere: Q over McLean's bound at k0 a
    ka = W0 / C0 * 0.04
    ms2 = compute_metrics(f, z, target_hz=F0, z0_ohm=r, enclosing_radius_m=0.04)
    assert ms2.values["chu_ratio"] == pytest.approx(q / (1 / ka**3 + 1 / ka), rel=1e-6)
    assert compute_metrics(f, z, target_hz=F0, enclosing_radius_m=0.0).values["chu_ratio"] is None


def test_s11_at_target_between_samples() -> None:
    f = np.linspace(0.8 * F0, 1.2 * F0, 41)
    z = series_rlc(f, 30.0, 10.0)
    target = 1.013 * F0  # off the grid: cubic spline of Z
    ms = compute_metrics(f, z, target_hz=target, z0_ohm=50.0)
    zt = series_rlc(np.array([target]), 30.0, 10.0)[0]
    assert complex(ms.values["zin_re_ohm"], ms.values["zin_im_ohm"]) == pytest.approx(
        zt, rel=1e-4)
    assert ms.values["s11_db"] == pytest.approx(20 * math.log10(abs((zt - 50) / (zt + 50))),
                                                abs=1e-3)


def test_resonance_refined_by_spline() -> None:
    # coarse 4 % steps: linear interpolation of X would be off by ~1e-3; the spline root is not
    f = np.linspace(0.6 * F0, 1.4 * F0, 21)
    z = series_rlc(f, 50.0, 5.0)
    assert resonances_hz(f, z)[0] == pytest.approx(F0, rel=2e-4)


def test_switch_metrics_against_backscatter_formulas() -> None:
    f = np.linspace(0.8 * F0, 1.2 * F0, 41)
    z = series_rlc(f, 70.0, 6.0)
    sw = SwitchStates(closed=SwitchLoad(r_ohm=15.0, l_h=2e-9),
                      open=SwitchLoad(r_ohm=1.0, c_f=0.2e-12))
    reader = Reader(tx_power_w=1.0, antenna_gain_dbi=6.0, sensitivity_w=1e-11,
                    cancellation_db=50.0)
    ms = compute_metrics(f, z, target_hz=F0, z0_ohm=50.0, gain_dbi=2.0, switch=sw,
                         reader=reader)
    za = 70.0 + 0j  # resonant at F0
    gc = bs.power_wave_gamma(sw.closed.impedance(F0), za)
    go = bs.power_wave_gamma(sw.open.impedance(F0), za)
    v = ms.values
    assert v["gamma_closed"] == pytest.approx(abs(gc), rel=1e-9)
    assert v["gamma_open"] == pytest.approx(abs(go), rel=1e-9)
    assert v["modulation_depth"] == pytest.approx(abs(gc - go) / 2, rel=1e-9)
    assert v["modulation_factor"] == pytest.approx(abs(gc - go) ** 2 / 4, rel=1e-9)
    lam = C0 / F0
    sigma = lam**2 * 10 ** 0.4 * abs(gc - go) ** 2 / (4 * math.pi)
    assert v["delta_rcs_dbsm"] == pytest.approx(10 * math.log10(sigma), abs=1e-9)
    assert v["read_range_m"] == pytest.approx(bs.read_range(F0, sigma, reader).range_m, rel=1e-9)
    assert "carrier" in ms.notes["read_range_m"] and "cautions" in ms.notes["read_range_m"]
    # band arrays use the complex loads over frequency
    for name in ARRAY_NAMES:
        if name != "efficiency":
            assert ms.arrays[name].shape == f.shape, name
    np.testing.assert_allclose(ms.arrays["z_open"], 1.0 + 1 / (1j * 2 * np.pi * f * 0.2e-12))
    np.testing.assert_allclose(
        ms.arrays["modulation_factor"],
        np.abs(ms.arrays["gamma_closed"] - ms.arrays["gamma_open"]) ** 2 / 4)


def test_missing_inputs_give_reasons() -> None:
    f = np.linspace(0.8 * F0, 1.2 * F0, 41)
    ms = compute_metrics(f, series_rlc(f, 50.0, 5.0), target_hz=F0)
    for name in ("efficiency", "gain_dbi", "gamma_closed", "modulation_depth",
                 "delta_rcs_dbsm", "read_range_m", "chu_ratio"):
        assert ms.values[name] is None
        assert ms.reasons[name]
    assert "currents" in ms.reasons["efficiency"]
    assert "fields" in ms.reasons["gain_dbi"]
    ms2 = compute_metrics(f, series_rlc(f, 50.0, 5.0), target_hz=F0, switch=SwitchStates(),
                          gain_dbi=2.0)
    assert ms2.values["delta_rcs_dbsm"] is not None
    assert "reader" in ms2.reasons["read_range_m"]


def test_no_resonance_no_band() -> None:
    f = np.linspace(0.3 * F0, 0.5 * F0, 21)  # far below resonance: capacitive, mismatched
    ms = compute_metrics(f, series_rlc(f, 5.0, 20.0), target_hz=0.4 * F0)
    for name in ("resonance_mhz", "q_factor", "chu_ratio", "bandwidth_mhz",
                 "fractional_bandwidth"):
        assert ms.values[name] is None, name
    assert "cross zero" in ms.reasons["resonance_mhz"]
    assert "never reaches -10 dB" in ms.reasons["bandwidth_mhz"]


def test_band_running_off_the_sweep_is_not_a_number() -> None:
    f = np.linspace(0.99 * F0, 1.01 * F0, 21)  # inside the -10 dB band of a low-Q RLC
    ms = compute_metrics(f, series_rlc(f, 50.0, 2.0), target_hz=F0)
    assert ms.values["bandwidth_mhz"] is None
    assert "sweep edge" in ms.reasons["bandwidth_mhz"]


def test_identical_switch_states() -> None:
    f = np.linspace(0.8 * F0, 1.2 * F0, 41)
    same = SwitchLoad(r_ohm=10.0)
    ms = compute_metrics(f, series_rlc(f, 50.0, 5.0), target_hz=F0, gain_dbi=2.0,
                         switch=SwitchStates(closed=same, open=same), reader=Reader())
    assert ms.values["modulation_depth"] == 0.0
    assert ms.values["delta_rcs_dbsm"] is None
    assert "identically" in ms.reasons["delta_rcs_dbsm"]
    assert ms.values["read_range_m"] is None


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [({"target_hz": 2 * F0}, "band.target_mhz"), ({"target_hz": F0, "z0_ohm": -1.0},
                                                  "feed.z0_ohm")],
)
def test_bad_inputs(kwargs: dict, match: str) -> None:
    f = np.linspace(0.8 * F0, 1.2 * F0, 41)
    with pytest.raises(ConfigError, match=match):
        compute_metrics(f, series_rlc(f, 50.0, 5.0), **kwargs)


impedances = arrays(
    np.complex128, st.integers(2, 40),
    elements=st.complex_numbers(max_magnitude=1e6, allow_nan=False, allow_infinity=False),
)


@given(z=impedances, frac=st.floats(0, 1), gain=st.one_of(st.none(), st.floats(-40, 10)))
@settings(max_examples=150, deadline=None)
def test_values_are_finite_or_null_with_reason(z: np.ndarray, frac: float, gain) -> None:
    """Whatever the impedance data, every metric is a finite float or None with a reason."""
    f = np.linspace(800e6, 1000e6, len(z))
    ms = compute_metrics(f, z, target_hz=800e6 + frac * 200e6, gain_dbi=gain,
                         switch=SwitchStates(), reader=Reader())
    assert set(ms.values) == set(METRIC_NAMES)
    for name, value in ms.values.items():
        if value is None:
            assert ms.reasons.get(name), name
        else:
            assert math.isfinite(value), name
            assert name not in ms.reasons
