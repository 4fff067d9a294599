"""Surrogate models learned from study tables: fit, validate, save, query, trade-off, yield.

The handful of names a notebook user needs::

    from surrogates import build_dataset, fit_surrogate, save_surrogate, load_surrogate
    from surrogates import forward, solve_for, tradeoff, yield_estimate

Dependencies point one way: :mod:`studies` uses this package, this package uses :mod:`sweeps`
(errors, metric units) and never imports :mod:`studies`.
"""

from surrogates.boosting import BoostingSurrogate
from surrogates.dataset import Dataset, build_dataset, training_sha256
from surrogates.features import FeatureSpec
from surrogates.fit import fit_surrogate
from surrogates.gp import GPSurrogate
from surrogates.query import InverseResult, Prediction, forward, forward_table, solve_for
from surrogates.refine import propose_points, refine_points
from surrogates.sensitivity import surrogate_sobol
from surrogates.specs import Tolerance, parse_range, parse_tolerance
from surrogates.store import load_surrogate, save_surrogate, surrogate_path
from surrogates.surrogate import Surrogate
from surrogates.tradeoff import TradeoffResult, plot_front, tradeoff
from surrogates.yield_ import YieldResult, plot_yield, yield_estimate

__all__ = [
    "BoostingSurrogate",
    "Dataset",
    "FeatureSpec",
    "GPSurrogate",
    "InverseResult",
    "Prediction",
    "Surrogate",
    "Tolerance",
    "TradeoffResult",
    "YieldResult",
    "build_dataset",
    "fit_surrogate",
    "forward",
    "forward_table",
    "load_surrogate",
    "parse_range",
    "parse_tolerance",
    "plot_front",
    "plot_yield",
    "propose_points",
    "refine_points",
    "save_surrogate",
    "solve_for",
    "surrogate_path",
    "surrogate_sobol",
    "training_sha256",
    "tradeoff",
    "yield_estimate",
]
