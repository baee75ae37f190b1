"""Plausible versions of a fitted surrogate: its stages learned from few elements, with
hyperparameters re-tuned on random subsets of those elements.

What the picker averages its benefit over, so that it does not trust a covariance tuned
on a handful of expensive elements (``picker`` module docstring, "Robust picks"). A
correction kept at the column shifts alone (the upgrade loop found the Gaussian process
no help yet) gets versions with the Gaussian process on top: the form a refit turns to
once more elements are computed, and the one that tells the picker that an element's
cells share what the element does.
"""

import copy

import numpy as np
from sklearn.base import clone
from threadpoolctl import threadpool_limits

from dopantgap.learners import ShiftPriorLearner
from dopantgap.progress import step
from dopantgap.reproducible import seed_integer
from dopantgap.surrogate.stages import _MIN_ELEMENTS_FOR_RESIDUAL, _gaussian_process, stage_rows
from dopantgap.table import REQUIRED_COLUMNS

__all__ = ["FEW_ELEMENTS", "N_PLAUSIBLE", "plausible_surrogates", "uncertain_stages"]

#: A stage whose Gaussian process learned from fewer elements than this gets plausible
#: kernels; one learned from more keeps its own (common practice, no source; measured on
#: the INVENTED demo table with the hybrid level kept for 6 of 61 elements: doubling or
#: halving any group of hyperparameters of the 61-element cheap-level stage lowers its log
#: marginal likelihood by 3.5 to 222, while for the 6-element correction the element
#: offset and the noise can move by a factor of two at no cost at all).
FEW_ELEMENTS = 20
#: Plausible versions the picker averages over, the fitted model included (common
#: practice, no source: a few re-tunings show the spread; each costs a small fit).
N_PLAUSIBLE = 5
# Share of a stage's elements each re-tuning sees, drawn without replacement (a
# delete-d jackknife rather than a bootstrap: repeated elements would make the fitted
# noise look smaller than it is; common practice, no source), and the fewest it sees.
_SUBSET_SHARE = 2.0 / 3.0
_MIN_SUBSET_ELEMENTS = 3
# L-BFGS-B iterations of a re-tuning, warm-started from the fitted kernel (the budget of a
# cross-validation fold, ``stages._FOLD_OPTIMISER_ITERATIONS``).
_RETUNE_ITERATIONS = 30


def _shift_only(learner):
    return isinstance(learner, ShiftPriorLearner) and learner.residual_learner is None


def _n_elements(surrogate, key, stage):
    n_elements = len(getattr(stage, "elements", ()))
    if not n_elements:
        # a model folder written before stages kept their elements
        cells, _target, _kind = _rows(surrogate, surrogate.table_[list(REQUIRED_COLUMNS)], key)
        n_elements = cells["element"].nunique()
    return n_elements


def uncertain_stages(surrogate):
    """Keys (quantity, method) of the stages that learned from fewer than ``FEW_ELEMENTS``
    elements and get plausible versions.

    They are the stages with a fitted Gaussian process learned from more than
    ``_MIN_SUBSET_ELEMENTS`` elements, and, in a surrogate whose learner is the Gaussian
    process, the corrections kept at the column shifts alone with enough elements for the
    Gaussian process on top (``stages._MIN_ELEMENTS_FOR_RESIDUAL``; one with fewer rows
    than ``stages._MIN_ROWS_FOR_LEARNER`` stays as it is in every version).

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.

    Returns
    -------
    list of tuple
        The stages' keys, in the surrogate's order.
    """
    keys = []
    for key, stage in surrogate.stages_.items():
        process = _gaussian_process(stage.learner)
        if process is not None and hasattr(process, "regressor_"):
            lowest = _MIN_SUBSET_ELEMENTS + 1
        elif _shift_only(stage.learner) and getattr(surrogate, "learner_", None) == "gp":
            lowest = max(_MIN_ELEMENTS_FOR_RESIDUAL, _MIN_SUBSET_ELEMENTS)
        else:
            continue
        n_elements = _n_elements(surrogate, key, stage)
        if lowest <= n_elements < FEW_ELEMENTS:
            keys.append(key)
    return keys


def _rows(surrogate, core, key):
    quantity, method = key
    position = surrogate.quantity_levels_[quantity].index(method)
    return stage_rows(surrogate, core, quantity, position)


def _process_prefix(learner):
    """Parameter prefix of the learner's Gaussian process (``set_params`` form)."""
    return "" if _gaussian_process(learner) is learner else "residual_learner__"


def plausible_surrogates(surrogate, n_versions=N_PLAUSIBLE, random_state=0, progress=None):
    """The surrogate, then versions of it with other plausible kernels for its few-element stages.

    Each version re-tunes the hyperparameters of every stage of ``uncertain_stages`` on a
    random two thirds of the stage's elements (all their rows; at least three elements),
    starting from the fitted kernel, then conditions the stage on all of its rows with
    that kernel held fixed. A correction kept at the column shifts alone is re-tuned the
    same way with a Gaussian process on top of the shifts, from the default start. The
    spread of the versions' covariances is the spread a handful of elements leaves on the
    hyperparameters; with many elements the versions coincide with the fitted model.
    Other stages, the calibration and the table are shared.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    n_versions : int, default=N_PLAUSIBLE
        Number of versions returned, the fitted model first; 1 returns it alone.
    random_state : None, int, RandomState or Generator, default=0
        Seed of the subsets (``reproducible.seed_integer``).
    progress : object or None, default=None
        Told ``update(1)`` after each re-tuned version (``progress.step``).

    Returns
    -------
    list of Surrogate
        ``[surrogate]`` when no stage is uncertain or ``n_versions`` is 1, else
        ``n_versions`` models (shallow copies sharing everything but the re-tuned stages).
    """
    keys = uncertain_stages(surrogate) if n_versions > 1 else []
    if not keys:
        return [surrogate]
    rng = np.random.default_rng(seed_integer(random_state))
    core = surrogate.table_[list(REQUIRED_COLUMNS)]
    rows = {key: _rows(surrogate, core, key) for key in keys}
    forms = {key: _version_form(surrogate, surrogate.stages_[key], rows[key]) for key in keys}
    versions = [surrogate]
    for _ in range(n_versions - 1):
        stages = dict(surrogate.stages_)
        for key in keys:
            stage = stages[key]
            form, warm = forms[key]
            if form is None:
                continue
            cells, target, _kind = rows[key]
            X = stage.encoder.transform(cells)
            elements = sorted(set(cells["element"]))
            size = max(_MIN_SUBSET_ELEMENTS, int(round(_SUBSET_SHARE * len(elements))))
            subset = cells["element"].isin(rng.choice(elements, size=size, replace=False)).to_numpy()
            prefix = _process_prefix(form)
            settings = {prefix + "fixed_kernel": None, prefix + "selection_group_column": None}
            if warm is not None:
                settings[prefix + "initial_kernel"] = warm
                settings[prefix + "max_optimiser_iterations"] = _RETUNE_ITERATIONS
            tuner = clone(form).set_params(**settings)
            learner = clone(form)
            # one BLAS thread: these are matrices of a few hundred rows, where a second
            # thread only waits, and fights any other busy process for the cores (the
            # picker on a 3,000-cell model took 129 s with two threads beside another
            # busy process, 33 s with one; benchmarks/README.md)
            with threadpool_limits(limits=1):
                tuner.fit(X[subset], target[subset])
                learner.set_params(**{prefix + "fixed_kernel": _gaussian_process(tuner).kernel_})
                learner.fit(X, target)
            version_stage = copy.copy(stage)
            version_stage.learner = learner
            stages[key] = version_stage
        version = copy.copy(surrogate)
        version.stages_ = stages
        versions.append(version)
        step(progress)
    return versions


def _version_form(surrogate, stage, rows):
    """The learner a stage's versions re-tune, and the kernel they start from (None: the
    default start): the stage's own learner from its kernel, or for a correction kept at
    the column shifts the shifts with a Gaussian process on top, from the default start."""
    if not _shift_only(stage.learner):
        return stage.learner, _gaussian_process(stage.learner).kernel_
    cells, _target, kind = rows
    form = surrogate._new_learner(
        "gp", stage.encoder, len(cells), None, mode="fresh", kind=kind, n_elements=cells["element"].nunique()
    )
    if _gaussian_process(form) is None:
        return None, None
    return form, None
