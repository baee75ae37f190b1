"""Tests of the blocked conditioning (local experts over whole hosts).

Outside references: scikit-learn's ``GaussianProcessRegressor`` with the same fixed
kernel, conditioned on each block's rows (the exact posterior of Rasmussen & Williams
2006, "Gaussian Processes for Machine Learning", Algorithm 2.1); the generalised product
of experts of Cao & Fleet 2014, arXiv:1410.7827, eq. 5, written out here by hand.
"""

import numpy as np
import pytest
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

from dopantgap.learners import GPLearner, OnColumns, SameLabel
from dopantgap.learners.blocks import BlockedGPR, pack_blocks
from dopantgap.learners.conditioned import ConditionedGPR

N_HOSTS, N_SITES, N_ELEMENTS = 6, 2, 15


def _table(seed=0):
    """Rows (descriptor, descriptor, element label, column code) of a grid of
    elements x (host, site) columns with a fifth of the cells missing."""
    rng = np.random.default_rng(seed)
    elements = rng.normal(size=(N_ELEMENTS, 2))
    rows, target = [], []
    for code in range(N_HOSTS * N_SITES):
        shift = rng.normal()
        for element in range(N_ELEMENTS):
            if rng.uniform() < 0.2:
                continue
            rows.append([*elements[element], element, code])
            target.append(np.sin(elements[element, 0]) + 0.5 * elements[element, 1] + shift + 0.05 * rng.normal())
    groups = {code: f"host{code // N_SITES}" for code in range(N_HOSTS * N_SITES)}
    return np.array(rows), np.array(target), groups


def _kernel():
    return (
        ConstantKernel(1.3) * OnColumns(Matern([0.9, 1.4], nu=2.5), (0, 1))
        + ConstantKernel(0.2) * OnColumns(SameLabel(), (2,))
        + WhiteKernel(0.02)
    )


def test_pack_blocks_keeps_groups_whole_and_under_the_cap():
    sizes = [5, 7, 3, 9, 4, 6, 2, 8]
    blocks = pack_blocks(sizes, 15)
    assert sorted(position for block in blocks for position in block) == list(range(len(sizes)))
    assert all(sum(sizes[position] for position in block) <= 15 for block in blocks)
    # consecutive groups, so neighbouring labels share a block
    assert [position for block in blocks for position in block] == list(range(len(sizes)))
    # a group bigger than the cap is a block on its own
    assert pack_blocks([3, 20, 3], 10) == [[0], [1], [2]]


def test_one_block_is_the_exact_process():
    X, y, groups = _table()
    exact = ConditionedGPR(kernel=_kernel(), optimizer=None, normalize_y=True).fit(X, y)
    blocked = BlockedGPR(_kernel(), 3, groups, max_block_rows=len(X)).fit(X, y)
    assert len(blocked.experts_) == 1
    query = X[::3] + [0.1, 0.1, 0.0, 0.0]  # moved off the training rows, same labels
    for left, right in zip(exact.predict(query, return_std=True), blocked.predict(query, return_std=True)):
        np.testing.assert_allclose(left, right, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(exact.predict(query, return_cov=True)[1], blocked.predict(query, return_cov=True)[1],
                               rtol=1e-9, atol=1e-12)


def test_each_block_is_the_exact_process_on_its_rows():
    X, y, groups = _table(1)
    blocked = BlockedGPR(_kernel(), 3, groups, max_block_rows=60).fit(X, y)
    assert len(blocked.experts_) > 2
    host = np.array([groups[int(code)] for code in X[:, 3]])
    block_of_row = np.array([blocked.block_of_group_[name] for name in host])
    for block in range(len(blocked.experts_)):
        own = block_of_row == block
        assert own.sum() <= 60
        # every cell of a host is in the block of that host
        assert len(set(block_of_row[np.isin(host, host[own])])) == 1
        rows = blocked.expert_rows_[block]
        np.testing.assert_array_equal(rows, np.flatnonzero(own))
        standardised = (y - y.mean()) / y.std()
        reference = GaussianProcessRegressor(kernel=_kernel(), optimizer=None).fit(X[rows], standardised[rows])
        query = X[own][:5] + [0.05, -0.05, 0.0, 0.0]
        mean, cov = reference.predict(query, return_cov=True)
        got_mean, got_cov = blocked.predict(query, return_cov=True)
        np.testing.assert_allclose(got_mean, y.mean() + y.std() * mean, rtol=1e-8, atol=1e-10)
        np.testing.assert_allclose(got_cov, y.var() * cov, rtol=1e-8, atol=1e-12)


def test_blocks_are_independent_and_the_diagonal_is_the_variance():
    X, y, groups = _table(2)
    blocked = BlockedGPR(_kernel(), 3, groups, max_block_rows=60).fit(X, y)
    query = np.vstack([X[X[:, 3] == 0][:3], X[X[:, 3] == N_HOSTS * N_SITES - 1][:3]])
    mean, cov = blocked.predict(query, return_cov=True)
    _, std = blocked.predict(query, return_std=True)
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), std, rtol=1e-9)
    assert np.all(cov[:3, 3:] == 0.0)  # host 0 and the last host are in different blocks
    assert np.any(np.abs(cov[:3, :3] - np.diag(np.diag(cov[:3, :3]))) > 1e-6)


def test_a_host_no_block_holds_gets_the_generalised_product_of_experts():
    X, y, groups = _table(3)
    blocked = BlockedGPR(_kernel(), 3, groups, max_block_rows=60).fit(X, y)
    query = X[:4].copy()
    query[:, 3] = -1.0  # a column the training never saw
    mean, std = blocked.predict(query, return_std=True)
    standardised = (y - y.mean()) / y.std()
    means, variances = [], []
    for block in range(len(blocked.experts_)):
        rows = blocked.expert_rows_[block]
        reference = GaussianProcessRegressor(kernel=_kernel(), optimizer=None).fit(X[rows], standardised[rows])
        m, s = reference.predict(query, return_std=True)
        means.append(m)
        variances.append(s ** 2)
    means, variances = np.array(means), np.array(variances)
    # Cao & Fleet 2014, eq. 5 with weights 1/M: precision is the mean of the precisions
    precision = np.mean(1.0 / variances, axis=0)
    expected_mean = np.mean(means / variances, axis=0) / precision
    np.testing.assert_allclose(mean, y.mean() + y.std() * expected_mean, rtol=1e-8)
    np.testing.assert_allclose(std, y.std() / np.sqrt(precision), rtol=1e-8)
    # never more confident than the most confident expert
    assert np.all(std >= y.std() * np.sqrt(variances.min(axis=0)) * (1 - 1e-9))


def test_gp_learner_blocks_only_past_the_cap():
    X, y, groups = _table(4)
    plain = GPLearner(label_columns=(2,), ignored_columns=(3,), random_state=0, max_optimise_samples=60).fit(X, y)
    roomy = GPLearner(label_columns=(2,), ignored_columns=(3,), random_state=0, max_optimise_samples=60,
                      block_column=3, block_groups=groups, max_block_rows=len(X)).fit(X, y)
    np.testing.assert_array_equal(plain.predict(X), roomy.predict(X))
    tight = GPLearner(label_columns=(2,), ignored_columns=(3,), random_state=0, max_optimise_samples=60,
                      block_column=3, block_groups=groups, max_block_rows=50).fit(X, y)
    assert isinstance(tight.regressor_, BlockedGPR)
    assert max(len(expert.X_train_) for expert in tight.regressor_.experts_) <= 50
    # the same hyperparameters (tuned on the same 60 rows), conditioned in blocks
    np.testing.assert_allclose(tight.kernel_.theta, plain.kernel_.theta)
    mean, std = tight.predict(X, return_std=True)
    assert np.all(np.isfinite(mean)) and np.all(std > 0)
    # the blocks see fewer rows, so they are a little less sure, never much surer
    _, plain_std = plain.predict(X, return_std=True)
    assert np.median(std / plain_std) >= 0.99


def test_block_column_without_groups_is_refused():
    X, y, _ = _table(5)
    with pytest.raises(ValueError, match="block_groups"):
        GPLearner(block_column=3, ignored_columns=(3,)).fit(X, y)


def test_descriptor_choice_scores_a_large_stage_on_a_subset(monkeypatch):
    from dopantgap.learners import gaussian_process

    X, y, groups = _table(6)
    extra = np.random.default_rng(6).normal(size=(len(X), 1))  # a descriptor carrying nothing
    X = np.column_stack([X[:, :2], extra, X[:, 2:]])
    seen = []
    original = GPLearner._condition

    def counting(self, kernel, rows_X, rows_y):
        seen.append(rows_X.shape[0])
        return original(self, kernel, rows_X, rows_y)

    monkeypatch.setattr(GPLearner, "_condition", counting)
    monkeypatch.setattr(gaussian_process, "MAX_SELECTION_ROWS", 60)
    learner = GPLearner(label_columns=(3,), ignored_columns=(4,), selection_group_column=3,
                        random_state=0, max_optimise_samples=50).fit(X, y)
    assert learner.selection_errors_ is not None and len(learner.selection_errors_) == 3
    scored = [size for size in seen if size != len(X)]
    assert scored and max(scored) < 60  # each fold's training part of the 60 scored rows
    assert seen.count(len(X)) >= 1  # the stage itself is still conditioned on every row


@pytest.mark.parametrize("value", [10, 2.5, True, "4000"])
def test_a_surrogate_refuses_an_unusable_block_size(value):
    from dopantgap.demo import demo_table
    from dopantgap.errors import DopantgapError
    from dopantgap.surrogate import Surrogate

    with pytest.raises(DopantgapError, match="max_block_rows must be a whole number of at least 100"):
        Surrogate(max_block_rows=value).fit(demo_table())
