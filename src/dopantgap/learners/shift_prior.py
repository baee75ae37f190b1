"""A correction between levels: the columns' shifts shrunk together, or a learner on top of their mean."""

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin, clone
from sklearn.utils.validation import check_is_fitted, validate_data

__all__ = ["ShiftPriorLearner"]


class ShiftPriorLearner(RegressorMixin, BaseEstimator):
    """Per-label means shrunk toward the pooled mean, or a learner around the pooled mean.

    Meant for the correction between two levels of theory (expensive minus cheap), where
    the label is the host/site column: a researcher's rule of thumb is "the cheap value
    plus the column's usual shift". Here the column's shift is estimated with a
    hierarchical (one-way random effects) prior, so that a column carried by one or two
    elements borrows from the others:

        shift_c = pooled + w_c (mean_c - pooled),  w_c = tau^2 / (tau^2 + s^2 / n_c),

    with s^2 the pooled within-column variance and tau^2 the between-column variance
    by the method of moments (Gelman et al., Bayesian Data Analysis, 3rd ed., 2013,
    ch. 5, the hierarchical normal model; the moment estimate of tau^2 is common
    practice, no source). With a ``residual_learner`` the prediction is the pooled
    shift plus that learner's fit of ``y - pooled`` (a Gaussian process whose column
    indicators learn how columns differ); the surrogate keeps whichever of the two
    forms its upgrade loop finds better out of fold, so with few elements the
    correction stays at the shift rule and with many it follows the data. (Centring
    the learner on the shrunk column shifts instead was measured to raise the
    out-of-fold upgrade error on the invented demo table from 0.056 / 0.081 eV to
    0.089 / 0.109 eV for the binding / site energies.)

    Parameters
    ----------
    label_column : int or None, default=None
        Column of ``X`` holding the label (the host/site column code); None: one label.
    residual_learner : estimator or None, default=None
        Regressor with ``predict(X, return_std, return_cov)`` for ``y - pooled``; None:
        the shrunk shifts alone, with spread sqrt(s^2 + posterior variance of the shift).

    Attributes
    ----------
    shifts_ : dict
        Label -> shrunk shift.
    shift_variance_ : dict
        Label -> posterior variance of the shift.
    pooled_ : float
    within_variance_ : float
        s^2 (the targets' variance where no label has two rows; 1 eV^2 where there is
        no spread at all).
    between_variance_ : float
        tau^2.
    residual_learner_ : estimator or None
        The fitted clone of ``residual_learner``.

    Examples
    --------
    >>> import numpy as np
    >>> # three elements in column 0, one in column 1: column 1's shift is pulled toward the pool
    >>> X = np.array([[0.0], [0.0], [0.0], [1.0]])
    >>> learner = ShiftPriorLearner(label_column=0).fit(X, np.array([0.2, 0.3, 0.1, 0.9]))
    >>> round(learner.pooled_, 3)
    0.375
    >>> bool(0.375 < learner.predict(np.array([[1.0]]))[0] <= 0.9)
    True
    """

    def __init__(self, label_column=None, residual_learner=None):
        self.label_column = label_column
        self.residual_learner = residual_learner

    def _labels(self, X):
        return np.zeros(X.shape[0]) if self.label_column is None else X[:, int(self.label_column)]

    def fit(self, X, y):
        """Estimate the shrunk shifts, then fit the residual learner on what they leave.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)

        Returns
        -------
        self : ShiftPriorLearner
        """
        X, y = validate_data(self, X, y, y_numeric=True, dtype=np.float64)
        labels = self._labels(X)
        unique = np.unique(labels)
        counts = np.array([np.sum(labels == label) for label in unique], dtype=float)
        means = np.array([y[labels == label].mean() for label in unique])
        pooled = float(y.mean())
        degrees = len(y) - len(unique)
        if degrees >= 1:
            within = float(sum(np.sum((y[labels == label] - mean) ** 2) for label, mean in zip(unique, means)))
            within /= degrees
        else:
            # one row per label: within- and between-label spread cannot be told apart
            within = float(np.var(y)) if len(y) > 1 else 0.0
        if within <= 0.0:
            # a single row, or rows that agree to the last digit: no spread to measure,
            # so no confidence either (1 eV, as the column-mean fallback)
            within = float(np.var(y)) or 1.0
        if len(unique) > 1 and degrees >= 1:
            between = max(float(np.var(means, ddof=1)) - float(np.mean(within / counts)), 0.0)
        else:
            between = 0.0
        weights = between / (between + within / counts)
        shifts = pooled + weights * (means - pooled)
        self.pooled_ = pooled
        self.within_variance_ = within
        self.between_variance_ = between
        self.shifts_ = {float(label): float(shift) for label, shift in zip(unique, shifts)}
        self.shift_variance_ = {
            float(label): float(weight * within / count) for label, weight, count in zip(unique, weights, counts)
        }
        self.residual_learner_ = None
        if self.residual_learner is not None:
            self.residual_learner_ = clone(self.residual_learner).fit(X, y - pooled)
        return self

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        # without a residual learner it is a rule of means, meant to be beaten
        tags.regressor_tags.poor_score = self.residual_learner is None
        return tags

    def _shift(self, labels):
        return np.array([self.shifts_.get(float(label), self.pooled_) for label in labels])

    def _shift_variance(self, labels):
        unseen = self.between_variance_ + self.within_variance_ / max(len(self.shifts_), 1)
        return np.array([self.shift_variance_.get(float(label), unseen) for label in labels])

    def predict(self, X, return_std=False, return_cov=False):
        """Shift plus the residual learner's mean; optionally its std or covariance.

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
        labels = self._labels(X)
        if self.residual_learner_ is not None:
            if not (return_std or return_cov):
                return self.pooled_ + self.residual_learner_.predict(X)
            mean, spread = self.residual_learner_.predict(X, return_std=return_std, return_cov=return_cov)
            return self.pooled_ + mean, spread
        shift = self._shift(labels)
        variance = self.within_variance_ + self._shift_variance(labels)
        if return_cov:
            same = labels[:, None] == labels[None, :]
            cov = np.where(same, self._shift_variance(labels)[:, None], 0.0)
            cov[np.diag_indices_from(cov)] = variance
            return shift, cov
        if return_std:
            return shift, np.sqrt(variance)
        return shift
