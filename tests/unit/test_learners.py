"""Tests of the learners (GPLearner, BoostLearner, ColumnMeanLearner) and the two kernels.

Outside references used here: scikit-learn's own estimator checks; finite differences
(scipy.optimize.approx_fprime) for kernel gradients; the closed-form GP posterior of
Rasmussen & Williams 2006, "Gaussian Processes for Machine Learning", Algorithm 2.1;
the balanced one-way random-effects ANOVA estimator (Searle, Casella & McCulloch 1992,
"Variance Components", chapter 3).
"""

import numpy as np
import pytest
from scipy.linalg import cho_solve, cholesky, solve_triangular
from scipy.optimize import approx_fprime
from sklearn.base import clone
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, WhiteKernel
from sklearn.utils.estimator_checks import parametrize_with_checks
from threadpoolctl import threadpool_limits

from dopantgap.learners import (
    BoostLearner,
    ColumnMeanLearner,
    GPLearner,
    HostTransferGP,
    OnColumns,
    SameLabel,
    ShiftPriorLearner,
)
from dopantgap.learners.boosted import _shrunk_offsets


@pytest.fixture(autouse=True, scope="module")
def _one_thread():
    # HistGradientBoosting spins OpenMP threads; on the shared 2-core machine a busy
    # neighbour made a 3-member BoostLearner fit of 200 rows take 5 s instead of 0.06 s.
    with threadpool_limits(limits=1):
        yield


@parametrize_with_checks(
    [
        GPLearner(random_state=0),
        BoostLearner(random_state=0, n_members=3, max_iter=20),
        ColumnMeanLearner(),
        ShiftPriorLearner(),
        ShiftPriorLearner(residual_learner=GPLearner(random_state=0)),
        HostTransferGP(random_state=0),
    ],
)
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)


# ---------------------------------------------------------------------------
# Shared behaviour of the three learners


def _data(seed=0, n_rows=40):
    rng = np.random.default_rng(seed)
    descriptors = rng.uniform(-1.0, 1.0, size=(n_rows, 2))
    labels = rng.integers(0, 5, size=n_rows).astype(float)
    X = np.column_stack([descriptors, labels])
    y = np.sin(2.0 * descriptors[:, 0]) + 0.5 * descriptors[:, 1] + 0.3 * labels + rng.normal(0, 0.05, n_rows)
    return X, y


def _learners():
    return [
        GPLearner(label_columns=(2,), random_state=0),
        BoostLearner(label_columns=(2,), n_members=3, max_iter=20, random_state=0),
        ColumnMeanLearner(label_column=2),
    ]


@pytest.mark.parametrize("learner", _learners(), ids=lambda learner: type(learner).__name__)
def test_predict_leaves_the_input_unchanged(learner):
    X, y = _data()
    X_train, y_train = X.copy(), y.copy()
    learner.fit(X_train, y_train)
    np.testing.assert_array_equal(X_train, X)
    np.testing.assert_array_equal(y_train, y)
    X_query = X[:7].copy()
    X_query[0, 2] = 99.0  # a label never seen in training
    before = X_query.copy()
    learner.predict(X_query)
    learner.predict(X_query, return_std=True)
    learner.predict(X_query, return_cov=True)
    np.testing.assert_array_equal(X_query, before)


@pytest.mark.parametrize("learner", _learners(), ids=lambda learner: type(learner).__name__)
def test_std_is_the_square_root_of_the_covariance_diagonal(learner):
    X, y = _data()
    learner.fit(X, y)
    X_query = _data(seed=1, n_rows=9)[0]
    X_query[0, 2] = 99.0
    mean_std, std = learner.predict(X_query, return_std=True)
    mean_cov, cov = learner.predict(X_query, return_cov=True)
    np.testing.assert_allclose(mean_std, mean_cov, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(std, np.sqrt(np.diag(cov)), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(cov, cov.T, atol=1e-12)
    assert np.all(std > 0)


@pytest.mark.parametrize(
    "learner",
    [
        GPLearner(random_state=0),
        BoostLearner(n_members=3, max_iter=20, random_state=0),
        ColumnMeanLearner(),
    ],
    ids=lambda learner: type(learner).__name__,
)
def test_asking_for_std_and_cov_together_is_refused(learner):
    X, y = _data()
    learner.fit(X, y)
    with pytest.raises(ValueError, match="not both"):
        learner.predict(X[:3], return_std=True, return_cov=True)


def test_same_seed_gives_identical_predictions_and_another_seed_does_not():
    X, y = _data(n_rows=60)
    X_query = _data(seed=2, n_rows=10)[0]

    def gp(seed):
        # a subsample and a restart make the seed matter
        learner = GPLearner(max_optimise_samples=25, n_restarts_optimizer=1, random_state=seed)
        return learner.fit(X, y).predict(X_query, return_std=True)

    def boost(seed):
        learner = BoostLearner(label_columns=(2,), n_members=3, max_iter=20, random_state=seed)
        return learner.fit(X, y).predict(X_query, return_std=True)

    for build in (gp, boost):
        first, second, other = build(3), build(3), build(4)
        np.testing.assert_array_equal(first[0], second[0])
        np.testing.assert_array_equal(first[1], second[1])
        assert not np.array_equal(first[0], other[0])
    column_mean = [ColumnMeanLearner(label_column=2).fit(X, y).predict(X_query) for _ in range(2)]
    np.testing.assert_array_equal(column_mean[0], column_mean[1])


def test_gp_tunes_on_at_least_ten_rows_per_hyperparameter(monkeypatch):
    """However small ``max_optimise_samples``, a kernel with many length scales is tuned
    on 10 rows per hyperparameter (or every row); the conditioning sees every row."""
    import dopantgap.learners.gaussian_process as gaussian_process

    seen = []
    real = gaussian_process._fit_quietly

    def spy(regressor, X, y):
        seen.append(len(X))
        return real(regressor, X, y)

    monkeypatch.setattr(gaussian_process, "_fit_quietly", spy)
    X, y = _data(n_rows=300)
    learner = GPLearner(label_columns=(2,), max_optimise_samples=30, random_state=0)
    hyperparameters = learner._build_kernel(X.shape[1]).n_dims
    learner.fit(X, y)
    assert seen[0] == 10 * hyperparameters < 300
    assert learner.regressor_.X_train_.shape[0] == 300
    # a limit above the floor is kept as it is
    seen.clear()
    GPLearner(label_columns=(2,), max_optimise_samples=200, random_state=0).fit(X, y)
    assert seen[0] == 200


# ---------------------------------------------------------------------------
# Kernels


def _kernel_inputs():
    rng = np.random.default_rng(5)
    X = rng.normal(size=(7, 4))
    X[:, 1] *= 1000.0  # a column the kernel must not see
    Y = rng.normal(size=(3, 4))
    return X, Y


def test_on_columns_equals_the_inner_kernel_on_the_sliced_array():
    X, Y = _kernel_inputs()
    inner = Matern(length_scale=[0.7, 2.0], nu=2.5)
    kernel = OnColumns(inner, (0, 2))
    sliced_X, sliced_Y = X[:, [0, 2]], Y[:, [0, 2]]
    np.testing.assert_allclose(kernel(X), inner(sliced_X), rtol=1e-14)
    np.testing.assert_allclose(kernel(X, Y), inner(sliced_X, sliced_Y), rtol=1e-14)
    np.testing.assert_allclose(kernel.diag(X), inner.diag(sliced_X), rtol=1e-14)
    K, gradient = kernel(X, eval_gradient=True)
    K_inner, gradient_inner = inner(sliced_X, eval_gradient=True)
    np.testing.assert_allclose(gradient, gradient_inner, rtol=1e-14)
    # the ignored column really is ignored: changing it changes nothing
    shifted = X.copy()
    shifted[:, 1] += 123.0
    np.testing.assert_array_equal(kernel(shifted), kernel(X))


@pytest.mark.parametrize(
    "kernel",
    [
        OnColumns(Matern(length_scale=[0.7, 2.0], nu=2.5), (0, 2)),
        OnColumns(RBF(length_scale=[1.3, 0.4]), (3, 0)),
        ConstantKernel(1.7) * OnColumns(Matern([0.8, 1.5, 1.1], nu=1.5), (0, 2, 3))
        + ConstantKernel(0.2) * OnColumns(SameLabel(), (1,))
        + WhiteKernel(0.03),
    ],
    ids=["matern", "rbf", "composite"],
)
def test_on_columns_gradient_matches_finite_differences(kernel):
    X, _ = _kernel_inputs()
    X[:, 1] = np.round(X[:, 1] / 500.0)  # integer-like labels for SameLabel
    _, gradient = kernel(X, eval_gradient=True)
    assert gradient.shape == (X.shape[0], X.shape[0], len(kernel.theta))

    def entry(theta, row, column):
        return kernel.clone_with_theta(theta)(X)[row, column]

    # the gradient is with respect to log-hyperparameters (theta), as scikit-learn
    # defines it; scipy's forward differences are the outside reference
    theta = kernel.theta.copy()
    for row, column in [(0, 1), (2, 5), (3, 3), (6, 4)]:
        numerical = approx_fprime(theta, entry, 1e-7, row, column)
        np.testing.assert_allclose(gradient[row, column], numerical, rtol=1e-4, atol=1e-6)


def test_on_columns_clone_and_params_round_trip():
    kernel = OnColumns(RBF(length_scale=[1.0, 2.0], length_scale_bounds=(0.1, 10.0)), (0, 2))
    copy = clone(kernel)
    assert copy == kernel
    assert copy is not kernel and copy.kernel is not kernel.kernel
    params = kernel.get_params(deep=True)
    assert params["columns"] == (0, 2)
    np.testing.assert_array_equal(params["kernel__length_scale"], [1.0, 2.0])
    assert OnColumns(**kernel.get_params(deep=False)) == kernel
    copy.set_params(kernel__length_scale=[3.0, 4.0])
    np.testing.assert_array_equal(copy.kernel.length_scale, [3.0, 4.0])
    np.testing.assert_array_equal(kernel.kernel.length_scale, [1.0, 2.0])  # original untouched
    assert copy != kernel
    assert [hp.name for hp in kernel.hyperparameters] == ["kernel__length_scale"]
    np.testing.assert_allclose(kernel.bounds, np.log([[0.1, 10.0], [0.1, 10.0]]))
    moved = kernel.clone_with_theta(np.log([5.0, 6.0]))
    np.testing.assert_allclose(moved.kernel.length_scale, [5.0, 6.0])
    np.testing.assert_array_equal(kernel.kernel.length_scale, [1.0, 2.0])


def test_same_label_is_one_exactly_on_equal_labels_and_zero_elsewhere():
    X = np.array([[3.0, 9.0], [5.0, 1.0], [3.0, -2.0], [26.0, 0.0]])
    Y = np.array([[26.0, 4.0], [3.0, 4.0], [7.0, 4.0]])
    kernel = SameLabel()
    K = kernel(X)
    expected = np.array(
        [[1, 0, 1, 0], [0, 1, 0, 0], [1, 0, 1, 0], [0, 0, 0, 1]], dtype=float
    )
    np.testing.assert_array_equal(K, expected)
    np.testing.assert_array_equal(kernel(X, Y), [[0, 1, 0], [0, 0, 0], [0, 1, 0], [1, 0, 0]])
    np.testing.assert_array_equal(kernel.diag(X), np.ones(4))
    K_gradient, gradient = kernel(X, eval_gradient=True)
    np.testing.assert_array_equal(K_gradient, expected)
    assert gradient.shape == (4, 4, 0)
    # through OnColumns, on the second column
    np.testing.assert_array_equal(OnColumns(SameLabel(), (1,))(np.array([[0.0, 2.0], [1.0, 2.0]])), np.ones((2, 2)))


# ---------------------------------------------------------------------------
# The element offset of the GP


def test_gp_label_offset_predicts_a_held_out_row_of_a_known_label_better():
    rng = np.random.default_rng(11)
    labels = np.array([3, 11, 19, 26, 29, 47, 79, 82], dtype=float)
    offsets = dict(zip(labels, rng.normal(0.0, 1.0, len(labels))))
    rows_per_label = 6
    x = rng.uniform(0.0, 1.0, size=len(labels) * rows_per_label)
    label = np.repeat(labels, rows_per_label)
    y = np.sin(3.0 * x) + np.array([offsets[value] for value in label]) + rng.normal(0, 0.05, len(x))
    X = np.column_stack([x, label])
    held_out = np.arange(0, len(x), rows_per_label)  # one row of every label
    training = np.setdiff1d(np.arange(len(x)), held_out)

    with_offset = GPLearner(label_columns=(1,), random_state=0).fit(X[training], y[training])
    without_offset = GPLearner(ignored_columns=(1,), random_state=0).fit(X[training], y[training])
    error_with = np.abs(with_offset.predict(X[held_out]) - y[held_out])
    error_without = np.abs(without_offset.predict(X[held_out]) - y[held_out])
    # offsets of sd 1 eV against 0.05 eV noise: the offset model should be several times better
    assert error_with.mean() < 0.3 * error_without.mean()
    assert error_with.mean() < 0.25


# ---------------------------------------------------------------------------
# The shrunk offsets of BoostLearner


def test_boost_offset_of_a_label_with_many_rows_approaches_its_mean_residual():
    rng = np.random.default_rng(4)
    # the trees see only a noise column, so what the labels do is left in the residuals
    big, small = 400, 2
    label = np.concatenate([np.full(big, 1.0), np.full(big, 2.0), np.full(big, 3.0), np.full(small, 4.0)])
    true_offset = {1.0: 1.0, 2.0: -0.8, 3.0: 0.1, 4.0: 1.5}
    y = np.array([true_offset[value] for value in label]) + rng.normal(0.0, 0.3, len(label))
    X = np.column_stack([rng.normal(size=len(label)), label])
    learner = BoostLearner(label_columns=(1,), n_members=4, max_iter=20, random_state=0).fit(X, y)
    offsets = learner.label_offsets_[0]
    grand = y.mean()
    for value in (1.0, 2.0, 3.0):
        # with 400 rows the shrinkage weight n*s_b/(n*s_b + s_w) is ~1, so the offset is the
        # label's mean residual; the trees on noise predict ~ the grand mean
        offset, variance = offsets[value]
        assert offset == pytest.approx(y[label == value].mean() - grand, abs=0.05)
        assert 0.0 < variance < 0.3**2 / big * 1.5
    # a label with two rows is shrunk toward zero and keeps a larger posterior variance
    small_offset, small_variance = offsets[4.0]
    assert abs(small_offset) < abs(y[label == 4.0].mean() - grand)
    assert small_variance > offsets[1.0][1] * 10


def test_between_label_variance_is_the_balanced_anova_estimator():
    # Searle, Casella & McCulloch 1992, "Variance Components", chapter 3 (one-way
    # classification, balanced data): sigma_a^2 = (MSA - MSE) / n with
    # MSA = n * sum_i (ybar_i - ybar)^2 / (a - 1), MSE = sum (y_ij - ybar_i)^2 / (a (n - 1)).
    rng = np.random.default_rng(8)
    n_labels, n_per_label = 4, 30
    label = np.repeat(np.arange(n_labels, dtype=float), n_per_label)
    residual = rng.normal(0.0, 1.0, n_labels)[label.astype(int)] + rng.normal(0.0, 0.5, len(label))
    groups = residual.reshape(n_labels, n_per_label)
    group_means = groups.mean(axis=1)
    mse = np.sum((groups - group_means[:, None]) ** 2) / (n_labels * (n_per_label - 1))
    msa = n_per_label * np.sum((group_means - residual.mean()) ** 2) / (n_labels - 1)
    anova = (msa - mse) / n_per_label
    _, between, _ = _shrunk_offsets(label, residual)
    assert between == pytest.approx(anova, rel=1e-9)


# ---------------------------------------------------------------------------
# Outside check: the closed-form GP posterior


def test_gp_with_fixed_kernel_reproduces_rasmussen_williams_algorithm_2_1():
    # Rasmussen & Williams 2006, "Gaussian Processes for Machine Learning", Algorithm 2.1
    # (eqs. 2.25-2.26): L = cholesky(K + sigma^2 I), alpha = L^T \ (L \ y),
    # mean = k*^T alpha, v = L \ k*, var = k(x*, x*) - v^T v.
    X = np.array([[-1.6], [-0.9], [-0.2], [0.4], [1.1], [1.9]])
    y = np.array([0.3, 1.4, 0.9, -0.4, -1.2, 0.2])
    X_star = np.array([[-1.2], [0.0], [0.7], [2.5]])
    signal, length, noise = 1.5, 0.7, 0.05
    kernel = ConstantKernel(signal, "fixed") * RBF(length, "fixed") + WhiteKernel(noise, "fixed")
    learner = GPLearner(fixed_kernel=kernel).fit(X, y)
    mean, std = learner.predict(X_star, return_std=True)
    _, cov = learner.predict(X_star, return_cov=True)

    def squared_exponential(A, B):
        return signal * np.exp(-0.5 * (A[:, None, 0] - B[None, :, 0]) ** 2 / length**2)

    # GPLearner normalises y (normalize_y=True): work on (y - mean) / std (ddof 0), then
    # scale back, the mean by std and the variance by std^2
    y_mean, y_scale = y.mean(), y.std()
    y_normal = (y - y_mean) / y_scale
    # scikit-learn adds alpha = 1e-10 jitter to the diagonal besides the white noise
    K = squared_exponential(X, X) + (noise + 1e-10) * np.eye(len(X))
    L = cholesky(K, lower=True)
    alpha = cho_solve((L, True), y_normal)
    k_star = squared_exponential(X, X_star)
    expected_mean = k_star.T @ alpha * y_scale + y_mean
    v = solve_triangular(L, k_star, lower=True)
    # k(x*, x*) includes the white noise: GPLearner predicts a new observation
    K_star_star = squared_exponential(X_star, X_star) + noise * np.eye(len(X_star))
    expected_cov = (K_star_star - v.T @ v) * y_scale**2
    np.testing.assert_allclose(mean, expected_mean, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(cov, expected_cov, rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(std, np.sqrt(np.diag(expected_cov)), rtol=1e-7)
    # a fixed kernel is used as given, not optimised
    assert learner.kernel_ == kernel


# --------------------------------------------------------------- shift prior (corrections)
def test_shift_prior_matches_the_one_way_random_effects_estimate():
    """Shrunk column means of the hierarchical normal model (Gelman et al., Bayesian Data
    Analysis, 3rd ed., 2013, ch. 5): shift_c = pooled + w_c (mean_c - pooled) with
    w_c = tau^2 / (tau^2 + s^2 / n_c), tau^2 by the method of moments; computed by hand."""
    labels = np.array([0, 0, 0, 0, 1, 1, 2])
    y = np.array([0.10, 0.20, 0.30, 0.20, 0.60, 0.80, 0.40])
    learner = ShiftPriorLearner(label_column=0).fit(labels.reshape(-1, 1).astype(float), y)
    means = np.array([0.2, 0.7, 0.4])
    counts = np.array([4, 2, 1])
    within = (0.01 + 0.0 + 0.01 + 0.0 + 0.01 + 0.01 + 0.0) / (7 - 3)
    between = max(np.var(means, ddof=1) - np.mean(within / counts), 0.0)
    weights = between / (between + within / counts)
    expected = y.mean() + weights * (means - y.mean())
    assert learner.within_variance_ == pytest.approx(within)
    assert learner.between_variance_ == pytest.approx(between)
    assert learner.predict(np.array([[0.0], [1.0], [2.0]])) == pytest.approx(expected)
    # an unseen column gets the pooled shift
    assert learner.predict(np.array([[7.0]]))[0] == pytest.approx(y.mean())
    # shrinkage is strongest for the column with the fewest rows
    assert weights[2] < weights[1] < weights[0]


def test_shift_prior_with_one_element_is_the_level_shift_rule_within_its_std():
    """With one element at the expensive level (one row per column) the correction is the
    pooled shift, and each column's own shift (the level-shift rule with one element) lies
    within the stated std: the shift rule is never contradicted beyond the spread."""
    rng = np.random.default_rng(0)
    shifts = 0.3 + 0.1 * rng.standard_normal(8)
    X = np.arange(8, dtype=float).reshape(-1, 1)
    learner = ShiftPriorLearner(label_column=0).fit(X, shifts)
    mean, std = learner.predict(X, return_std=True)
    assert np.all(np.abs(mean - shifts) <= 2.0 * std)
    assert np.all(std > 0)


def test_shift_prior_follows_many_columns_when_they_differ():
    """Many elements per column and clearly different columns: the shifts are the column
    means almost exactly (weights near 1)."""
    rng = np.random.default_rng(1)
    labels = np.repeat([0.0, 1.0, 2.0], 30)
    y = np.array([0.0, 0.5, 1.0])[labels.astype(int)] + 0.05 * rng.standard_normal(90)
    learner = ShiftPriorLearner(label_column=0).fit(labels.reshape(-1, 1), y)
    column_means = [y[labels == label].mean() for label in (0.0, 1.0, 2.0)]
    assert learner.predict(np.array([[0.0], [1.0], [2.0]])) == pytest.approx(column_means, abs=1e-3)


def test_shift_prior_with_a_residual_learner_adds_the_pooled_shift():
    X = np.linspace(0.0, 1.0, 20).reshape(-1, 1)
    y = 2.0 + np.sin(4 * X[:, 0])
    learner = ShiftPriorLearner(residual_learner=GPLearner(random_state=0)).fit(X, y)
    inner = learner.residual_learner_
    assert learner.predict(X) == pytest.approx(y.mean() + inner.predict(X))
    mean, cov = learner.predict(X[:3], return_cov=True)
    assert cov == pytest.approx(inner.predict(X[:3], return_cov=True)[1])


def test_gp_warm_start_starts_from_the_given_kernel_and_checks_its_size():
    """initial_kernel: the optimiser starts at the given hyperparameters (zero iterations
    leave them there) and a kernel of another shape is refused."""
    rng = np.random.default_rng(3)
    X = rng.standard_normal((30, 2))
    y = X[:, 0] + 0.1 * rng.standard_normal(30)
    fitted = GPLearner(random_state=0).fit(X, y)
    warm = GPLearner(initial_kernel=fitted.kernel_, max_optimiser_iterations=0, random_state=0).fit(X, y)
    assert warm.kernel_.theta == pytest.approx(fitted.kernel_.theta)
    other = GPLearner(random_state=0).fit(X[:, :1], y).kernel_
    with pytest.raises(ValueError, match="initial_kernel has"):
        GPLearner(initial_kernel=other).fit(X, y)


N_STUCK_DESCRIPTORS = 5


def _stuck_search():
    """Groups whose target follows the first of five descriptors, and a kernel stuck where
    the four noise descriptors look relevant: (rng, X, y, layout, fitted kernel, stuck)."""
    rng = np.random.default_rng(0)
    n_groups, n_descriptors = 20, N_STUCK_DESCRIPTORS
    descriptors = rng.standard_normal((n_groups, n_descriptors))
    X = np.array([[*descriptors[g], g, c] for g in range(n_groups) for c in range(4)])
    y = np.sin(X[:, 0]) + 0.05 * rng.standard_normal(len(X))
    layout = dict(label_columns=(n_descriptors,), ignored_columns=(n_descriptors + 1,), random_state=0)
    kernel = GPLearner(**layout).fit(X, y).kernel_
    assert kernel.hyperparameters[1].name.endswith("length_scale")  # after the amplitude
    theta = kernel.theta.copy()
    theta[1:1 + n_descriptors] = np.log([0.5, 0.7, 0.7, 0.7, 0.7])
    return rng, X, y, layout, kernel, kernel.clone_with_theta(theta)


def test_gp_descriptor_selection_switches_off_what_does_not_help_unseen_groups():
    """A search stuck where four noise descriptors look relevant (short length scales,
    no iterations to escape): grouped-CV selection keeps the one descriptor that drives
    the target, pins the noise at its bound, and predicts unseen groups far better than
    the same kernel without selection. Where keeping every descriptor does as well,
    nothing is switched off."""
    rng, X, y, layout, kernel, stuck = _stuck_search()
    n_descriptors = N_STUCK_DESCRIPTORS
    descriptor_positions = slice(1, 1 + n_descriptors)  # after the amplitude
    chosen = GPLearner(selection_group_column=n_descriptors, initial_kernel=stuck,
                       max_optimiser_iterations=0, **layout).fit(X, y)
    unselected = GPLearner(initial_kernel=stuck, max_optimiser_iterations=0, **layout).fit(X, y)
    assert chosen.kept_descriptor_columns_ == (0,)
    assert unselected.kept_descriptor_columns_ == (0, 1, 2, 3, 4)
    assert chosen.selection_errors_.shape == (n_descriptors,)
    assert np.argmin(chosen.selection_errors_) == 0
    # the search's own optimum is kept for warm starts, before anything was switched off
    ard_scales = chosen.ard_kernel_.theta[descriptor_positions]
    assert np.all(ard_scales[1:] < chosen.kernel_.bounds[descriptor_positions, 1][1:])
    unseen = np.column_stack([rng.standard_normal((200, n_descriptors)), np.full(200, 99.0), np.zeros(200)])
    truth = np.sin(unseen[:, 0])
    assert np.mean((chosen.predict(unseen) - truth) ** 2) < 0.1 * np.mean((unselected.predict(unseen) - truth) ** 2)
    # a well-found optimum: nothing to gain, nothing switched off by the selection
    settled = GPLearner(selection_group_column=n_descriptors, **layout).fit(X, y)
    assert settled.kernel_.theta == pytest.approx(settled.ard_kernel_.theta)



def test_gp_random_restarts_keep_the_likeliest_optimum_and_leave_pinned_descriptors_at_their_bound():
    """The marginal likelihood can have several optima (Rasmussen & Williams 2006, section
    5.4.1, figure 5.5; section and figure from memory): from the stuck start of the test
    above with few iterations, extra random starts end at least as likely as the one
    start. The retune after the descriptor choice starts only from the chosen kernel: a
    random start would move the switched-off length scales off the bound that switches
    them off."""
    rng, X, y, layout, kernel, stuck = _stuck_search()
    n_descriptors = N_STUCK_DESCRIPTORS
    descriptor_positions = slice(1, 1 + n_descriptors)  # after the amplitude
    one = GPLearner(initial_kernel=stuck, max_optimiser_iterations=3, **layout).fit(X, y)
    several = GPLearner(initial_kernel=stuck, max_optimiser_iterations=3, n_restarts_optimizer=6, **layout).fit(X, y)
    assert several.regressor_.log_marginal_likelihood_value_ >= one.regressor_.log_marginal_likelihood_value_ - 1e-9
    # the retune with descriptors pinned at their bound (switched off), from a poor start
    # that random starts would beat: the pinned length scales stay where they are
    learner = GPLearner(max_optimiser_iterations=0, n_restarts_optimizer=6, **layout)
    start = learner._build_kernel(X.shape[1])
    switched_off = kernel.bounds[descriptor_positions, 1]
    start = start.clone_with_theta(np.r_[start.theta[:1], switched_off, start.theta[1 + n_descriptors:]])
    pinned = np.arange(2, 1 + n_descriptors)
    retuned = learner._optimise(start, X, y, None, np.random.RandomState(1), pinned=pinned)
    np.testing.assert_array_equal(retuned.kernel_.theta[pinned], start.theta[pinned])


# ------------------------------------------------------------------ pair model (new hosts)


def test_host_transfer_gp_with_a_fixed_kernel_is_rasmussen_williams_algorithm_2_1():
    # Rasmussen & Williams 2006, "Gaussian Processes for Machine Learning", Algorithm 2.1,
    # with the Matern nu = 3/2 covariance of their eq. 4.17:
    # k(r) = s (1 + sqrt(3) r / l) exp(-sqrt(3) r / l)
    X = np.array([[-1.6, 0.2], [-0.9, -0.4], [-0.2, 0.9], [0.4, 0.1], [1.1, -1.0], [1.9, 0.5]])
    y = np.array([0.3, 1.4, 0.9, -0.4, -1.2, 0.2])
    X_star = np.array([[-1.2, 0.0], [0.0, 0.3], [2.5, -0.5]])
    signal, length, noise = 1.3, 1.1, 0.04
    kernel = ConstantKernel(signal, "fixed") * Matern(length, "fixed", nu=1.5) + WhiteKernel(noise, "fixed")
    learner = HostTransferGP(fixed_kernel=kernel).fit(X, y)
    _, cov = learner.predict(X_star, return_cov=True)
    mean = learner.predict(X_star)

    def matern(A, B):
        r = np.sqrt(((A[:, None, :] - B[None, :, :]) ** 2).sum(axis=2)) / length
        return signal * (1.0 + np.sqrt(3.0) * r) * np.exp(-np.sqrt(3.0) * r)

    y_mean, y_scale = y.mean(), y.std()
    K = matern(X, X) + (noise + 1e-10) * np.eye(len(X))
    L = cholesky(K, lower=True)
    k_star = matern(X, X_star)
    v = solve_triangular(L, k_star, lower=True)
    np.testing.assert_allclose(mean, k_star.T @ cho_solve((L, True), (y - y_mean) / y_scale) * y_scale + y_mean,
                               rtol=1e-9, atol=1e-12)
    expected_cov = (matern(X_star, X_star) + noise * np.eye(len(X_star)) - v.T @ v) * y_scale**2
    np.testing.assert_allclose(cov, expected_cov, rtol=1e-7, atol=1e-12)
    assert learner.kernel_ == kernel


def test_host_transfer_gp_has_one_length_scale_for_every_input():
    rng = np.random.default_rng(3)
    X = rng.normal(size=(60, 5))
    y = np.sin(X[:, 0]) + 0.1 * rng.normal(size=60)
    learner = HostTransferGP(random_state=0).fit(X, y)
    scales = [value for name, value in learner.kernel_.get_params().items() if name.endswith("length_scale")]
    assert len(scales) == 1 and np.ndim(scales[0]) == 0
    # it learned something: the fitted mean follows the signal better than the mean does
    assert np.mean((learner.predict(X) - np.sin(X[:, 0])) ** 2) < 0.5 * np.var(np.sin(X[:, 0]))


def test_host_transfer_gp_tunes_on_a_subsample_and_conditions_on_every_row():
    rng = np.random.default_rng(5)
    X = rng.normal(size=(900, 3))
    y = np.sin(X[:, 0]) + 0.5 * X[:, 1] + 0.1 * rng.normal(size=900)
    sampled = HostTransferGP(random_state=0, max_optimise_samples=300).fit(X, y)
    full = HostTransferGP(random_state=0, max_optimise_samples=None).fit(X, y)
    # conditioned on all 900 rows, with the hyperparameters tuned on 300 of them
    assert sampled.regressor_.X_train_.shape == (900, 3)
    assert sampled.kernel_ == sampled.regressor_.kernel_
    # 300 rows determine what matters (common practice, no source): the noise within a
    # factor of 1.5, the predictions nearly as good and their spread within 10 %
    # (amplitude and length scale trade off along a ridge, so they are not compared alone)
    assert np.exp(abs(sampled.kernel_.theta[-1] - full.kernel_.theta[-1])) < 1.5, (sampled.kernel_, full.kernel_)
    X_new = rng.normal(size=(50, 3))
    truth = np.sin(X_new[:, 0]) + 0.5 * X_new[:, 1]
    (mean, std), (full_mean, full_std) = sampled.predict(X_new, return_std=True), full.predict(X_new, return_std=True)
    assert np.mean(np.abs(mean - truth)) < 1.2 * np.mean(np.abs(full_mean - truth))
    assert abs(np.mean(std) / np.mean(full_std) - 1.0) < 0.1
    with pytest.raises(ValueError, match="max_optimise_samples"):
        HostTransferGP(max_optimise_samples=1).fit(X, y)


# ------------------------------------------------------------ conditioning in one pass
def test_conditioned_gp_is_scikit_learns_fixed_kernel_gp_in_one_pass(monkeypatch):
    """The same fitted attributes, predictions and log marginal likelihood as scikit-learn's
    GaussianProcessRegressor with ``optimizer=None`` (Rasmussen & Williams 2006, Algorithm
    2.1), with one Cholesky factorisation per fit instead of two."""
    import scipy.linalg
    from sklearn.gaussian_process import GaussianProcessRegressor
    import sklearn.gaussian_process._gpr as gpr_module

    from dopantgap.learners.conditioned import ConditionedGPR

    rng = np.random.default_rng(4)
    X = rng.normal(size=(120, 3))
    y = np.sin(X[:, 0]) + 0.3 * X[:, 1] + 0.05 * rng.normal(size=120)
    kernel = ConstantKernel(1.7) * RBF(np.array([1.2, 2.0, 0.8])) + WhiteKernel(0.02)
    reference = GaussianProcessRegressor(kernel=kernel, optimizer=None, normalize_y=True).fit(X, y)
    factorisations = []
    real = scipy.linalg.cholesky
    monkeypatch.setattr(gpr_module, "cholesky", lambda *a, **k: factorisations.append(1) or real(*a, **k))
    ours = ConditionedGPR(kernel=kernel, optimizer=None, normalize_y=True).fit(X, y)
    assert len(factorisations) == 1
    monkeypatch.undo()
    Xs = rng.normal(size=(15, 3))
    np.testing.assert_allclose(ours.predict(Xs), reference.predict(Xs), rtol=1e-12, atol=1e-14)
    for options in ({"return_std": True}, {"return_cov": True}):
        for found, expected in zip(ours.predict(Xs, **options), reference.predict(Xs, **options)):
            np.testing.assert_allclose(found, expected, rtol=1e-12, atol=1e-14)
    assert ours.log_marginal_likelihood_value_ == pytest.approx(reference.log_marginal_likelihood_value_, rel=1e-12)
    # outside fit the likelihood is scikit-learn's, gradient included
    value, gradient = ours.log_marginal_likelihood(kernel.theta, eval_gradient=True)
    expected, expected_gradient = reference.log_marginal_likelihood(kernel.theta, eval_gradient=True)
    assert value == pytest.approx(expected, rel=1e-12)
    np.testing.assert_allclose(gradient, expected_gradient, rtol=1e-10)
    with pytest.raises(ValueError, match="optimizer=None"):
        ConditionedGPR(kernel=kernel).fit(X, y)
