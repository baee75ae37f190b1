"""The single calculation that would settle an undecided screening verdict most."""

import numpy as np

from dopantgap.gaussian import binary_entropy, expected_entropy_after, smooth_root

__all__ = ["decisive_calculation"]

# An expected entropy drop below this (bits) is no reason to calculate (common practice,
# no source: the common random draws resolve differences well below it).
_MIN_GAIN_BITS = 1e-3


def _probability(draws, resolved, index):
    held = np.ones(draws.shape[:-1], dtype=bool)
    for condition in resolved:
        held &= condition.holds(draws, index)
    return held.mean(axis=-1)


def decisive_calculation(mean, cov, candidates, resolved, index, normals, costs):
    """Expected drop of the verdict's entropy per candidate, and the best per unit cost.

    The verdict's uncertainty is the binary entropy (bits) of P(all conditions hold).
    Each candidate's result is integrated at Gauss-Hermite nodes, the joint of the
    element's cells conditioned on it (``gaussian.expected_entropy_after``), and P
    recomputed on common random draws, so that candidates differ by their effect, not
    by sampling noise: the rule of the picker's window and site goals, applied to the
    screen's question.

    Parameters
    ----------
    mean : ndarray of shape (n,)
        The element's cells (computed ones fixed, variance 0).
    cov : ndarray of shape (n, n)
    candidates : list of (label, column, method)
        ``column``: covariance of the candidate with the n cells, then its variance.
    resolved : list of ResolvedCondition
    index : dict
        (quantity, site) -> position in ``mean``.
    normals : ndarray of shape (n_draws, >= n)
        Common standard normal draws.
    costs : dict
        Method -> cost (missing methods cost 1).

    Returns
    -------
    (str, float, float) or None
        Label of the best candidate, its expected entropy drop in bits and its cost;
        None when no candidate would move the verdict.
    """
    n = len(mean)
    normals = normals[:, :n]

    def entropy(means, posterior):
        draws = means[:, None, :] + (normals @ smooth_root(posterior).T)[None, :, :]
        return binary_entropy(_probability(draws, resolved, index))

    current = float(entropy(np.asarray(mean, dtype=float)[None, :], cov)[0])
    best = None
    for label, column, method in candidates:
        gain = max(current - expected_entropy_after(mean, cov, column, entropy), 0.0)
        cost = float(costs.get(method, 1.0))
        if gain > _MIN_GAIN_BITS and (best is None or gain / cost > best[1] / best[2]):
            best = (label, gain, cost)
    return best
