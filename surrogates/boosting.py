"""Gradient-boosting surrogate with uncertainty from a bootstrap ensemble.

Each of ``n_members`` members is a least-squares gradient-boosted tree ensemble (J. H.
Friedman, "Greedy function approximation: a gradient boosting machine", Annals of Statistics
29(5), 2001) fitted by scikit-learn's :class:`~sklearn.ensemble.GradientBoostingRegressor` to a
bootstrap resample of the training rows (B. Efron & R. Tibshirani, *An Introduction to the
Bootstrap*, Chapman & Hall 1993). The prediction is the members' mean; the uncertainty their
standard deviation.

Why a bootstrap ensemble and not quantile models: solver data are deterministic, so the spread
of ``y`` given ``x`` (what quantile regression estimates) is essentially zero and quantile
bands collapse; what a designer needs is the model's own error between training points, which
the spread of models refitted to resampled data estimates (the bootstrap's variance of the
estimator).

After fitting, every tree is kept as plain arrays (split feature, threshold, children, leaf
value: the public ``tree_`` attributes of scikit-learn's trees), and prediction walks those
arrays, so a model rebuilt from a surrogate file predicts exactly as the fitted one.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.ensemble import GradientBoostingRegressor
from sklearn.utils.validation import check_is_fitted, check_random_state, validate_data

__all__ = ["BoostingSurrogate"]


class BoostingSurrogate(RegressorMixin, BaseEstimator):
    """Bootstrap ensemble of gradient-boosted trees.

    Parameters
    ----------
    n_members : int
        Bootstrap members (the uncertainty is their standard deviation).
    n_estimators : int
        Boosting stages per member.
    max_depth : int
        Depth of each tree.
    learning_rate : float
        Shrinkage.
    random_state : int
        Seed of the resampling and of the trees.

    Attributes
    ----------
    feature_, threshold_, left_, right_, value_ : ndarray, shape (n_nodes,)
        All trees' nodes, concatenated; ``left_ < 0`` marks a leaf; child indices are global.
    roots_ : ndarray, shape (n_members, n_estimators)
        Root node of every tree.
    bias_ : ndarray, shape (n_members,)
        Each member's constant term (its resample's mean).
    depth_ : int
        Largest tree depth (walk length).
    n_features_in_ : int
    """

    def __init__(
        self,
        n_members: int = 6,
        n_estimators: int = 150,
        max_depth: int = 3,
        learning_rate: float = 0.1,
        random_state: int = 0,
    ) -> None:
        self.n_members = n_members
        self.n_estimators = n_estimators
        self.max_depth = max_depth
        self.learning_rate = learning_rate
        self.random_state = random_state

    def fit(self, X: ArrayLike, y: ArrayLike) -> BoostingSurrogate:
        """Fit ``n_members`` boosted ensembles to bootstrap resamples; returns ``self``."""
        X, y = validate_data(self, X, y, y_numeric=True, dtype=np.float64)
        y = np.asarray(y, dtype=float)
        if int(self.n_members) < 2:
            raise ValueError(f"n_members must be >= 2 for an uncertainty (got {self.n_members})")
        rng = check_random_state(self.random_state)
        n = len(y)
        feats, thrs, lefts, rights, vals = [], [], [], [], []
        roots = np.zeros((int(self.n_members), int(self.n_estimators)), dtype=np.int64)
        bias = np.zeros(int(self.n_members))
        offset = 0
        depth = 0
        for b in range(int(self.n_members)):
            idx = rng.randint(0, n, n)
            yb = y[idx]
            bias[b] = float(np.mean(yb))
            gbr = GradientBoostingRegressor(
                n_estimators=int(self.n_estimators), max_depth=int(self.max_depth),
                learning_rate=float(self.learning_rate), init="zero",
                random_state=int(rng.randint(0, 2**31 - 1)),
            ).fit(X[idx], yb - bias[b])
            for t, est in enumerate(gbr.estimators_[:, 0]):
                tree = est.tree_
                left = tree.children_left.astype(np.int64)
                right = tree.children_right.astype(np.int64)
                leaf = left < 0
                feats.append(np.where(leaf, 0, tree.feature).astype(np.int64))
                thrs.append(np.where(leaf, 0.0, tree.threshold))
                lefts.append(np.where(leaf, -1, left + offset))
                rights.append(np.where(leaf, -1, right + offset))
                vals.append(float(self.learning_rate) * tree.value[:, 0, 0])
                roots[b, t] = offset
                offset += tree.node_count
                depth = max(depth, int(tree.max_depth))
        self.feature_ = np.concatenate(feats)
        self.threshold_ = np.concatenate(thrs)
        self.left_ = np.concatenate(lefts)
        self.right_ = np.concatenate(rights)
        self.value_ = np.concatenate(vals)
        self.roots_ = roots
        self.bias_ = bias
        self.depth_ = depth
        return self

    def _members(self, X: NDArray[np.float64]) -> NDArray[np.float64]:
        """Each member's prediction, shape (n_members, n).

        Walks every tree top-down, splitting the row set at each node (cost about
        ``depth * n`` comparisons per tree).
        """
        # scikit-learn's trees compare float32 inputs against float64 thresholds
        xt = np.ascontiguousarray(X.astype(np.float32).astype(np.float64).T)
        n = len(X)
        left, right = self.left_.tolist(), self.right_.tolist()
        feat, thr, val = self.feature_.tolist(), self.threshold_.tolist(), self.value_.tolist()
        all_rows = np.arange(n)
        out = np.empty((self.roots_.shape[0], n))
        for b, member_roots in enumerate(self.roots_.tolist()):
            acc = np.full(n, self.bias_[b])
            for root in member_roots:
                stack = [(root, all_rows)]
                while stack:
                    node, rows = stack.pop()
                    child = left[node]
                    if child < 0:
                        acc[rows] += val[node]
                        continue
                    go_left = xt[feat[node]][rows] <= thr[node]
                    stack.append((child, rows[go_left]))
                    stack.append((right[node], rows[~go_left]))
            out[b] = acc
        return out

    def predict(
        self, X: ArrayLike, return_std: bool = False
    ) -> NDArray[np.float64] | tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Ensemble mean (and standard deviation across members) at ``X``."""
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, dtype=np.float64)
        members = self._members(X)
        mean = members.mean(axis=0)
        if not return_std:
            return mean
        return mean, members.std(axis=0, ddof=1)

    # -- arrays + JSON form (see surrogates.store) ------------------------------------------
    def to_state(self) -> tuple[dict[str, Any], dict[str, NDArray]]:
        """Settings (JSON) and tree arrays of a fitted model."""
        check_is_fitted(self)
        params = {"n_members": int(self.n_members), "n_estimators": int(self.n_estimators),
                  "max_depth": int(self.max_depth), "learning_rate": float(self.learning_rate),
                  "random_state": int(self.random_state), "depth": int(self.depth_),
                  "n_features_in": int(self.n_features_in_)}
        arrays = {"feature": self.feature_, "threshold": self.threshold_, "left": self.left_,
                  "right": self.right_, "value": self.value_, "roots": self.roots_,
                  "bias": self.bias_}
        return params, arrays

    @classmethod
    def from_state(cls, params: dict[str, Any], arrays: dict[str, NDArray]) -> BoostingSurrogate:
        """Rebuild a fitted model from :meth:`to_state` output and check its tree structure.

        Raises
        ------
        ValueError
            Arrays of inconsistent shape or tree links that leave the node arrays or do not
            form trees of the stated depth.
        """
        m = cls(n_members=int(params["n_members"]), n_estimators=int(params["n_estimators"]),
                max_depth=int(params["max_depth"]), learning_rate=float(params["learning_rate"]),
                random_state=int(params["random_state"]))
        feat = np.asarray(arrays["feature"]).astype(np.int64)
        thr = np.asarray(arrays["threshold"], dtype=float)
        left = np.asarray(arrays["left"]).astype(np.int64)
        right = np.asarray(arrays["right"]).astype(np.int64)
        val = np.asarray(arrays["value"], dtype=float)
        roots = np.asarray(arrays["roots"]).astype(np.int64)
        bias = np.asarray(arrays["bias"], dtype=float)
        n_nodes = len(feat)
        p = int(params["n_features_in"])
        if not (thr.shape == left.shape == right.shape == val.shape == (n_nodes,)):
            raise ValueError("tree arrays have inconsistent lengths")
        if roots.shape != (m.n_members, m.n_estimators) or bias.shape != (m.n_members,):
            raise ValueError("tree roots or member biases have the wrong shape")
        inner = left >= 0
        if (np.any((feat < 0) | (feat >= p)) or np.any(left[inner] >= n_nodes)
                or np.any(right[inner] < 0) or np.any(right[inner] >= n_nodes)
                or np.any((roots < 0) | (roots >= n_nodes))
                or np.any(left[inner] <= np.flatnonzero(inner))
                or np.any(right[inner] <= np.flatnonzero(inner))):
            raise ValueError("tree links point outside the node arrays")
        m.feature_, m.threshold_, m.left_, m.right_, m.value_ = feat, thr, left, right, val
        m.roots_, m.bias_ = roots, bias
        m.depth_ = int(params["depth"])
        m.n_features_in_ = p
        # every walk must end on a leaf after depth_ steps (children follow their parent, so
        # there are no cycles and the frontier stays within n_nodes)
        frontier = np.unique(roots)
        for _ in range(m.depth_):
            inner_f = frontier[left[frontier] >= 0]
            frontier = np.unique(np.concatenate([frontier[left[frontier] < 0],
                                                 left[inner_f], right[inner_f]]))
        if np.any(left[frontier] >= 0):
            raise ValueError("trees are deeper than the stated depth")
        return m
