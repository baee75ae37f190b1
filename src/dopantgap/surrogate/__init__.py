"""One object that learns a whole table and predicts any cell with an honest spread.

The table is split into *stages*: one per quantity and level of theory. The cheapest
level of a quantity is learned directly; each more expensive level is learned as a
correction to the level below it, where both were computed, so that

    value(level k) = value(level k-1) + correction(k),

with value(level k-1) the user's number where computed and the model's prediction
(its spread carried through) where not. Every stage sees the element's descriptors,
host-relative terms and the host/site column (``features.CellEncoder``).

Uncertainty is calibrated per scenario (``calibration.SCENARIOS``) on grouped
cross-validation: in each fold a group of elements is hidden entirely (new-element)
and single cells of the remaining elements are hidden (new-cell). The upgrade
scenario (an expensive cell whose cheap level is computed) has a loop of its own
over the elements computed at both levels: a correction learned from a dozen
elements is sensitive to how many it sees, so its folds hide as few of them as
possible, and each fold optimises the correction's hyperparameters afresh.

The package holds one concept per module: ``model`` (the ``Surrogate`` estimator and
its argument checks), ``stages`` (one fitted stage per quantity and level: its rows and
learner), ``crossval`` (folds, out-of-fold residuals, learner choice, metrics and
calibration) and ``chain`` (predictions through the chain of levels, scenarios and
calibrated factors).
"""

# Model folders pickle ``dopantgap.surrogate.Surrogate`` and ``dopantgap.surrogate._Stage``
# (saved before this was a package): both names stay importable from here.
from dopantgap.surrogate.model import LEARNERS, Surrogate, order_levels
from dopantgap.surrogate.stages import _Stage as _Stage

__all__ = ["LEARNERS", "Surrogate", "order_levels"]
