"""Gaussian-process surrogate: anisotropic Matérn (nu = 2.5) plus white noise.

The kernel is ``c * Matern(l_1..l_p, nu) + WhiteKernel(s2)`` on unit-cube inputs, with targets
normalised to zero mean and unit variance; hyper-parameters maximise the log marginal
likelihood with a few seeded optimizer restarts (C. E. Rasmussen & C. K. I. Williams,
*Gaussian Processes for Machine Learning*, MIT Press 2006, eq. 2.30 and §4.2 for the Matérn
class, eq. 4.17). Fitting uses scikit-learn's :class:`~sklearn.gaussian_process.
GaussianProcessRegressor`; prediction (Algorithm 2.1 of the same book) runs from the
learned arrays alone (``X_train_``, ``alpha_``, ``L_`` and the kernel's numbers), so a model
rebuilt from a surrogate file predicts exactly as the fitted one.
"""

from __future__ import annotations

import logging
import warnings
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.linalg import solve_triangular
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.exceptions import ConvergenceWarning
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Kernel, Matern, WhiteKernel
from sklearn.utils.validation import check_is_fitted, validate_data
from threadpoolctl import threadpool_limits

__all__ = ["GPSurrogate"]

logger = logging.getLogger(__name__)


def _kernel(constant: float, length_scale: NDArray[np.float64], nu: float, noise: float,
            *, bounds: dict[str, tuple[float, float]] | None = None) -> Kernel:
    b = bounds or {"constant": "fixed", "length_scale": "fixed", "noise": "fixed"}
    return (ConstantKernel(constant, b["constant"])
            * Matern(length_scale=length_scale, length_scale_bounds=b["length_scale"], nu=nu)
            + WhiteKernel(noise, b["noise"]))


def _tri_inv(L: NDArray[np.float64]) -> NDArray[np.float64]:
    """Inverse of a lower-triangular matrix (for the predictive variance)."""
    return solve_triangular(L, np.eye(len(L)), lower=True, check_finite=False)


class GPSurrogate(RegressorMixin, BaseEstimator):
    """Gaussian-process regressor with predictive standard deviation.

    Parameters
    ----------
    nu : float
        Matérn smoothness (2.5: twice mean-square differentiable).
    n_restarts_optimizer : int
        Extra optimizer starts from seeded random hyper-parameters.
    length_scale_bounds : tuple of float
        Bounds of every length scale, in unit-cube units.
    constant_bounds : tuple of float
        Bounds of the signal variance (targets are normalised to unit variance).
    noise_bounds : tuple of float
        Bounds of the white-noise variance (normalised units). Solver data are nearly
        noise-free, so the lower bound is small.
    random_state : int
        Seed of the optimizer restarts.
    initial : tuple, optional
        Starting hyper-parameters ``(constant, length_scales, noise)`` (e.g. those learned on
        the full data set, to re-tune cross-validation folds from); default ``(1, 1..., 1e-6)``.

    Attributes
    ----------
    X_train_ : ndarray, shape (n, p)
    alpha_ : ndarray, shape (n,)
        ``K^-1 y`` for the normalised targets.
    L_ : ndarray, shape (n, n)
        Lower Cholesky factor of ``K + jitter I``.
    L_inv_ : ndarray, shape (n, n)
        Its inverse (derived from ``L_``; not stored in surrogate files).
    y_train_ : ndarray, shape (n,)
        Normalised training targets.
    y_mean_, y_std_ : float
        Target normalisation.
    constant_, length_scale_, noise_ : float, ndarray, float
        Learned hyper-parameters.
    log_marginal_likelihood_ : float
    fit_warnings_ : list of str
        Optimizer notes (e.g. a hyper-parameter at its bound), also logged.
    n_features_in_ : int
    """

    #: Diagonal jitter added to K for the Cholesky factor (scikit-learn's ``alpha``).
    JITTER = 1e-10

    def __init__(
        self,
        nu: float = 2.5,
        n_restarts_optimizer: int = 4,
        length_scale_bounds: tuple[float, float] = (1e-2, 1e3),
        constant_bounds: tuple[float, float] = (1e-3, 1e6),
        noise_bounds: tuple[float, float] = (1e-12, 1e-1),
        random_state: int = 0,
        initial: tuple[float, tuple[float, ...], float] | None = None,
    ) -> None:
        self.nu = nu
        self.n_restarts_optimizer = n_restarts_optimizer
        self.length_scale_bounds = length_scale_bounds
        self.constant_bounds = constant_bounds
        self.noise_bounds = noise_bounds
        self.random_state = random_state
        self.initial = initial

    def fit(self, X: ArrayLike, y: ArrayLike) -> GPSurrogate:
        """Fit hyper-parameters and the posterior to ``(X, y)``; returns ``self``."""
        X, y = validate_data(self, X, y, y_numeric=True, dtype=np.float64)
        y = np.asarray(y, dtype=float)
        mean = float(np.mean(y))
        std = float(np.std(y))
        if not std > 0:
            std = 1.0
        yn = (y - mean) / std
        p = X.shape[1]
        c0, ls0, s0 = (1.0, np.ones(p), 1e-6) if self.initial is None else self.initial
        ls0 = np.broadcast_to(np.asarray(ls0, dtype=float), (p,)).copy()
        kernel = _kernel(float(c0), ls0, self.nu, float(s0), bounds={
            "constant": self.constant_bounds, "length_scale": self.length_scale_bounds,
            "noise": self.noise_bounds})
        gpr = GaussianProcessRegressor(
            kernel=kernel, alpha=self.JITTER, normalize_y=False,
            n_restarts_optimizer=self.n_restarts_optimizer, random_state=self.random_state,
        )
        # small dense algebra: one BLAS thread avoids oversubscribing shared cores
        with warnings.catch_warnings(record=True) as caught, threadpool_limits(1, "blas"):
            warnings.simplefilter("always", ConvergenceWarning)
            gpr.fit(X, yn)
        notes = []
        for w in caught:
            if issubclass(w.category, ConvergenceWarning):
                notes.append(" ".join(str(w.message).split()))
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        for note in notes:
            logger.debug("GP hyper-parameter fit: %s", note)
        k = gpr.kernel_
        self.constant_ = float(k.k1.k1.constant_value)
        self.length_scale_ = np.atleast_1d(np.asarray(k.k1.k2.length_scale, dtype=float))
        if self.length_scale_.size == 1 and p > 1:
            self.length_scale_ = np.full(p, self.length_scale_[0])
        self.noise_ = float(k.k2.noise_level)
        self.X_train_ = np.array(X, dtype=float)
        self.alpha_ = np.asarray(gpr.alpha_, dtype=float).ravel()
        self.L_ = np.asarray(gpr.L_, dtype=float)
        self.L_inv_ = _tri_inv(self.L_)
        self.y_train_ = yn
        self.y_mean_ = mean
        self.y_std_ = std
        self.log_marginal_likelihood_ = float(gpr.log_marginal_likelihood_value_)
        self.fit_warnings_ = notes
        return self

    def learned_kernel(self) -> Kernel:
        """The learned kernel (fixed hyper-parameters)."""
        check_is_fitted(self)
        return _kernel(self.constant_, self.length_scale_, self.nu, self.noise_)

    def predict(
        self, X: ArrayLike, return_std: bool = False
    ) -> NDArray[np.float64] | tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Posterior mean (and standard deviation, same units as ``y``) at ``X``.

        The standard deviation includes the learned white-noise level (the scatter the model
        cannot explain), as scikit-learn's regressor does.
        """
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, dtype=np.float64)
        mean = np.empty(len(X))
        std = np.empty(len(X)) if return_std else None
        step = 8192
        for s in range(0, len(X), step):
            xb = X[s:s + step]
            kt = self._cross(xb)
            mean[s:s + step] = kt @ self.alpha_
            if std is not None:
                v = kt @ self.L_inv_.T  # = (L^-1 k)^T: a product is cheaper than triangular solves
                var = self.constant_ + self.noise_ - np.einsum("ij,ij->i", v, v)
                std[s:s + step] = np.sqrt(np.clip(var, 0.0, None))
        mean = mean * self.y_std_ + self.y_mean_
        if std is None:
            return mean
        return mean, std * self.y_std_

    def _cross(self, X: NDArray[np.float64]) -> NDArray[np.float64]:
        """Kernel between ``X`` and the training inputs, shape (len(X), n_train).

        For nu = 2.5 (the default) the closed form ``c (1 + sqrt5 r + 5 r^2 / 3)
        exp(-sqrt5 r)`` (Rasmussen & Williams 2006, eq. 4.17) with squared distances through
        one matrix product; other nu through scikit-learn's kernel. The white-noise term
        does not couple distinct points.
        """
        if self.nu != 2.5:
            return self.learned_kernel()(X, self.X_train_)
        a = X * (np.sqrt(5.0) / self.length_scale_)
        b = self.X_train_ * (np.sqrt(5.0) / self.length_scale_)
        r = a @ b.T
        r *= -2.0
        r += np.einsum("ij,ij->i", a, a)[:, None]
        r += np.einsum("ij,ij->i", b, b)[None, :]
        np.clip(r, 0.0, None, out=r)
        np.sqrt(r, out=r)  # sqrt(5) |x - y| / l
        e = np.exp(-r)
        poly = r * r
        poly *= 1.0 / 3.0
        poly += r
        poly += 1.0
        poly *= e
        poly *= self.constant_
        return poly

    # -- arrays + JSON form (see surrogates.store) ------------------------------------------
    def to_state(self) -> tuple[dict[str, Any], dict[str, NDArray]]:
        """Hyper-parameters (JSON) and learned arrays of a fitted model."""
        check_is_fitted(self)
        params = {"nu": float(self.nu), "constant": self.constant_, "noise": self.noise_,
                  "y_mean": self.y_mean_, "y_std": self.y_std_,
                  "log_marginal_likelihood": self.log_marginal_likelihood_,
                  "n_features_in": int(self.n_features_in_),
                  "init": {"n_restarts_optimizer": int(self.n_restarts_optimizer),
                           "length_scale_bounds": list(self.length_scale_bounds),
                           "constant_bounds": list(self.constant_bounds),
                           "noise_bounds": list(self.noise_bounds),
                           "random_state": int(self.random_state)}}
        # ``initial`` only steers fitting; a rebuilt model is never refitted from it
        arrays = {"X_train": self.X_train_, "y_train": self.y_train_, "alpha": self.alpha_,
                  "L": self.L_, "length_scale": self.length_scale_}
        return params, arrays

    @classmethod
    def from_state(cls, params: dict[str, Any], arrays: dict[str, NDArray]) -> GPSurrogate:
        """Rebuild a fitted model from :meth:`to_state` output and check it is consistent.

        Raises
        ------
        ValueError
            Arrays of the wrong shape, or a Cholesky factor that does not factor the kernel
            matrix of the stored training inputs (swapped or edited arrays).
        """
        init = params["init"]
        m = cls(nu=float(params["nu"]), n_restarts_optimizer=int(init["n_restarts_optimizer"]),
                length_scale_bounds=tuple(init["length_scale_bounds"]),
                constant_bounds=tuple(init["constant_bounds"]),
                noise_bounds=tuple(init["noise_bounds"]), random_state=int(init["random_state"]))
        X = np.asarray(arrays["X_train"], dtype=float)
        alpha = np.asarray(arrays["alpha"], dtype=float)
        L = np.asarray(arrays["L"], dtype=float)
        ls = np.asarray(arrays["length_scale"], dtype=float)
        yn = np.asarray(arrays["y_train"], dtype=float)
        if X.ndim != 2:
            raise ValueError("GP training inputs must be a 2-D array")
        n, p = X.shape
        if (alpha.shape != (n,) or yn.shape != (n,) or L.shape != (n, n)
                or ls.shape != (p,)):
            raise ValueError("GP arrays have inconsistent shapes")
        if p != int(params["n_features_in"]):
            raise ValueError("GP input width does not match n_features_in")
        m.constant_ = float(params["constant"])
        m.noise_ = float(params["noise"])
        m.length_scale_ = ls
        m.X_train_ = X
        m.alpha_ = alpha
        m.L_ = L
        m.L_inv_ = _tri_inv(L)
        m.y_train_ = yn
        m.y_mean_ = float(params["y_mean"])
        m.y_std_ = float(params["y_std"])
        m.log_marginal_likelihood_ = float(params["log_marginal_likelihood"])
        m.fit_warnings_ = []
        m.n_features_in_ = p
        K = m.learned_kernel()(X) + cls.JITTER * np.eye(n)
        if not np.allclose(L @ L.T, K, rtol=1e-8, atol=1e-8 * float(np.max(np.abs(K)))):
            raise ValueError("GP Cholesky factor does not match the stored training inputs")
        if not np.allclose(K @ alpha, yn, rtol=1e-6, atol=1e-6):
            raise ValueError("GP weights do not reproduce the stored training targets")
        return m
