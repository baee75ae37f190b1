"""Gaussian arithmetic behind the picker and the screen: conditioning, entropies, windows.

Pure functions of means and covariances (eV, eV^2); no model inside.
"""

import math

import numpy as np
from numpy.polynomial.hermite_e import hermegauss
from scipy.special import ndtr

__all__ = [
    "HERMITE_NODES",
    "HERMITE_WEIGHTS",
    "SETTLED_VARIANCE",
    "binary_entropy",
    "condition_on",
    "expected_entropy_after",
    "expected_site_entropy",
    "expected_window_entropy",
    "matrix_root",
    "smooth_root",
    "site_entropy",
    "site_probabilities",
    "summed_std_reduction",
    "summed_variance_reduction",
    "window_probability",
]

#: Variances below this (eV^2) count as settled: the cell is known or nearly so.
SETTLED_VARIANCE = 1e-12
# Gauss-Hermite nodes over a candidate's result; 9 nodes integrate polynomials of
# degree 17 exactly, ample for the smooth entropies here.
HERMITE_NODES, HERMITE_WEIGHTS = hermegauss(9)
HERMITE_WEIGHTS = HERMITE_WEIGHTS / math.sqrt(2.0 * math.pi)
# Monte Carlo draws per site question (common practice, no source); common random
# numbers across candidates keep the differences between candidates far more precise
# than each entropy.
_SITE_SAMPLES = 1024
# Candidate rows scored together in the window goal (memory: rows x nodes x targets;
# common practice, no source).
_WINDOW_CHUNK = 64
_SETTLED = SETTLED_VARIANCE
_NODES, _NODE_WEIGHTS = HERMITE_NODES, HERMITE_WEIGHTS


def condition_on(cov, index):
    """Covariance after observing cell ``index`` (its mean stays as it was).

    C' = C - C[:, i] C[i, :] / C[i, i] (Rasmussen & Williams 2006, eq. 2.24).

    Parameters
    ----------
    cov : ndarray of shape (n, n)
    index : int

    Returns
    -------
    ndarray of shape (n, n)
        A new array; row and column ``index`` are zero. A cell already settled
        (variance ~0) leaves the covariance unchanged.
    """
    cov = np.array(cov, dtype=float)
    pivot = cov[index, index]
    if pivot <= _SETTLED:
        return cov
    column = cov[:, index].copy()
    cov -= np.outer(column, column) / pivot
    cov[index, :] = 0.0
    cov[:, index] = 0.0
    return (cov + cov.T) / 2.0


def summed_variance_reduction(cov, targets=None):
    """Summed variance reduction of the target cells after observing each cell.

    Parameters
    ----------
    cov : ndarray of shape (n, n)
        Joint covariance; its diagonal is what a new calculation would return.
    targets : array-like of bool or int, optional
        Cells whose variance counts (mask or indices); None: all.

    Returns
    -------
    ndarray of shape (n,)
        Entry i is sum over targets j of C[j, i]^2 / C[i, i]; zero for settled cells.
    """
    cov = np.asarray(cov, dtype=float)
    rows = cov if targets is None else cov[np.asarray(targets), :]
    pivots = np.diag(cov)
    summed = np.sum(rows**2, axis=0)
    return np.where(pivots > _SETTLED, summed / np.where(pivots > _SETTLED, pivots, 1.0), 0.0)


def summed_std_reduction(cov, targets=None):
    """Summed predictive std reduction of the target cells after observing each cell.

    For Gaussian errors the expected absolute error of a cell is sqrt(2 / pi) times its
    std (the mean absolute deviation of a normal distribution), so this is, up to that
    factor, the expected drop of the targets' summed absolute error. Unlike the summed
    variance, it does not square a lone, very uncertain cell's own share.

    Parameters
    ----------
    cov : ndarray of shape (n, n)
        Joint covariance; its diagonal is what a new calculation would return.
    targets : array-like of bool or int, optional
        Cells whose std counts (mask or indices); None: all.

    Returns
    -------
    ndarray of shape (n,)
        Entry i is sum over targets j of sqrt(C[j, j]) - sqrt(C[j, j] - C[j, i]^2 / C[i, i])
        (the std of j after observing i; Rasmussen & Williams 2006, eq. 2.24); zero for
        settled cells.
    """
    cov = np.asarray(cov, dtype=float)
    rows = cov if targets is None else cov[np.asarray(targets), :]
    variances = np.diag(cov)
    target_variances = variances if targets is None else variances[np.asarray(targets)]
    pivots = np.where(variances > _SETTLED, variances, 1.0)
    after = np.clip(target_variances[:, None] - rows**2 / pivots[None, :], 0.0, None)
    summed = np.sum(np.sqrt(np.clip(target_variances, 0.0, None))[:, None] - np.sqrt(after), axis=0)
    return np.where(variances > _SETTLED, np.clip(summed, 0.0, None), 0.0)


def site_entropy(probabilities):
    """Shannon entropy, in bits, of a discrete distribution (zeros allowed).

    Parameters
    ----------
    probabilities : array-like
        Non-negative numbers along the last axis, normalised to sum 1.

    Returns
    -------
    float or ndarray
        -sum p log2 p over the last axis.
    """
    p = np.asarray(probabilities, dtype=float)
    p = p / np.sum(p, axis=-1, keepdims=True)
    logs = np.log2(np.where(p > 0.0, p, 1.0))
    return -np.sum(p * logs, axis=-1)


def binary_entropy(p):
    """Entropy in bits of a yes/no event of probability ``p`` (elementwise)."""
    p = np.clip(np.asarray(p, dtype=float), 0.0, 1.0)
    q = 1.0 - p
    return -(p * np.log2(np.where(p > 0.0, p, 1.0)) + q * np.log2(np.where(q > 0.0, q, 1.0)))


def window_probability(mean, std, low, high):
    """Probability that a Gaussian value lies in [low, high]; std 0 gives 0 or 1."""
    mean = np.asarray(mean, dtype=float)
    std = np.asarray(std, dtype=float)
    spread = np.maximum(std, 1e-12)
    inside = ndtr((high - mean) / spread) - ndtr((low - mean) / spread)
    return np.clip(inside, 0.0, 1.0)


def matrix_root(cov):
    """A matrix R with R R^T = cov, for a positive semi-definite cov (zero rows allowed)."""
    eigenvalues, eigenvectors = np.linalg.eigh((cov + cov.T) / 2.0)
    return eigenvectors * np.sqrt(np.clip(eigenvalues, 0.0, None))


def smooth_root(cov):
    """A matrix R with R R^T = cov that moves smoothly with cov (zero rows allowed).

    The Cholesky factor of the unsettled cells (a tiny jitter keeps a singular block
    factorable), zero elsewhere; eigenvectors (``matrix_root``) can swap or turn when
    the matrix changes a little, which would make common random draws differ between
    two nearby covariances by more than the covariances do.
    """
    cov = (np.asarray(cov, dtype=float) + np.asarray(cov, dtype=float).T) / 2.0
    root = np.zeros_like(cov)
    open_ = np.flatnonzero(np.diag(cov) > _SETTLED)
    if len(open_) == 0:
        return root
    block = cov[np.ix_(open_, open_)]
    jitter = 1e-10 * max(float(np.max(np.diag(block))), _SETTLED)
    try:
        factor = np.linalg.cholesky(block + jitter * np.eye(len(open_)))
    except np.linalg.LinAlgError:
        factor = matrix_root(block)
    root[np.ix_(open_, open_)] = factor
    return root


def site_probabilities(mean, cov, normals=None):
    """Probability that each site is the lowest, for energies ~ N(mean, cov).

    Parameters
    ----------
    mean : ndarray of shape (..., n_sites)
        One or several mean vectors sharing ``cov``.
    cov : ndarray of shape (n_sites, n_sites)
    normals : ndarray of shape (n_samples, n_sites) or None
        Standard normal draws for the Monte Carlo estimate (more than two sites);
        pass the same draws to compare cases with common random numbers. Two sites
        are computed exactly and ignore them.

    Returns
    -------
    ndarray of shape (..., n_sites)
    """
    mean = np.asarray(mean, dtype=float)
    cov = np.asarray(cov, dtype=float)
    n_sites = mean.shape[-1]
    if n_sites == 1:
        return np.ones_like(mean)
    if n_sites == 2:
        spread = math.sqrt(max(cov[0, 0] + cov[1, 1] - 2.0 * cov[0, 1], 0.0))
        gap = mean[..., 1] - mean[..., 0]
        if spread <= 1e-12:
            first = np.where(gap > 0, 1.0, np.where(gap < 0, 0.0, 0.5))
        else:
            first = ndtr(gap / spread)
        return np.stack([first, 1.0 - first], axis=-1)
    if normals is None:
        normals = np.random.default_rng(0).standard_normal((_SITE_SAMPLES, n_sites))
    draws = normals[:, :n_sites] @ matrix_root(cov).T  # (n_samples, n_sites)
    samples = mean[..., None, :] + draws  # (..., n_samples, n_sites)
    lowest = np.argmin(samples, axis=-1)
    counts = np.stack([(lowest == site).sum(axis=-1) for site in range(n_sites)], axis=-1)
    return counts / normals.shape[0]


def expected_site_entropy(mean, cov, column, normals=None):
    """Expected entropy (bits) of the lowest site after one more calculation.

    Parameters
    ----------
    mean : ndarray of shape (n_sites,)
        Site energies' mean.
    cov : ndarray of shape (n_sites, n_sites)
        Their covariance.
    column : ndarray of shape (n_sites + 1,)
        Covariance of the candidate's result with each site, then its own variance.
        The candidate may be one of the sites or another cell correlated with them.
    normals : ndarray or None
        Draws for ``site_probabilities`` (common random numbers).

    Returns
    -------
    float
        The Gauss-Hermite average over the candidate's result of the posterior entropy.
    """
    return expected_entropy_after(
        mean, cov, column, lambda means, posterior: site_entropy(site_probabilities(means, posterior, normals))
    )


def expected_entropy_after(mean, cov, column, entropy):
    """Expected entropy of a question about N(mean, cov) after one more calculation.

    The candidate's result is integrated over its predictive distribution at
    Gauss-Hermite nodes; at each node the joint is conditioned on it (rank-1 update:
    Rasmussen & Williams 2006, eq. 2.24) and the question's entropy recomputed.

    Parameters
    ----------
    mean : ndarray of shape (n,)
        The question's cells' mean.
    cov : ndarray of shape (n, n)
        Their covariance.
    column : ndarray of shape (n + 1,)
        Covariance of the candidate's result with each cell, then its own variance.
    entropy : callable
        ``entropy(means, cov)`` -> entropies, for means of shape (k, n) sharing ``cov``.

    Returns
    -------
    float
        The average posterior entropy; the current one for a settled candidate.
    """
    mean = np.asarray(mean, dtype=float)
    cross, variance = np.asarray(column[:-1], dtype=float), float(column[-1])
    if variance <= _SETTLED:
        return float(np.asarray(entropy(mean[None, :], cov))[0])
    posterior = cov - np.outer(cross, cross) / variance
    means = mean[None, :] + np.outer(_NODES, cross) / math.sqrt(variance)
    return float(np.dot(_NODE_WEIGHTS, np.asarray(entropy(means, posterior), dtype=float)))


def expected_window_entropy(mean, cov, low, high, candidates=None, targets=None):
    """Expected summed binary entropy (bits) of being in [low, high] after each candidate.

    Parameters
    ----------
    mean : ndarray of shape (n,)
    cov : ndarray of shape (n, n)
    low, high : float
    candidates : array-like of int or None
        Cells whose calculation is considered; None: all.
    targets : array-like of int or None
        Cells whose entropy is summed; None: all.

    Returns
    -------
    current : float
        Summed entropy now.
    expected : ndarray of shape (len(candidates),)
        Summed entropy expected after calculating each candidate.
    """
    mean = np.asarray(mean, dtype=float)
    cov = np.asarray(cov, dtype=float)
    n_cells = len(mean)
    candidates = np.arange(n_cells) if candidates is None else np.asarray(candidates, dtype=int)
    targets = np.arange(n_cells) if targets is None else np.asarray(targets, dtype=int)
    target_mean = mean[targets]
    target_variance = np.clip(np.diag(cov)[targets], 0.0, None)
    current = float(np.sum(binary_entropy(window_probability(target_mean, np.sqrt(target_variance), low, high))))
    expected = np.empty(len(candidates))
    for start in range(0, len(candidates), _WINDOW_CHUNK):
        chunk = candidates[start:start + _WINDOW_CHUNK]
        pivots = np.diag(cov)[chunk]
        safe = np.where(pivots > _SETTLED, pivots, 1.0)
        cross = cov[np.ix_(chunk, targets)] * (pivots > _SETTLED)[:, None]  # (c, t)
        variance = np.clip(target_variance[None, :] - cross**2 / safe[:, None], 0.0, None)
        shift = cross / np.sqrt(safe)[:, None]
        means = target_mean[None, None, :] + _NODES[None, :, None] * shift[:, None, :]
        inside = window_probability(means, np.sqrt(variance)[:, None, :], low, high)
        entropies = binary_entropy(inside)
        # a calculated cell is settled whatever its result: its own term is exactly 0
        # (the middle node could put its result on a window edge, where p = 0.5)
        own = chunk[:, None] == targets[None, :]  # (candidates, targets)
        entropies = np.where(own[:, None, :], 0.0, entropies)
        expected[start:start + len(chunk)] = np.einsum("k,ckt->c", _NODE_WEIGHTS, entropies)
    return current, expected

