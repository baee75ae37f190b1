"""Turn cross-validated residuals into intervals that hold, scenario by scenario.

A missing cell of an element with many computed cells, an element never computed and
an expensive-level cell whose cheap level is known are different questions with
different errors. For each scenario the standardised out-of-fold residuals
z = (truth - mean) / std are kept; an interval at level L is mean +/- q_L * std, with
q_L the split-conformal quantile of |z| (Vovk, Gammerman & Shafer 2005; Lei et al.
2018, "Distribution-free predictive inference for regression", JASA, eq. 4 with
normalised scores): the ceil((n + 1) L)-th smallest |z|. Where n is too small for L,
the Gaussian quantile scaled by the 90 % conformal quantile is used instead.
"""

import math

import numpy as np
from scipy.stats import norm

__all__ = ["SCENARIOS", "ScenarioCalibration", "cross_conformal_covered"]

#: The scenarios a missing cell can be in, in the order they are reported.
SCENARIOS = ("new-cell", "new-element", "upgrade")

# Fewer residuals than this and a key borrows the pooled residuals of a wider group
# (common practice, no source: 20 points give a 90 % quantile to ~ +/-15 %).
_MIN_RESIDUALS = 20
_REFERENCE_LEVEL = 0.9


class ScenarioCalibration:
    """Per-scenario (and per-quantity) interval widths from standardised residuals.

    Widths are taken from the residuals of the same scenario and quantity when there
    are at least 20 of them, else from the scenario's residuals over all quantities,
    else from all residuals pooled. Quantities differ: a binding energy computed at
    one site per host is not as predictable as a site energy, and pooling the two
    was measured to leave the binding energies' intervals too narrow.

    Parameters
    ----------
    scores : dict
        (scenario, quantity) -> array of standardised residuals (truth - mean) / std.

    Attributes
    ----------
    scores_ : dict
        Key -> sorted |z|, for keys (scenario, quantity), (scenario, None) and
        (None, None), the last two pooled.
    borrowed_ : set
        Scenarios with too few residuals of their own, using all residuals pooled.
    """

    def __init__(self, scores):
        def sorted_abs(arrays):
            arrays = [np.asarray(array, dtype=float) for array in arrays]
            return np.sort(np.abs(np.concatenate(arrays))) if arrays else np.empty(0)

        self.scores_ = {(None, None): sorted_abs(list(scores.values()))}
        self.borrowed_ = set()
        for scenario in SCENARIOS:
            own = sorted_abs([v for (s, _q), v in scores.items() if s == scenario])
            self.scores_[(scenario, None)] = own
            if len(own) < _MIN_RESIDUALS:
                self.borrowed_.add(scenario)
        for (scenario, quantity), values in scores.items():
            self.scores_[(scenario, quantity)] = sorted_abs([values])

    def _scores(self, scenario, quantity=None):
        for key in ((scenario, quantity), (scenario, None)):
            found = self.scores_.get(key)
            if found is not None and len(found) >= _MIN_RESIDUALS:
                return found
        return self.scores_[(None, None)]

    def n_residuals(self, scenario, quantity=None):
        """How many residuals the widths of a scenario (and quantity) rest on."""
        return len(self._scores(scenario, quantity))

    def half_width(self, scenario, level, quantity=None):
        """Multiplier q such that mean +/- q * std is the calibrated interval."""
        if not 0.0 < level < 1.0:
            raise ValueError(f"The interval level must lie strictly between 0 and 1, got {level}.")
        scores = self._scores(scenario, quantity)
        n_scores = len(scores)
        gaussian = norm.ppf(0.5 + level / 2.0)
        if n_scores == 0:
            return gaussian
        rank = math.ceil((n_scores + 1) * level)
        if rank <= n_scores:
            return float(scores[rank - 1])
        return gaussian * self.std_scale(scenario, quantity)

    def std_scale(self, scenario, quantity=None):
        """Factor turning a raw std into a calibrated one.

        Chosen so that mean +/- 1.645 * calibrated std is the 90 % interval.
        """
        scores = self._scores(scenario, quantity)
        n_scores = len(scores)
        if n_scores == 0:
            return 1.0
        rank = min(math.ceil((n_scores + 1) * _REFERENCE_LEVEL), n_scores)
        return float(scores[rank - 1] / norm.ppf(0.5 + _REFERENCE_LEVEL / 2.0))


def cross_conformal_covered(residuals, score_column="z", level=0.9):
    """Whether each out-of-fold residual lies inside an interval it did not help set.

    For each fold, a :class:`ScenarioCalibration` is built from the residuals of all
    *other* folds and judges the fold's own: a cell counts as covered when
    ``|score| <= half_width(scenario, level, quantity)``. This is the cross-conformal
    check (Vovk 2015, "Cross-conformal predictors", Annals of Mathematics and Artificial
    Intelligence 74; Barber et al. 2021, "Predictive inference with the jackknife+",
    Annals of Statistics 49): an in-sample check would pass by construction.

    Parameters
    ----------
    residuals : DataFrame
        Columns ``scenario``, ``quantity``, ``fold`` and ``score_column``.
    score_column : str, default="z"
        Standardised residual (``z``) or, for a model without a spread of its own, the
        plain error.
    level : float, default=0.9

    Returns
    -------
    ndarray of bool
    """
    covered = np.zeros(len(residuals), dtype=bool)
    if len(residuals) == 0:
        return covered
    scores = np.abs(residuals[score_column].to_numpy(dtype=float))
    folds = residuals["fold"].to_numpy()
    scenarios = residuals["scenario"].to_numpy()
    quantities = residuals["quantity"].to_numpy()
    for fold in np.unique(folds):
        inside = folds == fold
        others = residuals[~inside]
        calibration = ScenarioCalibration(
            {key: part[score_column].to_numpy(dtype=float) for key, part in others.groupby(["scenario", "quantity"])}
        )
        widths = {}
        for position in np.flatnonzero(inside):
            key = (scenarios[position], quantities[position])
            if key not in widths:
                widths[key] = calibration.half_width(key[0], level, key[1])
            covered[position] = scores[position] <= widths[key]
    return covered
