"""Bagged gradient-boosted trees with a spread, plus shrunk offsets per label."""

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.ensemble import HistGradientBoostingRegressor
from sklearn.utils import check_random_state
from sklearn.utils.validation import check_is_fitted, validate_data

__all__ = ["BoostLearner"]


class BoostLearner(RegressorMixin, BaseEstimator):
    """Bootstrap ensemble of gradient-boosted trees that returns a mean and a spread.

    Each member is fitted on a bootstrap sample of the rows. The predictive variance
    is the members' variance plus the out-of-bag residual variance, so it describes a
    new calculation rather than only the ensemble's disagreement. For each label
    column (for example the element's atomic number), an offset per label is taken
    from the out-of-bag residuals of that label's rows and shrunk toward zero by the
    ratio of between-label to within-label variance (a one-way random-effects
    estimate by the method of moments; Searle, Casella & McCulloch 1992, Variance
    Components, section 3.5).

    Parameters
    ----------
    n_members : int, default=6
        Number of bootstrap members.
    max_iter : int, default=120
        Boosting iterations per member.
    learning_rate : float, default=0.08
    max_leaf_nodes : int, default=15
    min_samples_leaf : int, default=5
    label_columns : tuple of int, default=()
        Columns of ``X`` holding integer labels; they are not given to the trees.
    random_state : int, Generator or None, default=None

    Attributes
    ----------
    members_ : list of HistGradientBoostingRegressor
    residual_variance_ : float
        Out-of-bag residual variance left after the label offsets.
    label_offsets_ : list of dict
        Per label column: label -> (offset, posterior variance of the offset).
    label_variance_ : list of float
        Per label column: between-label variance of the offsets.
    n_iter_ : int
        Boosting iterations of the longest member.
    """

    def __init__(
        self,
        n_members=6,
        max_iter=120,
        learning_rate=0.08,
        max_leaf_nodes=15,
        min_samples_leaf=5,
        label_columns=(),
        random_state=None,
    ):
        self.n_members = n_members
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.min_samples_leaf = min_samples_leaf
        self.label_columns = label_columns
        self.random_state = random_state

    def _tree_columns(self, n_features):
        labels = {int(column) for column in self.label_columns}
        return [column for column in range(n_features) if column not in labels]

    def fit(self, X, y):
        """Fit the members and the label offsets.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)

        Returns
        -------
        self : BoostLearner
        """
        X, y = validate_data(self, X, y, y_numeric=True, dtype=np.float64)
        if int(self.n_members) < 2:
            raise ValueError(f"n_members must be at least 2 to give a spread, got {self.n_members!r}.")
        rng = check_random_state(self.random_state)
        tree_columns = self._tree_columns(X.shape[1])
        features = X[:, tree_columns] if tree_columns else np.zeros((X.shape[0], 1))
        n_samples = X.shape[0]
        self.members_ = []
        out_of_bag_sum = np.zeros(n_samples)
        out_of_bag_count = np.zeros(n_samples)
        for _ in range(int(self.n_members)):
            rows = rng.randint(0, n_samples, size=n_samples)
            member = HistGradientBoostingRegressor(
                max_iter=self.max_iter,
                learning_rate=self.learning_rate,
                max_leaf_nodes=self.max_leaf_nodes,
                min_samples_leaf=min(self.min_samples_leaf, max(1, n_samples // 2)),
                early_stopping=False,
                random_state=int(rng.randint(0, 2**31 - 1)),
            ).fit(features[rows], y[rows])
            self.members_.append(member)
            out_of_bag = np.ones(n_samples, dtype=bool)
            out_of_bag[rows] = False
            if out_of_bag.any():
                out_of_bag_sum[out_of_bag] += member.predict(features[out_of_bag])
                out_of_bag_count[out_of_bag] += 1
        in_bag_mean = np.mean([member.predict(features) for member in self.members_], axis=0)
        out_of_bag_mean = np.where(
            out_of_bag_count > 0, out_of_bag_sum / np.maximum(out_of_bag_count, 1), in_bag_mean
        )
        residual = y - out_of_bag_mean
        self.label_offsets_, self.label_variance_ = [], []
        for column in self.label_columns:
            offsets, between, residual = _shrunk_offsets(X[:, int(column)], residual)
            self.label_offsets_.append(offsets)
            self.label_variance_.append(between)
        self.residual_variance_ = float(np.var(residual)) if n_samples > 1 else 0.0
        self.n_iter_ = int(max(member.n_iter_ for member in self.members_))
        return self

    def predict(self, X, return_std=False, return_cov=False):
        """Mean of the members plus label offsets; optionally the predictive spread.

        The covariance between two rows is the members' covariance, plus the
        residual variance on the diagonal, plus the offset's posterior variance
        where the two rows share a label (an element's cells share its offset's
        uncertainty).

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        return_std : bool, default=False
        return_cov : bool, default=False

        Returns
        -------
        mean : ndarray of shape (n_samples,)
        std : ndarray of shape (n_samples,), if ``return_std``
        cov : ndarray of shape (n_samples, n_samples), if ``return_cov``
        """
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, dtype=np.float64)
        if return_std and return_cov:
            raise ValueError("Ask for return_std or return_cov, not both.")
        tree_columns = self._tree_columns(X.shape[1])
        features = X[:, tree_columns] if tree_columns else np.zeros((X.shape[0], 1))
        predictions = np.array([member.predict(features) for member in self.members_])
        mean = predictions.mean(axis=0)
        deviations = predictions - mean
        cov = deviations.T @ deviations / len(self.members_)
        cov[np.diag_indices_from(cov)] += self.residual_variance_
        for column, offsets, between in zip(self.label_columns, self.label_offsets_, self.label_variance_):
            labels = X[:, int(column)]
            offset_variance = np.empty(len(labels))
            for row, label in enumerate(labels):
                offset, offset_variance[row] = offsets.get(float(label), (0.0, between))
                mean[row] += offset
            same = labels[:, None] == labels[None, :]
            cov += same * np.sqrt(np.outer(offset_variance, offset_variance))
        if return_cov:
            return mean, cov
        if return_std:
            return mean, np.sqrt(np.diag(cov))
        return mean


def _shrunk_offsets(labels, residual):
    """Per-label shrunk mean residuals, the between-label variance and what remains."""
    unique, inverse, counts = np.unique(labels, return_inverse=True, return_counts=True)
    sums = np.bincount(inverse, weights=residual)
    means = sums / counts
    within = residual - means[inverse]
    degrees = max(len(residual) - len(unique), 1)
    within_variance = float(np.sum(within**2) / degrees)
    # one-way random effects, ANOVA estimator: (MSA - MSE) / n for balanced data
    # (Searle, Casella & McCulloch 1992, ch. 3); unbiased spread of the label means
    spread = float(np.var(means, ddof=1)) if len(unique) > 1 else 0.0
    between = float(max(spread - within_variance * np.mean(1.0 / counts), 0.0))
    offsets = {}
    shrunk = np.zeros(len(unique))
    for index, label in enumerate(unique):
        if between > 0:
            weight = counts[index] * between / (counts[index] * between + within_variance)
            posterior_variance = between * within_variance / (counts[index] * between + within_variance)
        else:
            weight, posterior_variance = 0.0, 0.0
        shrunk[index] = weight * means[index]
        offsets[float(label)] = (float(shrunk[index]), float(posterior_variance))
    return offsets, between, residual - shrunk[inverse]
