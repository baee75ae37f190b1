"""The plainest honest guess: each column's mean, with the spread around it."""

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils.validation import check_is_fitted, validate_data

__all__ = ["ColumnMeanLearner"]


class ColumnMeanLearner(RegressorMixin, BaseEstimator):
    """Predict the mean of the training rows that share a label; spread = their pooled std.

    A baseline, and the fallback for a stage with too few rows to fit anything else.

    Parameters
    ----------
    label_column : int or None, default=None
        Column of ``X`` holding the label (for example the host/site column code).
        None: one mean for all rows.

    Attributes
    ----------
    means_ : dict
        Label -> mean of its training targets.
    overall_mean_ : float
    residual_std_ : float
        Pooled standard deviation of the targets around their label's mean.
    """

    def __init__(self, label_column=None):
        self.label_column = label_column

    def fit(self, X, y):
        X, y = validate_data(self, X, y, y_numeric=True, dtype=np.float64)
        labels = np.zeros(len(y)) if self.label_column is None else X[:, int(self.label_column)]
        self.means_ = {float(label): float(y[labels == label].mean()) for label in np.unique(labels)}
        self.overall_mean_ = float(y.mean())
        fitted = np.array([self.means_[float(label)] for label in labels])
        degrees = max(len(y) - len(self.means_), 1)
        self.residual_std_ = float(np.sqrt(np.sum((y - fitted) ** 2) / degrees))
        if self.residual_std_ == 0.0:
            # one row per label leaves no spread to measure: fall back on the targets' own
            self.residual_std_ = float(np.std(y)) or 1.0
        return self

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        # a baseline: it is meant to score poorly
        tags.regressor_tags.poor_score = True
        return tags

    def predict(self, X, return_std=False, return_cov=False):
        """Label means; optionally the pooled spread (``return_std``) or its diagonal covariance."""
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, dtype=np.float64)
        if return_std and return_cov:
            raise ValueError("Ask for return_std or return_cov, not both.")
        labels = np.zeros(X.shape[0]) if self.label_column is None else X[:, int(self.label_column)]
        mean = np.array([self.means_.get(float(label), self.overall_mean_) for label in labels])
        if return_cov:
            return mean, np.eye(X.shape[0]) * self.residual_std_**2
        if return_std:
            return mean, np.full(X.shape[0], self.residual_std_)
        return mean
