"""Samplers, parameter space and point ids.

Every sampler passes the same conformance class (after optuna's ``testing/pytest_samplers.py``
habit); the space-filling designs are also checked against their published defining properties.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import qmc

from studies.points import canonical_value, point_id
from studies.samplers import (
    SAMPLERS,
    GridSampler,
    LatinHypercubeSampler,
    RandomSampler,
    SobolSampler,
    get_sampler,
    make_plan,
)
from studies.space import Parameter, Space
from sweeps.errors import ConfigError


def _space() -> Space:
    return Space((
        Parameter("antenna.length_mm", "range", min=120.0, max=170.0, steps=3),
        Parameter("antenna.conductivity_s_per_m", "range", min=10.0, max=1e5, log=True, steps=3),
        Parameter("antenna.segments", "range", min=5, max=9, integer=True, steps=2),
        Parameter("antenna.shape", "choice", values=("dipole", "meander")),
    ))


class SamplerConformance:
    """The contract of :class:`studies.samplers.Sampler`; subclass and set ``sampler``."""

    sampler: type
    n = 32

    def plan(self, seed: int = 0, n: int | None = None, space: Space | None = None):
        return self.sampler().plan(space or _space(), n or self.n, seed)

    def test_same_seed_same_plan(self):
        assert self.plan(7) == self.plan(7)

    def test_different_seed_differs(self):
        assert self.plan(1) != self.plan(2)

    def test_values_in_range_and_typed(self):
        sp = _space()
        for row in self.plan(3):
            assert list(row) == sp.names
            for p in sp.parameters:
                assert p.contains(row[p.name]), (p.name, row[p.name])
            assert isinstance(row["antenna.segments"], int)
            assert isinstance(row["antenna.length_mm"], float)

    def test_no_duplicates(self):
        rows = self.plan(4)
        keys = [tuple(sorted(r.items())) for r in rows]
        assert len(set(keys)) == len(keys)

    def test_log_spacing(self):
        """A log parameter is spread evenly in log v: its log-median sits near the geometric
        mean of the bounds, far from the arithmetic mean (which a linear spread would give)."""
        sp = Space((Parameter("antenna.conductivity_s_per_m", "range", min=10.0, max=1e5,
                              log=True, steps=9),))
        v = np.array([r["antenna.conductivity_s_per_m"] for r in self.plan(5, 64, sp)])
        logv = np.log10(v)
        assert abs(np.median(logv) - 3.0) < 0.35  # log10 of the geometric mean 1e3
        assert np.median(v) < 0.1 * (10.0 + 1e5) / 2
        assert v.min() >= 10.0 and v.max() <= 1e5

    def test_does_not_touch_global_random_state(self):
        # the legacy global state is exactly what a sampler must leave alone
        np.random.seed(123)  # noqa: NPY002
        before = np.random.random()  # noqa: NPY002
        np.random.seed(123)  # noqa: NPY002
        self.plan(9)
        assert np.random.random() == before  # noqa: NPY002

    def test_empty_space_is_base_design(self):
        assert self.sampler().plan(Space(()), 4, 0) == [{}]


class TestRandom(SamplerConformance):
    sampler = RandomSampler


class TestSobol(SamplerConformance):
    sampler = SobolSampler


class TestLHS(SamplerConformance):
    sampler = LatinHypercubeSampler


class TestGrid(SamplerConformance):
    sampler = GridSampler

    def test_different_seed_differs(self):
        """The grid is the one sampler that ignores the seed (by design)."""
        assert self.plan(1) == self.plan(2)


def test_registry_matches_methods():
    assert set(SAMPLERS) == {"grid", "sobol", "lhs", "random"}
    with pytest.raises(ConfigError, match="sampler.method"):
        get_sampler("optimise")


def test_grid_is_full_factorial_with_log_steps():
    rows = make_plan(_space(), "grid", None, 0)
    assert len(rows) == 3 * 3 * 2 * 2
    sig = sorted({r["antenna.conductivity_s_per_m"] for r in rows})
    np.testing.assert_allclose(sig, [10.0, 1e3, 1e5], rtol=1e-12)  # geometric steps
    assert sorted({r["antenna.length_mm"] for r in rows}) == [120.0, 145.0, 170.0]
    assert rows[0] == {"antenna.length_mm": 120.0, "antenna.conductivity_s_per_m": 10.0,
                       "antenna.segments": 5, "antenna.shape": "dipole"}
    assert rows[1]["antenna.shape"] == "meander"  # last parameter varies fastest


def test_grid_needs_steps():
    sp = Space((Parameter("antenna.length_mm", "range", min=1.0, max=2.0),))
    with pytest.raises(ConfigError, match=r"space.antenna.length_mm: .*steps"):
        make_plan(sp, "grid", None, 0)


def test_sobol_is_prefix_of_scipy_sequence_and_balanced():
    """200 Sobol points are the first 200 of the seeded scrambled sequence of 256 (scipy's own
    engine is the reference); for 2^m points every 1-D projection has exactly one point per
    interval [k/2^m, (k+1)/2^m) (the (0, m, d)-net property in base 2, Sobol' 1967)."""
    u = SobolSampler().unit_samples(3, 200, 11)
    ref = qmc.Sobol(3, scramble=True, rng=np.random.default_rng(11)).random_base2(8)
    np.testing.assert_array_equal(u, ref[:200])
    full = SobolSampler().unit_samples(3, 64, 11)
    for j in range(3):
        assert sorted(np.floor(full[:, j] * 64).astype(int)) == list(range(64))


def test_lhs_one_point_per_stratum():
    """Latin hypercube: every parameter has exactly one point in each of the n strata
    (McKay, Beckman & Conover 1979)."""
    u = LatinHypercubeSampler().unit_samples(4, 50, 3)
    for j in range(4):
        assert sorted(np.floor(u[:, j] * 50).astype(int)) == list(range(50))


def test_integer_and_choice_shares_are_even():
    sp = Space((Parameter("antenna.turns", "range", min=1, max=4, integer=True),
                Parameter("antenna.shape", "choice", values=("a", "b", "c"))))
    u = np.column_stack([np.linspace(0, 1, 1200, endpoint=False)] * 2)
    rows = sp.from_unit(u)
    turns = [r["antenna.turns"] for r in rows]
    shapes = [r["antenna.shape"] for r in rows]
    assert [turns.count(k) for k in (1, 2, 3, 4)] == [300] * 4
    assert [shapes.count(k) for k in "abc"] == [400] * 3


def test_duplicates_dropped_with_choices_only():
    sp = Space((Parameter("antenna.shape", "choice", values=("a", "b")),))
    rows = make_plan(sp, "random", 50, 0)
    assert sorted(r["antenna.shape"] for r in rows) == ["a", "b"]


@pytest.mark.parametrize("kw, msg", [
    (dict(kind="range", min=2.0, max=1.0), "min <= max"),
    (dict(kind="range", min=0.0, max=1.0, log=True), "log range needs min > 0"),
    (dict(kind="range", min=1.0), "needs both min and max"),
    (dict(kind="choice", values=()), "must not be empty"),
    (dict(kind="choice", values=(1, 1)), "repeats"),
    (dict(kind="range", min=1.0, max=2.0, steps=0), "steps"),
])
def test_bad_parameters_name_the_key(kw, msg):
    with pytest.raises(ConfigError, match=msg) as ei:
        Parameter("antenna.width_mm", **kw)
    assert "space.antenna.width_mm" in str(ei.value)


def test_space_validate_names_where():
    sp = _space()
    good = {"antenna.length_mm": 150, "antenna.conductivity_s_per_m": 100.0,
            "antenna.segments": 7, "antenna.shape": "dipole"}
    assert sp.validate(good)["antenna.length_mm"] == 150
    with pytest.raises(ConfigError, match=r"p.csv line 3: antenna.length_mm = 300"):
        sp.validate({**good, "antenna.length_mm": 300}, "p.csv line 3")
    with pytest.raises(ConfigError, match="missing parameter"):
        sp.validate({"antenna.length_mm": 150}, "x")


def test_point_id_stable_and_sensitive():
    fp = {"kernel": "exact", "solver_version": "1"}
    a = point_id({"antenna.length_mm": 150.0, "b": "x"}, fp, "plan1")
    assert len(a) == 16 and int(a, 16) >= 0
    # key order and float noise below 12 significant digits do not matter
    assert point_id({"b": "x", "antenna.length_mm": 150.0 + 1e-12}, fp, "plan1") == a
    assert point_id({"antenna.length_mm": 150.1, "b": "x"}, fp, "plan1") != a
    assert point_id({"antenna.length_mm": 150.0, "b": "x"}, {**fp, "kernel": "reduced"},
                    "plan1") != a
    assert point_id({"antenna.length_mm": 150.0, "b": "x"}, fp, "plan2") != a
    assert canonical_value(-0.0) == 0.0 and math.copysign(1, canonical_value(-0.0)) == 1
    with pytest.raises(ValueError):
        canonical_value(float("nan"))
