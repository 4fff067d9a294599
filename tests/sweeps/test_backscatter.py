"""Backscatter formulas: power-wave reflection, modulation, differential RCS, link budget."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sweeps import backscatter as bs
from sweeps.design import Reader
from sweeps.errors import ConfigError
from sweeps.materials import C0

finite = {"allow_nan": False, "allow_infinity": False}
resistance = st.floats(min_value=1e-3, max_value=1e5, **finite)
reactance = st.floats(min_value=-1e5, max_value=1e5, **finite)


# --- Kurokawa, "Power waves and the scattering matrix", IEEE Trans. MTT 13(2), 1965


@pytest.mark.parametrize("za", [73 + 42.5j, 12 - 300j, 1500 + 900j, 50 + 0j])
def test_gamma_zero_for_conjugate_match(za: complex) -> None:
    assert abs(bs.power_wave_gamma(np.conj(za), za)) < 1e-15


@given(ra=resistance, xa=reactance, xl=reactance)
@settings(max_examples=200, deadline=None)
def test_gamma_unit_for_reactive_load(ra: float, xa: float, xl: float) -> None:
    # |Z_L - Z_a*|^2 - |Z_L + Z_a|^2 = -4 R_L R_a = 0 for R_L = 0 (Kurokawa 1965)
    za = complex(ra, xa)
    assert abs(bs.power_wave_gamma(1j * xl, za)) == pytest.approx(1.0, rel=1e-9)


@given(ra=resistance, xa=reactance, r1=st.floats(0, 1e5, **finite), x1=reactance,
       r2=st.floats(0, 1e5, **finite), x2=reactance)
@settings(max_examples=300, deadline=None)
def test_modulation_depth_bounded_for_passive_loads(ra, xa, r1, x1, r2, x2) -> None:
    za = complex(ra, xa)
    g1 = bs.power_wave_gamma(complex(r1, x1), za)
    g2 = bs.power_wave_gamma(complex(r2, x2), za)
    assert abs(g1) <= 1 + 1e-12 and abs(g2) <= 1 + 1e-12
    m = float(bs.modulation_depth(g1, g2))
    assert -1e-15 <= m <= 1 + 1e-12
    # modulation factor is its square (Griffin & Durgin, IEEE AP Magazine 51(2), 2009)
    assert float(bs.modulation_factor(g1, g2)) == pytest.approx(m * m, rel=1e-12, abs=1e-300)


def test_gamma_matches_scikit_rf_power_waves() -> None:
    """scikit-rf's power-wave definition (s_def="power") with the antenna as complex reference."""
    from skrf.network import z2s

    rng = np.random.default_rng(7)
    za = rng.uniform(1, 500, 20) + 1j * rng.uniform(-800, 800, 20)
    zl = rng.uniform(0, 300, 20) + 1j * rng.uniform(-2000, 2000, 20)
    ref = z2s(zl[:, None, None], z0=za[:, None], s_def="power")[:, 0, 0]
    np.testing.assert_allclose(bs.power_wave_gamma(zl, za), ref, rtol=1e-12, atol=1e-14)


def test_modulation_depth_uses_complex_difference() -> None:
    # equal magnitudes, opposite phase: |Gamma| alone would say no modulation
    assert bs.modulation_depth(0.8, -0.8) == pytest.approx(0.8)
    assert bs.modulation_depth(1j, 1.0) == pytest.approx(math.sqrt(2) / 2)
    assert bs.modulation_factor(1.0, -1.0) == pytest.approx(1.0)


def test_differential_rcs_short_vs_matched_resonant_dipole() -> None:
    """Short (Gamma = -1 at resonance) against matched (0): lambda^2 G^2 / (4 pi).

    With G = 1.64 of a half-wave dipole this is about 0.214 lambda^2, the matched-load RCS of
    a minimum-scattering antenna (REFERENCES.md "Scattering and backscatter", computed).
    """
    f = 915e6
    lam = C0 / f
    sigma = bs.differential_rcs_m2(f, 1.64, -1.0, 0.0)
    assert sigma / lam**2 == pytest.approx(1.64**2 / (4 * math.pi), rel=1e-12)
    assert sigma / lam**2 == pytest.approx(0.214, abs=5e-4)
    # the Barbot-Rance-Perret convention (IEEE TAP 69(9), 2021) would give a quarter of this


# --- monostatic link (radar equation; REFERENCES.md check values, computed)


def test_link_budget_reference_value() -> None:
    g = 10 ** (6 / 10)
    p = bs.backscatter_power_w(3.0, 915e6, 0.02298, 1.0, g)
    assert 10 * math.log10(p / 1e-3) == pytest.approx(-36.14, abs=0.005)
    p2 = bs.backscatter_power_w(6.0, 915e6, 0.02298, 1.0, g)
    assert 10 * math.log10(p / p2) == pytest.approx(12.04, abs=0.005)  # 40 log10 2


def test_read_range_inverts_link_and_scales_as_quarter_power() -> None:
    reader = Reader(tx_power_w=1.0, antenna_gain_dbi=6.0, sensitivity_w=1e-11,
                    cancellation_db=120.0)  # sensitivity-limited
    rr = bs.read_range(915e6, 0.02298, reader)
    assert rr.limited_by == "sensitivity"
    assert bs.backscatter_power_w(rr.range_m, 915e6, 0.02298, 1.0, 10 ** 0.6) == pytest.approx(
        reader.sensitivity_w, rel=1e-12)
    for factor in (2.0, 16.0, 0.1):
        rr2 = bs.read_range(915e6, 0.02298 * factor, reader)
        assert rr2.range_m / rr.range_m == pytest.approx(factor**0.25, rel=1e-12)


def test_read_range_carrier_floor() -> None:
    # 30 dBm transmitted, 60 dB cancellation: residual carrier -30 dBm, far above -80 dBm
    reader = Reader(tx_power_w=1.0, antenna_gain_dbi=6.0, sensitivity_w=1e-11,
                    cancellation_db=60.0)
    assert bs.carrier_floor_w(reader) == pytest.approx(1e-6)
    rr = bs.read_range(915e6, 0.02298, reader)
    assert rr.limited_by == "carrier"
    assert rr.floor_w == pytest.approx(1e-6)
    # at 3 m the tag returns -36.14 dBm, below the -30 dBm floor, so the range is shorter
    assert rr.range_m < 3.0
    assert rr.range_m == pytest.approx(3.0 * 10 ** ((-36.14 + 30) / 40), rel=1e-3)


@pytest.mark.parametrize(
    ("kwargs", "key"),
    [({"tx_power_w": 0.0}, "reader.tx_power_dbm"),
     ({"sensitivity_w": -1.0}, "reader.sensitivity_dbm"),
     ({"antenna_gain_dbi": math.nan}, "reader.antenna_gain_dbi")],
)
def test_bad_reader_names_the_key(kwargs: dict, key: str) -> None:
    with pytest.raises(ConfigError, match=key):
        bs.read_range(915e6, 0.01, Reader(**kwargs))


def test_read_range_needs_positive_delta_rcs() -> None:
    with pytest.raises(ConfigError, match="differential RCS"):
        bs.read_range(915e6, 0.0, Reader())


def test_caution_text_covers_regulation_and_exposure() -> None:
    text = bs.READ_RANGE_CAUTION
    for word in ("regulations", "exposure", "not a certification", "licensed"):
        assert word in text
