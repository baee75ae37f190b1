"""The log marginal likelihood's gradient without an n x n x (hyperparameters) tensor."""

import numpy as np
from scipy.linalg import cho_solve, cholesky
from scipy.spatial.distance import pdist, squareform
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, Product, Sum, WhiteKernel

from dopantgap.learners.kernels import OnColumns, SameLabel

__all__ = ["ContractedGradientGPR", "contracted_log_marginal_likelihood", "supports_contraction"]

_MATERN_ORDERS = (0.5, 1.5, 2.5, np.inf)


def supports_contraction(kernel):
    """True when every part of ``kernel`` is one this module differentiates: sums,
    products, constants, white noise, ``OnColumns``, ``SameLabel``, RBF and Matern
    with nu in 0.5, 1.5, 2.5 or infinity."""
    if isinstance(kernel, (Sum, Product)):
        return supports_contraction(kernel.k1) and supports_contraction(kernel.k2)
    if isinstance(kernel, OnColumns):
        return supports_contraction(kernel.kernel)
    if isinstance(kernel, Matern):
        return float(kernel.nu) in _MATERN_ORDERS
    return type(kernel) in (ConstantKernel, WhiteKernel, SameLabel, RBF)


def contracted_log_marginal_likelihood(kernel, X, y, jitter=1e-10):
    """Log marginal likelihood of (X, y) under ``kernel`` and its gradient in ``kernel.theta``.

    The gradient is 0.5 tr(W dK/dtheta_j) with W = alpha alpha^T - K^-1 (Rasmussen &
    Williams 2006, eq. 5.9). scikit-learn builds every dK/dtheta_j (an n x n x p
    tensor, p hyperparameters) and contracts it with W; here W is pushed down the
    kernel's sums and products (a factor's weight is W times the other factors) and
    each part contracts its own derivative in closed form: for a stationary part with
    length scales l, dK_ik/dlog l_j = G_ik (x_ij - x_kj)^2 / l_j^2, whose contraction with
    a weight M is 2 sum_i x_ij^2 (M 1)_i - 2 x_j^T M x_j (x scaled by l). Memory n^2,
    time n^2 p in matrix products.

    Parameters
    ----------
    kernel : Kernel
        A kernel for which ``supports_contraction`` is true.
    X : ndarray of shape (n_samples, n_features)
    y : ndarray of shape (n_samples,)
        Targets as the regressor holds them (normalised if it normalises).
    jitter : float, default=1e-10
        Added to the diagonal, as scikit-learn's ``alpha``.

    Returns
    -------
    value : float
    gradient : ndarray of shape (len(kernel.theta),)
    """
    cache = {}
    K = _value(kernel, X, cache).copy()
    K[np.diag_indices_from(K)] += jitter
    try:
        factor = cholesky(K, lower=True, check_finite=False)
    except np.linalg.LinAlgError:
        return -np.inf, np.zeros_like(kernel.theta)
    y = np.asarray(y, dtype=float).reshape(len(X), -1)
    alpha = cho_solve((factor, True), y, check_finite=False)
    value = -0.5 * np.einsum("ik,ik->", y, alpha) - y.shape[1] * (
        np.log(np.diag(factor)).sum() + len(X) / 2 * np.log(2 * np.pi)
    )
    inverse = cho_solve((factor, True), np.eye(len(X)), check_finite=False)
    weight = 0.5 * (alpha @ alpha.T - y.shape[1] * inverse)
    gradient = _contract(kernel, X, weight, cache)
    return float(value), np.asarray(gradient, dtype=float)


def _value(kernel, X, cache):
    """Kernel matrix of X, every part's kept in ``cache`` (by identity)."""
    key = id(kernel)
    if key not in cache:
        if isinstance(kernel, Sum):
            cache[key] = _value(kernel.k1, X, cache) + _value(kernel.k2, X, cache)
        elif isinstance(kernel, Product):
            cache[key] = _value(kernel.k1, X, cache) * _value(kernel.k2, X, cache)
        elif isinstance(kernel, OnColumns):
            # a part always sees the same columns, so one cache serves the whole tree
            cache[key] = _value(kernel.kernel, X[:, list(kernel.columns)], cache)
        else:
            cache[key] = kernel(X)
    return cache[key]


def _contract(kernel, X, weight, cache):
    """sum_ik weight_ik dK_ik/dtheta_j for each free hyperparameter j of ``kernel``."""
    if isinstance(kernel, Sum):
        return np.concatenate([_contract(kernel.k1, X, weight, cache), _contract(kernel.k2, X, weight, cache)])
    if isinstance(kernel, Product):
        first, second = _value(kernel.k1, X, cache), _value(kernel.k2, X, cache)
        return np.concatenate([
            _contract(kernel.k1, X, weight * second, cache), _contract(kernel.k2, X, weight * first, cache)
        ])
    if isinstance(kernel, OnColumns):
        return _contract(kernel.kernel, X[:, list(kernel.columns)], weight, cache)
    if isinstance(kernel, ConstantKernel):
        if kernel.hyperparameter_constant_value.fixed:
            return np.empty(0)
        return np.array([kernel.constant_value * weight.sum()])
    if isinstance(kernel, WhiteKernel):
        if kernel.hyperparameter_noise_level.fixed:
            return np.empty(0)
        return np.array([kernel.noise_level * np.trace(weight)])
    if isinstance(kernel, (RBF, Matern)):
        if kernel.hyperparameter_length_scale.fixed:
            return np.empty(0)
        scaled = X / kernel.length_scale
        slope = weight * _radial_slope(kernel, scaled)
        per_column = 2.0 * (scaled ** 2 * slope.sum(axis=1)[:, None]).sum(axis=0) - 2.0 * (
            scaled * (slope @ scaled)
        ).sum(axis=0)
        return per_column if kernel.anisotropic else np.array([per_column.sum()])
    return np.empty(0)  # SameLabel: no hyperparameters


def _radial_slope(kernel, scaled):
    """-k'(r) / r of a stationary kernel at the scaled distances r (scikit-learn's
    gradient formulas for RBF and Matern, divided by the squared distance)."""
    distance = squareform(pdist(scaled, metric="euclidean"))
    nu = float(kernel.nu) if isinstance(kernel, Matern) else np.inf  # Matern subclasses RBF
    if nu == np.inf:
        return np.exp(-0.5 * distance ** 2)
    if nu == 2.5:
        return 5.0 / 3.0 * (1.0 + np.sqrt(5.0) * distance) * np.exp(-np.sqrt(5.0) * distance)
    if nu == 1.5:
        return 3.0 * np.exp(-np.sqrt(3.0) * distance)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.exp(-distance) / distance
    slope[~np.isfinite(slope)] = 0.0  # scikit-learn sets the 0/0 at r = 0 to 0
    return slope


class ContractedGradientGPR(GaussianProcessRegressor):
    """scikit-learn's ``GaussianProcessRegressor`` whose hyperparameter search reads the
    likelihood's gradient from :func:`contracted_log_marginal_likelihood` when the
    kernel allows (the same numbers to rounding, without the n x n x p tensor that took
    three quarters of a stage's fit on a 3,000-cell table); otherwise scikit-learn's.

    Parameters are scikit-learn's.
    """

    def log_marginal_likelihood(self, theta=None, eval_gradient=False, clone_kernel=True):
        """scikit-learn's, with the gradient contracted part by part where supported."""
        if theta is None or not eval_gradient or not supports_contraction(self.kernel_):
            return super().log_marginal_likelihood(theta, eval_gradient=eval_gradient, clone_kernel=clone_kernel)
        if clone_kernel:
            kernel = self.kernel_.clone_with_theta(theta)
        else:
            kernel = self.kernel_
            kernel.theta = theta
        return contracted_log_marginal_likelihood(kernel, self.X_train_, self.y_train_, jitter=self.alpha)
