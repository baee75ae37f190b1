"""A Gaussian process conditioned in blocks of whole hosts, so that memory stays bounded."""

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils.validation import check_is_fitted

from dopantgap.learners.conditioned import ConditionedGPR
from dopantgap.sizes import MAX_BLOCK_ROWS

__all__ = ["BlockedGPR", "MAX_BLOCK_ROWS", "pack_blocks"]


def pack_blocks(group_sizes, max_rows):
    """Split groups (whole hosts), in the order given, into consecutive blocks of about
    equal size, none over ``max_rows`` unless one group alone is.

    Parameters
    ----------
    group_sizes : sequence of int
        Rows of each group, in the order the groups are packed.
    max_rows : int
        Largest number of rows a block may hold.

    Returns
    -------
    list of list of int
        Positions (into ``group_sizes``) of the groups of each block.

    Examples
    --------
    >>> pack_blocks([3, 3, 3, 3], 6)
    [[0, 1], [2, 3]]
    >>> pack_blocks([3, 3, 3, 3], 12)
    [[0, 1, 2, 3]]
    """
    sizes = [int(size) for size in group_sizes]
    total = sum(sizes)
    n_blocks = max(1, int(np.ceil(total / max_rows)))
    target = total / n_blocks
    blocks, current, filled = [], [], 0
    for position, size in enumerate(sizes):
        # close the block when this group would overshoot both the share and the cap
        if current and (filled + size > max_rows or filled + size / 2 > target):
            blocks.append(current)
            current, filled = [], 0
        current.append(position)
        filled += size
    if current:
        blocks.append(current)
    return blocks


class BlockedGPR(RegressorMixin, BaseEstimator):
    """Local experts over whole hosts: a fixed kernel conditioned block by block.

    The rows are split into blocks of whole groups (hosts: every cell of a host, at any
    site, sits in one block) of at most ``max_block_rows`` rows; each block is a
    Gaussian process conditioned exactly on its own rows, with the one kernel and the
    one target scaling (the mean and standard deviation of all rows) shared by every
    block. A query is predicted by the block of its group, so two cells of one host
    keep their joint covariance; cells of different blocks are independent, and a
    query of a group no block holds (a new host) is predicted by every block and the
    answers combined as a generalised product of experts with equal weights (Cao &
    Fleet 2014, "Generalized product of experts for automatic and principled fusion
    of Gaussian process predictions", arXiv:1410.7827, eq. 5), whose variance does not
    shrink below the experts'. Memory grows as the number of rows times
    ``max_block_rows``, not as rows squared; with one block the answers are exactly
    those of the full Gaussian process.

    Parameters
    ----------
    kernel : Kernel
        The covariance, held fixed (the hyperparameters come from elsewhere).
    group_column : int
        Column of ``X`` holding each row's label (a column code).
    group_of_label : dict
        Label -> group (host); labels absent here form no group of their own.
    max_block_rows : int, default=MAX_BLOCK_ROWS
        Largest block (a single group larger than this is a block on its own).

    Attributes
    ----------
    kernel_ : Kernel
        The kernel (as fitted regressors expose it).
    experts_ : list of ConditionedGPR
        One conditioned process per block, on standardised targets.
    expert_rows_ : list of ndarray
        Rows (of the training ``X``) each block is conditioned on.
    block_of_group_ : dict
        Group -> position in ``experts_``.
    y_mean_, y_scale_ : float
        The target scaling shared by the blocks.
    log_marginal_likelihood_value_ : float
        Sum of the blocks' log marginal likelihoods (of the standardised targets).
    """

    def __init__(self, kernel, group_column, group_of_label, max_block_rows=MAX_BLOCK_ROWS):
        self.kernel = kernel
        self.group_column = group_column
        self.group_of_label = group_of_label
        self.max_block_rows = max_block_rows

    def _groups(self, X):
        labels = X[:, int(self.group_column)]
        mapping = self.group_of_label
        return np.array([mapping.get(_label_key(label)) for label in labels], dtype=object)

    def fit(self, X, y):
        """Split the rows into blocks of whole groups and condition each.

        Parameters
        ----------
        X : ndarray of shape (n_samples, n_features)
        y : ndarray of shape (n_samples,)

        Returns
        -------
        self : BlockedGPR
        """
        X = np.asarray(X, dtype=float)
        y = np.asarray(y, dtype=float)
        groups = self._groups(X)
        order = list(dict.fromkeys(group for group in _group_order(self.group_of_label)))
        # rows whose label has no group travel with the first block
        counts = {group: 0 for group in order}
        for group in groups:
            if group in counts:
                counts[group] += 1
        present = [group for group in order if counts[group]]
        blocks = pack_blocks([counts[group] for group in present], int(self.max_block_rows))
        self.block_of_group_ = {present[position]: block for block, members in enumerate(blocks) for position in members}
        row_block = np.array([self.block_of_group_.get(group, 0) for group in groups])
        self.y_mean_ = float(np.mean(y))
        spread = float(np.std(y))
        self.y_scale_ = spread if spread > 0 else 1.0
        target = (y - self.y_mean_) / self.y_scale_
        self.experts_, self.expert_rows_ = [], []
        for block in range(len(blocks)):
            rows = np.flatnonzero(row_block == block)
            expert = ConditionedGPR(kernel=self.kernel, optimizer=None, normalize_y=False)
            self.experts_.append(expert.fit(X[rows], target[rows]))
            self.expert_rows_.append(rows)
        self.kernel_ = self.experts_[0].kernel_
        self.log_marginal_likelihood_value_ = float(
            sum(expert.log_marginal_likelihood_value_ for expert in self.experts_)
        )
        self.n_features_in_ = X.shape[1]
        return self

    def predict(self, X, return_std=False, return_cov=False):
        """Mean, and optionally the standard deviation or covariance, of each row.

        Parameters
        ----------
        X : ndarray of shape (n_samples, n_features)
        return_std : bool, default=False
        return_cov : bool, default=False
            Covariance of rows of one block as that block gives it; zero between
            blocks and for rows no block holds (their variance on the diagonal).

        Returns
        -------
        mean : ndarray of shape (n_samples,)
        std : ndarray of shape (n_samples,), if ``return_std``
        cov : ndarray of shape (n_samples, n_samples), if ``return_cov``
        """
        check_is_fitted(self)
        if return_std and return_cov:
            raise ValueError("Ask for return_std or return_cov, not both.")
        X = np.asarray(X, dtype=float)
        blocks = np.array([self.block_of_group_.get(group, -1) for group in self._groups(X)])
        mean = np.empty(len(X))
        variance = np.empty(len(X))
        cov = np.zeros((len(X), len(X))) if return_cov else None
        for block, expert in enumerate(self.experts_):
            rows = np.flatnonzero(blocks == block)
            if not len(rows):
                continue
            if return_cov:
                mean[rows], part = expert.predict(X[rows], return_cov=True)
                cov[np.ix_(rows, rows)] = part
                variance[rows] = np.diag(part)
            else:
                mean[rows], std = expert.predict(X[rows], return_std=True)
                variance[rows] = std ** 2
        homeless = np.flatnonzero(blocks < 0)
        if len(homeless):
            mean[homeless], variance[homeless] = self._product_of_experts(X[homeless])
            if return_cov:
                cov[homeless, homeless] = variance[homeless]
        mean = self.y_mean_ + self.y_scale_ * mean
        if return_cov:
            return mean, cov * self.y_scale_ ** 2
        if return_std:
            return mean, np.sqrt(np.maximum(variance, 0.0)) * self.y_scale_
        return mean

    def _product_of_experts(self, X):
        """Every block's answer, precision-weighted with weights 1 / n_blocks (the
        generalised product of experts, Cao & Fleet 2014, eq. 5)."""
        weight = 1.0 / len(self.experts_)
        precision = np.zeros(len(X))
        weighted = np.zeros(len(X))
        for expert in self.experts_:
            mean, std = expert.predict(X, return_std=True)
            variance = np.maximum(std ** 2, 1e-300)
            precision += weight / variance
            weighted += weight * mean / variance
        return weighted / precision, 1.0 / precision


def _label_key(label):
    """A label as the mapping's key (labels are stored in float matrices)."""
    return int(label) if float(label).is_integer() else float(label)


def _group_order(group_of_label):
    """The groups in the order of their labels (so blocks gather neighbouring labels)."""
    return [group_of_label[label] for label in sorted(group_of_label)]
