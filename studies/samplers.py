"""Design-of-experiments samplers: the plan of a study, made once and stored up front.

Every sampler is a :class:`Sampler`; :data:`SAMPLERS` maps the config's ``[sampler] method`` to
one. The space-filling samplers draw points of the unit hypercube with ``scipy.stats.qmc``
(Sobol, Latin hypercube) or numpy's PCG64 generator (random), and :class:`~studies.space.Space`
maps them to parameter values, so log scales, integer keys and choices work alike for all of them.

References
----------
- I. M. Sobol', USSR Comput. Math. Math. Phys. 7(4), 86-112, 1967 (the sequence); A. B. Owen,
  "Scrambling Sobol' and Niederreiter-Xing points", J. Complexity 14, 1998 (the scrambling);
  both as implemented in ``scipy.stats.qmc.Sobol``.
- M. D. McKay, R. J. Beckman, W. J. Conover, Technometrics 21(2), 239-245, 1979 (Latin
  hypercube sampling), ``scipy.stats.qmc.LatinHypercube``.
"""

from __future__ import annotations

import itertools
import logging
import math
from abc import ABC, abstractmethod
from typing import ClassVar, Literal, get_args

import numpy as np
from numpy.typing import NDArray
from scipy.stats import qmc

from studies.space import Space, Value
from sweeps.errors import ConfigError

__all__ = [
    "Sampler",
    "SamplerName",
    "GridSampler",
    "SobolSampler",
    "LatinHypercubeSampler",
    "RandomSampler",
    "SAMPLERS",
    "get_sampler",
    "make_plan",
]

logger = logging.getLogger(__name__)

#: Plan samplers (``[sampler] method``); ``"optimize"`` is driven by optuna instead.
SamplerName = Literal["grid", "sobol", "lhs", "random"]


class Sampler(ABC):
    """Base class of the plan samplers.

    Contract (every sampler passes ``tests/studies/test_samplers.py::SamplerConformance``):

    - **Call order**: :meth:`plan` is called once, when a study is created; the plan is then
      stored and never re-drawn (a resumed run reads it from the store).
    - **Units**: values are in the units of the parameter names (``antenna.length_mm`` in mm),
      exactly as a user writes them in ``[space]``; ranges are inclusive and every value lies in
      its range or its list of choices.
    - **Determinism**: the plan is a pure function of ``(space, n, seed)``; no global random
      state is read or changed. Different seeds give different plans (except for the grid,
      which ignores the seed).
    - **Scale**: a ``log`` parameter is spread evenly in ``log v``.
    - **Uniqueness**: the plan holds no two identical points; duplicates (possible with
      integer or choice parameters) are dropped, keeping the first, so the plan may be shorter
      than ``n``.
    - **Process safety**: samplers hold no state between calls; they are not run on workers.

    Subclasses implement :meth:`unit_samples`; a sampler that is not a hypercube design (the
    grid) overrides :meth:`plan` itself.
    """

    name: ClassVar[str]
    #: Whether the sampler needs ``[sampler] points``.
    needs_points: ClassVar[bool] = True

    def plan(self, space: Space, n: int | None, seed: int) -> list[dict[str, Value]]:
        """Draw the plan: ``n`` points of ``space`` (fewer if duplicates were dropped).

        Parameters
        ----------
        space : Space
        n : int
            Number of points (``[sampler] points``).
        seed : int
            Seed (``[sampler] seed``).

        Returns
        -------
        list of dict
            One ``{parameter name: value}`` dict per point, in plan order.
        """
        if self.needs_points and (n is None or int(n) != n or n < 1):
            raise ConfigError(f"sampler.points: the {self.name} sampler needs a whole number of "
                              f"points >= 1 (got {n!r})")
        if space.dim == 0:
            logger.info("empty [space]: the plan is the base design alone")
            return [{}]
        u = self.unit_samples(space.dim, int(n), int(seed))  # type: ignore[arg-type]
        return unique(space.from_unit(u))

    @abstractmethod
    def unit_samples(self, d: int, n: int, seed: int) -> NDArray[np.float64]:
        """``n`` points of the unit hypercube ``[0, 1)^d``, shape (n, d); deterministic in seed."""


class RandomSampler(Sampler):
    """Independent uniform points from numpy's PCG64 generator seeded with ``seed``."""

    name = "random"

    def unit_samples(self, d: int, n: int, seed: int) -> NDArray[np.float64]:
        return np.random.default_rng(seed).random((n, d))


class SobolSampler(Sampler):
    """Owen-scrambled Sobol' points (``scipy.stats.qmc.Sobol``, seeded).

    Sobol' points keep their balance properties only for ``n`` a power of two. For any other
    ``n`` the first ``n`` points of the ``2^ceil(log2 n)``-point sequence are used (the prefix of
    the same sequence, so a study of 200 points is the first 200 of 256) and a note is logged.
    """

    name = "sobol"

    def unit_samples(self, d: int, n: int, seed: int) -> NDArray[np.float64]:
        m = max(0, math.ceil(math.log2(n)))
        if 2**m != n:
            logger.info("sobol: %d points is not a power of two; the balance properties of "
                        "Sobol' points hold for 2^m points (e.g. %d or %d)", n, 2 ** (m - 1), 2**m)
        engine = qmc.Sobol(d, scramble=True, rng=np.random.default_rng(seed))
        return engine.random_base2(m)[:n]


class LatinHypercubeSampler(Sampler):
    """Latin hypercube (``scipy.stats.qmc.LatinHypercube``, seeded): one point per stratum of
    every parameter."""

    name = "lhs"

    def unit_samples(self, d: int, n: int, seed: int) -> NDArray[np.float64]:
        return qmc.LatinHypercube(d, rng=np.random.default_rng(seed)).random(n)


class GridSampler(Sampler):
    """Full factorial grid: every combination of each parameter's grid values.

    A range contributes ``steps`` values (evenly spaced, or evenly spaced in ``log v`` for a log
    range, both ends included); a list contributes its values. The last parameter varies
    fastest. ``n`` and ``seed`` are ignored (a note is logged if ``n`` disagrees).
    """

    name = "grid"
    needs_points = False

    def plan(self, space: Space, n: int | None, seed: int) -> list[dict[str, Value]]:
        axes = [p.grid_values() for p in space.parameters]
        rows = [dict(zip(space.names, combo, strict=True)) for combo in itertools.product(*axes)]
        if n is not None and n != len(rows):
            logger.info("grid: sampler.points = %s is ignored; the grid has %d points", n,
                        len(rows))
        return unique(rows)

    def unit_samples(self, d: int, n: int, seed: int) -> NDArray[np.float64]:
        raise NotImplementedError("the grid is not a hypercube design")


SAMPLERS: dict[str, type[Sampler]] = {
    cls.name: cls for cls in (GridSampler, SobolSampler, LatinHypercubeSampler, RandomSampler)
}
assert set(SAMPLERS) == set(get_args(SamplerName))


def get_sampler(method: str) -> Sampler:
    """The sampler for ``[sampler] method``.

    Raises
    ------
    ConfigError
        For a method that is not a plan sampler.
    """
    try:
        return SAMPLERS[method]()
    except KeyError:
        raise ConfigError(
            f"sampler.method: {method!r} is not a plan sampler; expected one of "
            f"{', '.join(get_args(SamplerName))}"
        ) from None


def unique(rows: list[dict[str, Value]]) -> list[dict[str, Value]]:
    """Drop repeated points (same values), keeping the first of each; log how many went."""
    seen: set[tuple] = set()
    out = []
    for r in rows:
        key = tuple(sorted((k, (type(v).__name__, v)) for k, v in r.items()))
        if key not in seen:
            seen.add(key)
            out.append(r)
    if len(out) < len(rows):
        logger.info("plan: %d repeated point(s) dropped (integer or choice parameters)",
                    len(rows) - len(out))
    return out


def make_plan(space: Space, method: str, n: int | None, seed: int) -> list[dict[str, Value]]:
    """The plan of a study: ``get_sampler(method).plan(space, n, seed)``."""
    return get_sampler(method).plan(space, n, seed)
