"""The contracted likelihood gradient against scikit-learn's.

Outside reference: scikit-learn's ``GaussianProcessRegressor.log_marginal_likelihood``
with ``eval_gradient=True`` (Rasmussen & Williams 2006, "Gaussian Processes for Machine
Learning", eqs. 5.8-5.9, built from every dK/dtheta), and finite differences of the
value (scipy.optimize.approx_fprime).
"""

import numpy as np
import pytest
from scipy.optimize import approx_fprime
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, DotProduct, Matern, WhiteKernel

from dopantgap.learners import GPLearner, OnColumns, SameLabel
from dopantgap.learners.likelihood import (
    ContractedGradientGPR,
    contracted_log_marginal_likelihood,
    supports_contraction,
)


def _rows(seed=0, n_rows=120, n_descriptors=4, n_columns=6):
    rng = np.random.default_rng(seed)
    descriptors = rng.normal(size=(n_rows, n_descriptors))
    indicators = np.eye(n_columns)[rng.integers(0, n_columns, n_rows)]
    labels = rng.integers(0, 15, n_rows)
    codes = rng.integers(0, n_columns, n_rows)
    X = np.column_stack([descriptors, indicators, labels, codes])
    y = np.sin(descriptors[:, 0]) + indicators @ rng.normal(size=n_columns) + 0.1 * rng.normal(size=n_rows)
    return X, y


@pytest.mark.parametrize("nu", [0.5, 1.5, 2.5, np.inf])
def test_the_learners_kernel_matches_scikit_learn(nu):
    X, y = _rows()
    learner = GPLearner(label_columns=(10,), indicator_columns=tuple(range(4, 10)), ignored_columns=(11,),
                        nu=nu, smooth_columns=(3,))
    kernel = learner._build_kernel(X.shape[1])
    assert supports_contraction(kernel)
    reference = GaussianProcessRegressor(kernel=kernel, optimizer=None, normalize_y=True).fit(X, y)
    rng = np.random.default_rng(1)
    for _ in range(3):
        theta = kernel.theta + rng.normal(scale=0.4, size=kernel.theta.shape)
        value, gradient = reference.log_marginal_likelihood(theta, eval_gradient=True)
        got_value, got_gradient = contracted_log_marginal_likelihood(
            kernel.clone_with_theta(theta), X, reference.y_train_
        )
        assert got_value == pytest.approx(value, rel=1e-10)
        np.testing.assert_allclose(got_gradient, gradient, rtol=1e-8, atol=1e-8 * np.abs(gradient).max())


def test_isotropic_parts_and_finite_differences():
    X, y = _rows(2, n_rows=60)
    kernel = (
        ConstantKernel(2.0) * OnColumns(RBF(1.3), (0, 1, 2, 3))
        + ConstantKernel(0.3) * OnColumns(Matern(0.8, nu=1.5), (4, 5))
        + ConstantKernel(0.1) * OnColumns(SameLabel(), (10,))
        + WhiteKernel(0.05)
    )
    target = (y - y.mean()) / y.std()

    def value(theta):
        return contracted_log_marginal_likelihood(kernel.clone_with_theta(theta), X, target)[0]

    _, gradient = contracted_log_marginal_likelihood(kernel, X, target)
    np.testing.assert_allclose(gradient, approx_fprime(kernel.theta, value, 1e-6), rtol=1e-4, atol=1e-4)


def test_fixed_hyperparameters_have_no_gradient():
    X, y = _rows(3, n_rows=50)
    kernel = ConstantKernel(1.0, "fixed") * OnColumns(RBF([1.0, 2.0], "fixed"), (0, 1)) + WhiteKernel(0.1)
    reference = GaussianProcessRegressor(kernel=kernel, optimizer=None).fit(X, y)
    value, gradient = reference.log_marginal_likelihood(kernel.theta, eval_gradient=True)
    got_value, got_gradient = contracted_log_marginal_likelihood(kernel, X, y)
    assert len(got_gradient) == len(gradient) == 1
    assert got_value == pytest.approx(value, rel=1e-10)
    np.testing.assert_allclose(got_gradient, gradient, rtol=1e-8)


def test_unsupported_kernels_fall_back_to_scikit_learn():
    X, y = _rows(4, n_rows=40)
    kernel = DotProduct(1.0) + WhiteKernel(0.1)
    assert not supports_contraction(kernel)
    assert not supports_contraction(Matern(1.0, nu=3.5))
    ours = ContractedGradientGPR(kernel=kernel, optimizer=None).fit(X[:, :4], y)
    theirs = GaussianProcessRegressor(kernel=kernel, optimizer=None).fit(X[:, :4], y)
    for left, right in zip(ours.log_marginal_likelihood(ours.kernel_.theta, eval_gradient=True),
                           theirs.log_marginal_likelihood(theirs.kernel_.theta, eval_gradient=True)):
        np.testing.assert_array_equal(left, right)


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")  # a length scale at its bound
def test_the_search_reaches_scikit_learns_optimum():
    X, y = _rows(5, n_rows=100)
    learner = GPLearner(label_columns=(10,), indicator_columns=tuple(range(4, 10)), ignored_columns=(11,))
    kernel = learner._build_kernel(X.shape[1])
    ours = ContractedGradientGPR(kernel=kernel, normalize_y=True, random_state=0).fit(X, y)
    theirs = GaussianProcessRegressor(kernel=kernel, normalize_y=True, random_state=0).fit(X, y)
    assert ours.log_marginal_likelihood_value_ == pytest.approx(theirs.log_marginal_likelihood_value_, abs=1e-3)
    np.testing.assert_allclose(ours.predict(X), theirs.predict(X), atol=1e-3 * np.std(y))
