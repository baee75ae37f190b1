"""Model-agnostic interventional Shapley values through shap (enumerated or sampled)."""

import warnings

import numpy as np

from dopantgap.reproducible import learner_seed, seed_integer

__all__ = ["shapley_values"]

# Up to this many features every subset is enumerated (2^12 coalitions per element;
# common practice, no source).
_MAX_EXACT_FEATURES = 12
# Orderings sampled per element beyond that (antithetic pairs; common practice, no source).
_PERMUTATION_EVALS_PER_FEATURE = 40


def _import_shap():
    # shap's colour maps call matplotlib methods that announce a deprecation on import
    with warnings.catch_warnings():
        warnings.filterwarnings(
            "ignore",
            message=r"The set_\w+ function will be deprecated",
            category=PendingDeprecationWarning,
        )
        import shap
    return shap


def shapley_values(model, X, background, random_state=0, progress=None):
    """Interventional Shapley values of a vector function, with a background sample.

    With 12 features or fewer every subset of features is enumerated
    (``shap.explainers.Exact``); with more, orderings are sampled
    (``shap.explainers.Permutation``). Features absent from a subset take the
    background's values; the base value is the model averaged over the background.

    Parameters
    ----------
    model : callable
        ``model(Z)`` with ``Z`` of shape (n_rows, n_features) returns an array of shape
        (n_rows,) or (n_rows, n_outputs).
    X : ndarray of shape (n_samples, n_features)
        Rows to explain.
    background : ndarray of shape (n_background, n_features)
    random_state : None, int, RandomState or Generator, default=0
        Seed of the sampled orderings (unused when enumerating;
        ``reproducible.seed_integer``).
    progress : object with ``update(n)`` or None
        Told after each explained row.

    Returns
    -------
    values : ndarray of shape (n_samples, n_features, n_outputs)
    base_values : ndarray of shape (n_samples, n_outputs)
    """
    seed = learner_seed(seed_integer(random_state))
    shap = _import_shap()
    X = np.asarray(X, dtype=float)
    background = np.asarray(background, dtype=float)

    def as_matrix(Z):
        result = np.asarray(model(np.asarray(Z, dtype=float)), dtype=float)
        return result.reshape(len(Z), -1)

    n_outputs = as_matrix(background[:1]).shape[1]
    masker = shap.maskers.Independent(background, max_samples=len(background))
    n_features = X.shape[1]
    if n_features <= _MAX_EXACT_FEATURES:
        explainer = shap.explainers.Exact(as_matrix, masker)
        options = {"max_evals": 2**n_features + 1}
    else:
        explainer = shap.explainers.Permutation(as_matrix, masker, seed=seed)
        options = {"max_evals": 2 * _PERMUTATION_EVALS_PER_FEATURE * n_features + 1}
    values = np.empty((len(X), n_features, n_outputs))
    base_values = np.empty((len(X), n_outputs))
    for row in range(len(X)):
        result = explainer(X[row : row + 1], silent=True, **options)
        values[row] = np.asarray(result.values, dtype=float).reshape(n_features, n_outputs)
        base_values[row] = np.asarray(result.base_values, dtype=float).reshape(n_outputs)
        if progress is not None:
            progress.update(1)
    return values, base_values
