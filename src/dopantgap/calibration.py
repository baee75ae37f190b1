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

__all__ = ["SCENARIOS", "ScenarioCalibration"]

#: The scenarios a missing cell can be in, in the order they are reported.
SCENARIOS = ("new-cell", "new-element", "upgrade")

# Fewer residuals than this and a scenario borrows the pooled residuals of all
# scenarios (common practice, no source: 20 points give a 90 % quantile to ~ +/-15 %).
_MIN_RESIDUALS = 20
_REFERENCE_LEVEL = 0.9


class ScenarioCalibration:
    """Per-scenario interval widths learned from standardised residuals.

    Parameters
    ----------
    scores : dict
        Scenario name -> array of standardised residuals (truth - mean) / std.

    Attributes
    ----------
    scores_ : dict
        Scenario -> sorted |z| (pooled residuals for scenarios with too few).
    borrowed_ : set
        Scenarios that use the pooled residuals.
    """

    def __init__(self, scores):
        pooled = np.sort(np.abs(np.concatenate([np.asarray(v, float) for v in scores.values()] or [[]])))
        self.scores_, self.borrowed_ = {}, set()
        for scenario in SCENARIOS:
            own = np.sort(np.abs(np.asarray(scores.get(scenario, []), dtype=float)))
            if len(own) >= _MIN_RESIDUALS:
                self.scores_[scenario] = own
            else:
                self.scores_[scenario] = pooled
                self.borrowed_.add(scenario)

    def n_residuals(self, scenario):
        """How many residuals the scenario's widths rest on (pooled ones if borrowed)."""
        return len(self.scores_[scenario])

    def half_width(self, scenario, level):
        """Multiplier q such that mean +/- q * std is the calibrated interval."""
        if not 0.0 < level < 1.0:
            raise ValueError(f"The interval level must lie strictly between 0 and 1, got {level}.")
        scores = self.scores_[scenario]
        n_scores = len(scores)
        gaussian = norm.ppf(0.5 + level / 2.0)
        if n_scores == 0:
            return gaussian
        rank = math.ceil((n_scores + 1) * level)
        if rank <= n_scores:
            return float(scores[rank - 1])
        return gaussian * self.std_scale(scenario)

    def std_scale(self, scenario):
        """Factor turning a raw std into a calibrated one.

        Chosen so that mean +/- 1.645 * calibrated std is the 90 % interval.
        """
        scores = self.scores_[scenario]
        n_scores = len(scores)
        if n_scores == 0:
            return 1.0
        rank = min(math.ceil((n_scores + 1) * _REFERENCE_LEVEL), n_scores)
        return float(scores[rank - 1] / norm.ppf(0.5 + _REFERENCE_LEVEL / 2.0))
