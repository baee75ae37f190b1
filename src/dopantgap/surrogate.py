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
"""

import numbers

import numpy as np
import pandas as pd
from joblib import delayed
from sklearn.base import BaseEstimator, clone
from sklearn.utils.validation import check_is_fitted

from dopantgap import elements
from dopantgap.calibration import SCENARIOS, cross_conformal_covered, fit_calibration
from dopantgap.domain import ElementDomain, LevelDomain
from dopantgap.errors import DopantgapError
from dopantgap.features import DEFAULT_DESCRIPTORS, CellEncoder
from dopantgap.learners import BoostLearner, ColumnMeanLearner, GPLearner, ShiftPriorLearner
from dopantgap.reproducible import canonical_order, learner_seed, seed_integer
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS, check_frame
from dopantgap.workers import worker_pool

__all__ = ["LEARNERS", "Surrogate", "order_levels"]

#: Learner names accepted by ``Surrogate(learner=...)`` besides ``"auto"``.
LEARNERS = ("gp", "boost")

# Below this many training rows a stage falls back on column means (common practice,
# no source: a Gaussian process with ~15 length scales needs several rows per scale).
_MIN_ROWS_FOR_LEARNER = 8
# Below this many cells computed at both levels a level is learned directly
# instead of as a correction (common practice, no source): one is enough, since a
# correction with few cells stays at the column's shift (``learners.ShiftPriorLearner``),
# which is never worse than a level learned on its own from those same few cells.
_MIN_ROWS_FOR_CORRECTION = 1
# A correction learns what the column shifts leave only from this many elements
# (common practice, no source: with two, any pattern across elements is a guess).
_MIN_ELEMENTS_FOR_RESIDUAL = 3
# L-BFGS-B iterations for a full fit, and for a cross-validation fold, whose search
# starts from the full fit's optimum (common practice, no source: a warm start near
# the optimum converges in a fraction of the iterations; measured once on the invented
# demo table, no benchmark script: 30 left the out-of-fold errors within 1 % of 80).
_OPTIMISER_ITERATIONS = 80
_FOLD_OPTIMISER_ITERATIONS = 30
# A refreshed model (recorded rounds, replay) re-optimises a stage's hyperparameters once
# it has this many times the rows they were optimised on (common practice, no source:
# hyperparameters fitted on a handful of elements go stale as the stage grows; measured
# in benchmarks/bench_replay.py on the invented demo world: a replay that never
# re-optimised learned the expensive level half as fast).
_REOPTIMISE_GROWTH = 1.25
# Folds of the upgrade loop: at most this many, over the elements computed at both
# levels (leave-one-element-out when there are fewer; common practice, no source).
_UPGRADE_FOLDS = 12
# Cells predicted together (their joint covariance is formed in memory: 1500^2 doubles
# are 18 MB; common practice, no source).
_CHUNK_CELLS = 1500

_CELL = ["element", "host", "site"]


def order_levels(table, levels=None):
    """The table's methods ordered from cheapest to most expensive.

    Parameters
    ----------
    table : DataFrame
        Long table with a ``method`` column.
    levels : sequence of str or None, default=None
        Methods from cheapest to most expensive. None: by number of computed cells,
        most first (the cheap level is the one computed most often); ties by name.

    Returns
    -------
    list of str
    """
    counts = table["method"].value_counts()
    present = sorted(counts.index, key=lambda method: (-counts[method], method))
    if levels is None:
        return present
    levels = [str(level).strip() for level in levels if str(level).strip()]
    unknown = [level for level in levels if level not in counts.index]
    if unknown:
        raise DopantgapError(
            f"--levels names {', '.join(unknown)}, but the table's methods are "
            f"{', '.join(present)}; spell them as in the table's 'method' column."
        )
    missing = [method for method in present if method not in levels]
    if missing:
        raise DopantgapError(
            f"--levels leaves out {', '.join(missing)}; list every method of the table from "
            f"cheapest to most expensive, e.g. --levels {','.join(present)}."
        )
    if len(set(levels)) != len(levels):
        raise DopantgapError(f"--levels lists a method twice: {','.join(levels)}.")
    return levels


def _checked_descriptors(descriptors):
    """The descriptors a surrogate uses, refused in one line when none or unknown."""
    if descriptors is None:
        return tuple(DEFAULT_DESCRIPTORS)
    if isinstance(descriptors, str):
        descriptors = [descriptors]
    try:
        names = tuple(descriptors)
    except TypeError:
        raise DopantgapError(
            f"descriptors must be a list of descriptor names or None, got {descriptors!r}."
        ) from None
    if not names:
        # with no descriptor every element would sit at distance 0 from every other
        raise DopantgapError(
            "descriptors is empty: give at least one descriptor name, or None for the default set "
            f"({', '.join(DEFAULT_DESCRIPTORS)})."
        )
    unknown = [str(name) for name in names if name not in elements.DESCRIPTOR_NAMES]
    if unknown:
        raise DopantgapError(
            f"Unknown descriptor(s) {', '.join(unknown)}; "
            f"available: {', '.join(elements.DESCRIPTOR_NAMES)}."
        )
    if len(set(names)) != len(names):
        raise DopantgapError(f"descriptors names a descriptor twice: {', '.join(names)}.")
    return names


def _check_folds(n_folds):
    """Refuse a fold count that is not a whole number of at least 2."""
    if isinstance(n_folds, bool) or not isinstance(n_folds, numbers.Integral) or n_folds < 2:
        raise DopantgapError(f"n_folds must be a whole number of at least 2, got {n_folds!r}.")


def _host_compositions(table, host_map):
    """Host compositions, with an unreadable host label located in the user's file."""
    compositions = {}
    for host, rows in table.groupby("host", sort=False):
        try:
            compositions.update(elements.host_compositions([host], host_map))
        except DopantgapError as error:
            where = ""
            if "_file" in rows.columns and "_line" in rows.columns:
                where = f"{rows['_file'].iat[0]}:{rows['_line'].iat[0]}: "
            raise DopantgapError(f"{where}{error}; on the command line: --hosts HOST_FILE") from error
    return compositions


def _calibration(residuals):
    """Per-scenario, per-quantity calibration from out-of-fold residuals, with per-cell
    difficulty (``calibration.fit_calibration``)."""
    return fit_calibration(residuals, "z")


def _selection_residuals(residuals_by_learner):
    """Out-of-fold residuals of the learner choice itself: each fold's cells predicted by
    the learner with the lowest mean absolute error on the *other* folds, so that the
    choice never sees the cells it is judged on (nested model selection; Varma & Simon
    2006, "Bias in error estimation when using cross-validation for model selection",
    BMC Bioinformatics 7, 91)."""
    names = list(residuals_by_learner)
    folds = sorted(set().union(*(set(frame["fold"]) for frame in residuals_by_learner.values())))
    parts = []
    for fold in folds:
        errors = {}
        for name in names:
            frame = residuals_by_learner[name]
            others = frame.loc[frame["fold"] != fold, "error"]
            errors[name] = float(np.mean(np.abs(others))) if len(others) else np.inf
        chosen = min(names, key=lambda name: (errors[name], names.index(name)))
        frame = residuals_by_learner[chosen]
        parts.append(frame[frame["fold"] == fold].assign(learner=chosen))
    return pd.concat(parts, ignore_index=True)


def _difficulty_features(level_domain, core, cells):
    """What makes a cell harder than usual, known before it is computed: its element's
    distance from the elements computed at its level (and host), also over the domain
    threshold, and the element's computed cells of its quantity in ``core``."""
    cells = cells.reset_index(drop=True)
    distance = level_domain.distance(cells) if len(cells) else np.zeros(0)
    threshold = level_domain.elements_.threshold_
    if np.isfinite(threshold) and threshold > 0:
        ratio = distance / threshold
    else:
        ratio = np.zeros(len(cells))
    counts = core.groupby(["element", "quantity"]).size().to_dict()
    element_cells = np.array(
        [counts.get((element, quantity), 0) for element, quantity in zip(cells["element"], cells["quantity"])],
        dtype=float,
    )
    return pd.DataFrame({"domain_distance": distance, "domain_ratio": ratio, "element_cells": element_cells})


class _Stage:
    """A fitted model of one quantity at one level: its encoder, learner and kind."""

    def __init__(self, quantity, method, kind, encoder, learner, tuned_rows=None):
        self.quantity = quantity
        self.method = method
        self.kind = kind  # "direct" or "correction"
        self.encoder = encoder
        self.learner = learner
        # training rows when the learner's hyperparameters were last optimised
        self.tuned_rows = tuned_rows


def _gaussian_process(learner):
    """The Gaussian process of a learner: itself, or the one a correction's shift prior
    wraps (fitted or not); None for any other learner."""
    if isinstance(learner, ShiftPriorLearner):
        learner = getattr(learner, "residual_learner_", None) or learner.residual_learner
    return learner if isinstance(learner, GPLearner) else None


def _tuned_rows(stage):
    """Rows a stage's hyperparameters were optimised on (its rows, for older model folders)."""
    tuned = getattr(stage, "tuned_rows", None)
    if tuned is not None:
        return tuned
    process = _gaussian_process(stage.learner)
    regressor = getattr(process, "regressor_", None)
    return len(regressor.X_train_) if regressor is not None else 0


class Surrogate(BaseEstimator):
    """Learn a table of impurity energies and predict any cell with calibrated spread.

    Parameters
    ----------
    learner : {"auto", "gp", "boost"}, default="auto"
        "auto" fits both and keeps the one with the lower cross-validated mean
        absolute error (whole elements held out together, and the other scenarios).
    levels : sequence of str or None, default=None
        Methods from cheapest to most expensive (see ``order_levels``).
    correction : bool, default=True
        Learn each expensive level as a correction to the one below; False learns
        every level on its own (kept for comparison).
    descriptors : sequence of str or None, default=None
        Elemental descriptors the models see; None: ``features.DEFAULT_DESCRIPTORS``.
    host_compositions : dict or None, default=None
        Host label -> formula composition, for labels that are not formulas.
    n_folds : int, default=5
        Cross-validation folds for calibration and the learner choice.
    random_state : None, int, RandomState or Generator, default=0
        Seed for everything random; the same table and seed give the same model,
        whatever the order of the table's rows. Anything scikit-learn's
        ``check_random_state`` takes, and a NumPy ``Generator``; ``fit`` turns it into
        the integer ``seed_`` (``reproducible.seed_integer``).
    suspect_values : {"refuse", "warn"}, default="refuse"
        Values that a meV or kJ/mol slip or a flipped sign would explain
        (``table.suspect_values``): ``fit`` refuses the table, or keeps them with a
        ``SuspectValueWarning`` each. The table passes ``table.check_frame`` first,
        the reader's checks, whether it was read from a file or built in memory.

    Attributes
    ----------
    table_ : DataFrame
        The training table, its rows unchanged, in ``reproducible.canonical_order``.
    seed_ : int
        The seed every random draw of the fit was derived from.
    levels_ : list of str
    learner_ : str
        The learner kept.
    stages_ : dict
        (quantity, method) -> fitted stage.
    calibration_ : ScenarioCalibration
    cv_residuals_ : DataFrame
        Out-of-fold predictions of the kept learner: the cell, truth, mean, raw std,
        standardised residual and scenario.
    cv_residuals_by_learner_ : dict
        Learner name -> its out-of-fold predictions (as ``cv_residuals_``); every
        residual carries its ``fold`` (main folds first, then the upgrade loop's).
    selection_residuals_ : DataFrame or None
        With ``learner="auto"``: each fold's cells as predicted by the learner that the
        other folds would have chosen (column ``learner`` names it), so the error of
        choosing is judged out of fold too; None with one candidate.
    cv_metrics_ : DataFrame
        Per learner, scenario and quantity: n, mae, rmse, the out-of-fold coverage of
        the raw 90 % Gaussian interval (``coverage_raw``), and of the calibrated one
        (``coverage_calibrated``, cross-conformal: each fold's cells judged by the
        widths the other folds' residuals give, ``calibration.cross_conformal_covered``).
    domain_ : ElementDomain
        Distance of any element from the table's elements (``domain.ElementDomain``).
    descriptor_values_ : DataFrame
        Every element's descriptors (``elements.descriptor_table()``) as they were when
        the model was fitted; encoders, domains and explanations read them from here.

    Examples
    --------
    >>> from dopantgap.demo import demo_table
    >>> model = Surrogate(learner="gp").fit(demo_table())   # doctest: +SKIP
    """

    def __init__(
        self,
        learner="auto",
        levels=None,
        correction=True,
        descriptors=None,
        host_compositions=None,
        n_folds=5,
        random_state=0,
        suspect_values="refuse",
    ):
        self.learner = learner
        self.levels = levels
        self.correction = correction
        self.descriptors = descriptors
        self.host_compositions = host_compositions
        self.n_folds = n_folds
        self.random_state = random_state
        self.suspect_values = suspect_values

    # ------------------------------------------------------------------ fitting
    def fit(self, table, progress=None):
        """Fit every stage, cross-validate, choose the learner and calibrate.

        Parameters
        ----------
        table : DataFrame
            Long table with columns element, host, site, method, quantity, value
            (as returned by ``table.read_table``); other columns are kept, unused.
        progress : object or None, default=None
            Anything with ``update(n=1)`` (``dopantgap.progress.bar``), told when each
            candidate learner has been fitted and cross-validated.

        Returns
        -------
        self : Surrogate
        """
        # the arguments first: a bad seed or option is refused before any work
        seed = seed_integer(self.random_state)
        descriptors = _checked_descriptors(self.descriptors)
        _check_folds(self.n_folds)
        # the reader's checks, for a table built in memory as for one read from a file
        table = check_frame(table, suspect_values=self.suspect_values)
        missing = [column for column in REQUIRED_COLUMNS if column not in table.columns]
        if missing:
            raise DopantgapError(
                f"The table lacks the column(s) {', '.join(missing)}; "
                f"read it with dopantgap.read_table or rename its columns."
            )
        if self.learner not in ("auto",) + LEARNERS:
            raise DopantgapError(
                f"Unknown learner {self.learner!r}; choose one of auto, {', '.join(LEARNERS)}."
            )
        if len(table) == 0:
            raise DopantgapError("The table has no rows to learn from.")
        # one row order whatever order the rows came in: the folds and every draw
        # depend on the cells, not on where they stood in the file
        table = canonical_order(table)
        self.seed_ = seed
        self.table_ = table
        self.levels_ = order_levels(table, self.levels)
        self.descriptors_ = descriptors
        # every element's numbers as this installation gives them, kept with the model
        # (and its folder) so that it predicts with them whatever mendeleev comes later
        self.descriptor_values_ = elements.descriptor_table()
        self.compositions_ = _host_compositions(table, self.host_compositions)
        self.quantity_levels_ = {
            quantity: [m for m in self.levels_ if m in set(rows["method"])]
            for quantity, rows in table.groupby("quantity", sort=False)
        }
        core = table[list(REQUIRED_COLUMNS)].reset_index(drop=True)
        candidates = LEARNERS if self.learner == "auto" else (self.learner,)
        # the candidates are independent: on two cores they fit side by side, each
        # worker held to one BLAS/OpenMP thread so that they do not fight for cores
        outcomes = []
        for outcome in worker_pool(n_jobs=min(len(candidates), 2), return_as="generator")(
            delayed(self._fit_candidate)(core, name) for name in candidates
        ):
            outcomes.append(outcome)
            if progress is not None:
                progress.update(1)
        fitted = {name: stages for name, (stages, _, _) in zip(candidates, outcomes)}
        residuals = {name: found for name, (_, found, _) in zip(candidates, outcomes)}
        shift_only = {name: chosen for name, (_, _, chosen) in zip(candidates, outcomes)}
        mae = {name: float(np.mean(np.abs(residuals[name]["error"]))) for name in candidates}
        # a tie keeps the earlier candidate: the Gaussian process, whose spread is principled
        self.learner_ = min(candidates, key=lambda name: (mae[name], candidates.index(name)))
        self.stages_ = fitted[self.learner_]
        self.shift_only_ = shift_only[self.learner_]
        self.cv_residuals_ = residuals[self.learner_]
        self.cv_residuals_by_learner_ = residuals
        self.selection_residuals_ = _selection_residuals(residuals) if len(candidates) > 1 else None
        self.calibration_ = _calibration(self.cv_residuals_)
        self.domain_ = ElementDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(list(table["element"]))
        self.level_domain_ = LevelDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(core)
        self.cv_metrics_ = pd.concat(
            [self._metrics(name, residuals[name]) for name in candidates], ignore_index=True
        )
        self.cv_metrics_["chosen"] = self.cv_metrics_["learner"] == self.learner_
        return self

    def refreshed(self, table):
        """This model relearned on ``table`` without choosing or calibrating anew.

        The learner kept, the Gaussian processes' hyperparameters and the interval
        calibration are carried over; every stage is conditioned on the new table's
        cells. A stage that has grown past ``_REOPTIMISE_GROWTH`` (1.25) times the rows
        its hyperparameters were optimised on gets them optimised anew. Seconds instead of a full ``fit``: meant for recorded rounds and
        replays, where a table grows by a few cells at a time. Refit in full when the
        table has changed much (the calibration describes the old one).

        Parameters
        ----------
        table : DataFrame
            Long table with the same quantities and methods (new elements, hosts
            with known compositions and sites may appear).

        Returns
        -------
        Surrogate
            A new fitted model; this one is left as it was.
        """
        check_is_fitted(self)
        missing = [column for column in REQUIRED_COLUMNS if column not in table.columns]
        if missing:
            raise DopantgapError(f"The table lacks the column(s) {', '.join(missing)}.")
        unknown = sorted(set(table["method"]) - set(self.levels_))
        if unknown:
            raise DopantgapError(
                f"The table has method(s) {', '.join(unknown)} that the model never saw; "
                f"fit a new model instead."
            )
        fresh = clone(self)
        table = canonical_order(table)
        fresh.seed_ = self._seed()
        fresh.table_ = table
        fresh.levels_ = [level for level in self.levels_ if level in set(table["method"])]
        fresh.descriptors_ = self.descriptors_
        fresh.descriptor_values_ = self.descriptor_values_
        fresh.compositions_ = dict(self.compositions_)
        new_hosts = table.loc[~table["host"].isin(list(self.compositions_)), :]
        if len(new_hosts):
            fresh.compositions_.update(_host_compositions(new_hosts, self.host_compositions))
        fresh.quantity_levels_ = {
            quantity: [m for m in fresh.levels_ if m in set(rows["method"])]
            for quantity, rows in table.groupby("quantity", sort=False)
        }
        core = table[list(REQUIRED_COLUMNS)].reset_index(drop=True)
        fresh.learner_ = self.learner_
        fresh.shift_only_ = getattr(self, "shift_only_", frozenset())
        fresh.stages_ = fresh._fit_stages(
            core, self.learner_, template=self.stages_, mode="grown", shift_only=fresh.shift_only_
        )
        fresh.calibration_ = self.calibration_
        fresh.cv_residuals_ = self.cv_residuals_
        fresh.cv_metrics_ = self.cv_metrics_
        fresh.cv_residuals_by_learner_ = getattr(self, "cv_residuals_by_learner_", {})
        fresh.domain_ = ElementDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(list(table["element"]))
        fresh.level_domain_ = LevelDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(core)
        return fresh

    def _seed(self):
        """The integer every draw derives from: ``seed_``, or ``random_state`` checked for a
        model saved before ``seed_`` existed (or not fitted yet)."""
        seed = getattr(self, "seed_", None)
        return seed_integer(self.random_state) if seed is None else seed

    def _fit_candidate(self, core, name):
        """Fitted stages of one learner, their cross-validated residuals, and the
        corrections that keep the column shifts alone (the upgrade loop decides)."""
        upgrade, shift_only = self._cross_validate_upgrade(core, name)
        stages = self._fit_stages(core, name, template=None, shift_only=shift_only)
        residuals = self._cross_validate(core, name, stages, shift_only)
        if len(upgrade):
            residuals = pd.concat([residuals, upgrade], ignore_index=True)
        return stages, residuals, shift_only

    def _stage_rows(self, core, quantity, position):
        """Training cells and target of a stage, and whether it is a correction."""
        methods = self.quantity_levels_[quantity]
        rows = core[(core["quantity"] == quantity) & (core["method"] == methods[position])]
        if position == 0 or not self.correction:
            return rows[_CELL].reset_index(drop=True), rows["value"].to_numpy(), "direct"
        below = core[(core["quantity"] == quantity) & (core["method"] == methods[position - 1])]
        joined = rows.merge(below[_CELL + ["value"]], on=_CELL, suffixes=("", "_below"))
        if len(joined) < _MIN_ROWS_FOR_CORRECTION:
            return rows[_CELL].reset_index(drop=True), rows["value"].to_numpy(), "direct"
        target = (joined["value"] - joined["value_below"]).to_numpy()
        return joined[_CELL].reset_index(drop=True), target, "correction"

    def _new_learner(self, name, encoder, n_rows, template, mode="fresh", kind="direct", n_elements=None,
                     shift_only=False):
        """A learner for a stage of ``n_rows`` rows.

        ``mode`` says where the stage is fitted: "fresh" (the full fit: hyperparameters
        optimised from the default start), "fold" (a cross-validation fold: optimised
        afresh on the fold's rows, warm-started from the full fit's ``template`` and
        with fewer iterations), or "grown" (a refreshed model: the template's kernel
        kept until the stage has outgrown it). A correction (``kind``) is the column
        shifts' hierarchical prior (``ShiftPriorLearner``) plus the learner for what
        they leave, or the prior alone with fewer than ``_MIN_ELEMENTS_FOR_RESIDUAL``
        elements or where ``shift_only`` (the upgrade loop found the learner no help).
        """
        if kind == "correction":
            column_label = encoder.label_columns_[1]
            few = n_rows < _MIN_ROWS_FOR_LEARNER or (n_elements or 0) < _MIN_ELEMENTS_FOR_RESIDUAL
            if few or shift_only:
                return ShiftPriorLearner(label_column=column_label)
            inner = self._new_learner(name, encoder, n_rows, template, mode=mode)
            return ShiftPriorLearner(label_column=column_label, residual_learner=inner)
        if n_rows < _MIN_ROWS_FOR_LEARNER:
            return ColumnMeanLearner(label_column=encoder.label_columns_[1])
        if name == "gp":
            fixed = initial = None
            iterations = _OPTIMISER_ITERATIONS
            kernel = None
            process = None if template is None else _gaussian_process(template.learner)
            if process is not None and hasattr(process, "regressor_"):
                kernel = process.kernel_
            if mode == "grown" and kernel is not None and n_rows <= _REOPTIMISE_GROWTH * _tuned_rows(template):
                fixed = kernel
            elif mode == "fold" and kernel is not None:
                # every fold tunes its own kernel and chooses its own descriptors on its
                # own rows, so the hidden elements never shape the covariance that
                # predicts them; the warm start (from before the full fit's descriptor
                # choice) only makes the search short
                initial = getattr(process, "ard_kernel_", kernel)
                iterations = _FOLD_OPTIMISER_ITERATIONS
            element_label, column_label = encoder.label_columns_
            # the column indicators already give each column its own behaviour; a
            # random offset per column on top of them was measured to hurt
            # corrections learned from few elements
            return GPLearner(
                label_columns=(element_label,),
                indicator_columns=encoder.indicator_columns_,
                ignored_columns=(column_label,),
                fixed_kernel=fixed,
                initial_kernel=initial,
                selection_group_column=element_label,
                max_optimiser_iterations=iterations,
                random_state=learner_seed(self._seed()),
            )
        return BoostLearner(label_columns=(encoder.label_columns_[0],), random_state=learner_seed(self._seed()))

    def _fit_stages(self, core, name, template, mode="fresh", shift_only=frozenset()):
        """Fit one stage per quantity and level; ``template`` (fitted stages) warm-starts
        the hyperparameters of each fold (``mode="fold"``) or keeps them in a refreshed
        model (``mode="grown"``, until a stage outgrows them); corrections named in
        ``shift_only`` are the column shifts alone: see ``_new_learner``."""
        stages = {}
        for quantity, methods in self.quantity_levels_.items():
            for position, method in enumerate(methods):
                cells, target, kind = self._stage_rows(core, quantity, position)
                if len(cells) == 0:
                    continue
                model_template = None if template is None else template.get((quantity, method))
                encoder = CellEncoder(self.descriptors_, self.compositions_, self.descriptor_values_)
                columns = None if model_template is None else model_template.encoder.columns_
                if columns is not None and not set(zip(cells["host"], cells["site"])) <= set(columns):
                    # a column the template never saw: its input layout cannot be kept
                    columns, model_template = None, None
                encoder.fit(cells, columns=columns)
                learner = self._new_learner(
                    name, encoder, len(cells), model_template, mode=mode, kind=kind,
                    n_elements=cells["element"].nunique(), shift_only=(quantity, method) in shift_only,
                )
                learner.fit(encoder.transform(cells), target)
                process = _gaussian_process(learner)
                reused = process is not None and process.fixed_kernel is not None
                tuned = _tuned_rows(model_template) if reused else len(cells)
                stages[(quantity, method)] = _Stage(quantity, method, kind, encoder, learner, tuned)
        return stages

    # ------------------------------------------------------------ predicting
    def _known(self, core):
        return {
            tuple(key): value
            for key, value in zip(core[list(KEY_COLUMNS)].itertuples(index=False), core["value"])
        }

    def _joint(self, stages, known, quantity, method, cells):
        """Mean and covariance (uncalibrated) of ``cells`` of one quantity and method.

        Cells computed at this level return their value with zero variance.
        """
        methods = self.quantity_levels_[quantity]
        position = methods.index(method)
        stage = stages.get((quantity, method))
        n_cells = len(cells)
        if stage is None:
            # a level with no training cell of its own: only reachable through a bad call
            raise DopantgapError(f"No model for quantity {quantity!r} at method {method!r}.")
        mean, cov = stage.learner.predict(stage.encoder.transform(cells), return_cov=True)
        mean = np.array(mean, dtype=float)
        cov = np.array(cov, dtype=float).reshape(n_cells, n_cells)
        if stage.kind == "correction":
            below_mean, below_cov = self._joint(stages, known, quantity, methods[position - 1], cells)
            mean, cov = mean + below_mean, cov + below_cov
        computed = np.array(
            [
                known.get((element, host, site, method, quantity), np.nan)
                for element, host, site in zip(cells["element"], cells["host"], cells["site"])
            ]
        )
        is_computed = ~np.isnan(computed)
        mean[is_computed] = computed[is_computed]
        cov[is_computed, :] = 0.0
        cov[:, is_computed] = 0.0
        return mean, cov

    def _scenarios(self, core, cells):
        """Scenario of each cell given the cells computed in ``core``."""
        with_quantity = set(zip(core["element"], core["quantity"]))
        computed = set(core[list(KEY_COLUMNS)].itertuples(index=False, name=None))
        scenarios = []
        for element, host, site, method, quantity in cells[list(KEY_COLUMNS)].itertuples(
            index=False, name=None
        ):
            methods = self.quantity_levels_.get(quantity, [])
            position = methods.index(method) if method in methods else 0
            if (element, quantity) not in with_quantity:
                scenarios.append("new-element")
            elif position > 0 and (element, host, site, methods[position - 1], quantity) in computed:
                scenarios.append("upgrade")
            else:
                scenarios.append("new-cell")
        return np.array(scenarios, dtype=object)

    def _predict_raw(self, stages, core, cells):
        """Mean and raw std of cells, predicted by quantity and method in chunks of whole
        elements (the joint covariance of a chunk is formed in memory)."""
        known = self._known(core)
        mean = np.full(len(cells), np.nan)
        std = np.full(len(cells), np.nan)
        cells = cells.reset_index(drop=True)
        for (quantity, method), group in cells.groupby(["quantity", "method"], sort=False):
            element_order = list(dict.fromkeys(group["element"]))
            chunk, size = [], 0
            per_element = {e: rows.index for e, rows in group.groupby("element", sort=False)}
            chunks = []
            for element in element_order:
                chunk.append(element)
                size += len(per_element[element])
                if size >= _CHUNK_CELLS:
                    chunks.append(chunk)
                    chunk, size = [], 0
            if chunk:
                chunks.append(chunk)
            for chunk in chunks:
                index = np.concatenate([per_element[element] for element in chunk])
                part = cells.loc[index]
                chunk_mean, chunk_cov = self._joint(stages, known, quantity, method, part)
                mean[index] = chunk_mean
                std[index] = np.sqrt(np.clip(np.diag(chunk_cov), 0.0, None))
        return mean, std

    def _check_cells(self, cells):
        check_is_fitted(self)
        missing = [column for column in KEY_COLUMNS if column not in cells.columns]
        if missing:
            raise DopantgapError(f"The cells to predict lack the column(s) {', '.join(missing)}.")
        cells = cells[list(KEY_COLUMNS)].reset_index(drop=True).copy()
        for quantity, method in set(zip(cells["quantity"], cells["method"])):
            if (quantity, method) not in self.stages_:
                raise DopantgapError(
                    f"The model has no data for quantity {quantity!r} at method {method!r}; "
                    f"it can predict only the quantity/method pairs of its table."
                )
        return cells

    def predict(self, cells, level=0.9):
        """Predict cells with calibrated spread and a central interval.

        Parameters
        ----------
        cells : DataFrame
            Columns element, host, site, method, quantity (other columns ignored).
            Elements need not be in the table; hosts must have a known composition.
        level : float, default=0.9
            Probability content of the central interval ``lo``..``hi``.

        Returns
        -------
        DataFrame
            The cell columns plus ``value``, ``std``, ``lo``, ``hi``, ``status``
            (``computed``: the table's own value, passed through unchanged, with
            std 0 and lo = hi = value; ``predicted`` otherwise), ``scenario``
            (empty for computed cells), ``domain_distance`` (distance of the element
            from the elements computed at the cell's level, in its host where that
            host has three or more, in standardised descriptors; 0 for computed
            cells) and ``outside_domain`` (``domain.LevelDomain`` rule). ``std`` and
            the interval scale the model's own spread by the scenario's calibration
            and the cell's difficulty (``calibration.DifficultyModel``).
        """
        cells = self._check_cells(cells)
        core = self.table_[list(REQUIRED_COLUMNS)]
        mean, raw_std = self._predict_raw(self.stages_, core, cells)
        known = self._known(core)
        keys = list(cells[list(KEY_COLUMNS)].itertuples(index=False, name=None))
        is_computed = np.array([key in known for key in keys], dtype=bool)
        scenarios = self._scenarios(core, cells)
        scenarios[is_computed] = ""
        scale, half = self._calibrated_factors(core, cells, scenarios, level)
        std = raw_std * scale
        half = raw_std * half
        std[is_computed] = 0.0
        half[is_computed] = 0.0
        # computed cells: the user's own number, bit for bit
        values = mean.copy()
        values[is_computed] = [known[key] for key, flag in zip(keys, is_computed) if flag]
        result = cells.copy()
        result["value"] = values
        result["std"] = std
        result["lo"] = values - half
        result["hi"] = values + half
        result["status"] = np.where(is_computed, "computed", "predicted")
        result["scenario"] = scenarios
        level_domain = self.level_domain()
        distance = level_domain.distance(cells) if len(cells) else np.zeros(0)
        outside = level_domain.outside(cells) if len(cells) else np.zeros(0, dtype=bool)
        result["domain_distance"] = np.where(is_computed, 0.0, distance)
        result["outside_domain"] = np.where(is_computed, False, outside).astype(bool)
        return result

    def _calibrated_factors(self, core, cells, scenarios, level=0.9):
        """Per-cell factors on the raw std: the calibrated std's and the interval's
        half-width's (scenario and quantity quantile times the cell's difficulty); 1 and
        the Gaussian quantile for cells of no scenario (computed ones)."""
        # difficulty features only where a difficulty model will read them (older model
        # folders, and hand-built surrogates in tests, have none)
        has_difficulty = bool(getattr(self.calibration_, "difficulty_", {}))
        features = _difficulty_features(self.level_domain(), core, cells) if has_difficulty else None
        scale = np.ones(len(cells))
        half = np.full(len(cells), 1.6448536269514722)
        quantities = cells["quantity"].to_numpy()
        for scenario in SCENARIOS:
            in_scenario = scenarios == scenario
            if not in_scenario.any():
                continue
            difficulty = (
                self.calibration_.difficulty(scenario, features[in_scenario])
                if features is not None else np.ones(int(in_scenario.sum()))
            )
            scale[in_scenario] = difficulty
            half[in_scenario] = difficulty
            for quantity in set(quantities[in_scenario]):
                rows = in_scenario & (quantities == quantity)
                scale[rows] *= self.calibration_.std_scale(scenario, quantity)
                half[rows] *= self.calibration_.half_width(scenario, level, quantity)
        return scale, half

    def std_factors(self, cells):
        """Per-cell factor turning the model's own spread into the calibrated std.

        The factor is the scenario and quantity's calibration times the cell's difficulty
        (``calibration.DifficultyModel``): what ``predict`` and ``predict_joint`` apply, so
        that a consumer forming its own covariances (the picker) states the same std.

        Parameters
        ----------
        cells : DataFrame
            Columns element, host, site, method, quantity.

        Returns
        -------
        ndarray of shape (n_cells,)
        """
        cells = self._check_cells(cells)
        core = self.table_[list(REQUIRED_COLUMNS)]
        scale, _ = self._calibrated_factors(core, cells, self._scenarios(core, cells))
        return scale

    def level_domain(self):
        """The model's domain per level and host (``domain.LevelDomain``), fitted on the
        table (rebuilt for a model saved without one)."""
        check_is_fitted(self)
        domain = getattr(self, "level_domain_", None)
        if domain is None:
            domain = LevelDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(self.table_[list(REQUIRED_COLUMNS)])
            self.level_domain_ = domain
        return domain

    def element_domain(self):
        """The model's domain of applicability over elements (``domain.ElementDomain``),
        fitted on the table's elements (rebuilt for a model saved without one)."""
        check_is_fitted(self)
        domain = getattr(self, "domain_", None)
        if domain is None:
            domain = ElementDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(list(self.table_["element"]))
            self.domain_ = domain
        return domain

    def predict_joint(self, cells):
        """Calibrated mean and covariance of cells of one quantity and method.

        Parameters
        ----------
        cells : DataFrame
            Cells sharing one quantity and one method (for example the sites of one
            element in one host).

        Returns
        -------
        mean : ndarray of shape (n_cells,)
        cov : ndarray of shape (n_cells, n_cells)
            Zero rows and columns for computed cells.
        """
        cells = self._check_cells(cells)
        if cells[["quantity", "method"]].drop_duplicates().shape[0] != 1:
            raise DopantgapError("predict_joint takes cells of one quantity and one method.")
        core = self.table_[list(REQUIRED_COLUMNS)]
        known = self._known(core)
        quantity, method = cells["quantity"].iloc[0], cells["method"].iloc[0]
        mean, cov = self._joint(self.stages_, known, quantity, method, cells)
        scenarios = self._scenarios(core, cells)
        scale, _ = self._calibrated_factors(core, cells, scenarios)
        return mean, cov * np.outer(scale, scale)

    # ------------------------------------------------------- cross-validation
    def _fold_masks(self, core):
        """Boolean test masks over ``core`` rows, one per fold (see module docstring)."""
        rng = np.random.default_rng(self._seed())
        table_elements = np.array(sorted(core["element"].unique()))
        rng.shuffle(table_elements)
        n_folds = int(min(max(self.n_folds, 2), len(table_elements)))
        groups = np.array_split(table_elements, n_folds)
        element = core["element"].to_numpy()
        lowest = np.array(
            [
                self.quantity_levels_[quantity].index(method) == 0
                for quantity, method in zip(core["quantity"], core["method"])
            ]
        )
        computed = set(core[list(KEY_COLUMNS)].itertuples(index=False, name=None))
        has_cheap = np.array(
            [
                position > 0
                and (e, h, s, self.quantity_levels_[q][position - 1], q) in computed
                for e, h, s, q, position in zip(
                    core["element"], core["host"], core["site"], core["quantity"],
                    [self.quantity_levels_[q].index(m) for q, m in zip(core["quantity"], core["method"])],
                )
            ],
            dtype=bool,
        )
        masks = []
        for fold in range(n_folds):
            hidden_elements = np.isin(element, groups[fold])
            test = hidden_elements.copy()
            # single cells: cheap-level cells only, or expensive ones whose cheap level is
            # missing too; an expensive cell with its cheap level computed is an upgrade,
            # cross-validated by its own loop
            candidates = ~test & (lowest | ~has_cheap)
            test |= candidates & (rng.random(len(core)) < 1.0 / n_folds)
            # every element keeps at least one training cell per quantity unless hidden whole
            training = core[~test]
            kept = set(zip(training["element"], training["quantity"]))
            for position in np.flatnonzero(test & ~hidden_elements):
                key = (element[position], core["quantity"].iat[position])
                if key not in kept:
                    test[position] = False
                    kept.add(key)
            masks.append(test)
        return masks

    def _cross_validate(self, core, name, template, shift_only=frozenset()):
        """Out-of-fold predictions of every hidden cell, with its scenario."""
        records = []
        for fold, test in enumerate(self._fold_masks(core)):
            if not test.any():
                continue
            training, held_out = core[~test], core[test].reset_index(drop=True)
            stages = self._fit_stages(training, name, template=template, mode="fold", shift_only=shift_only)
            servable = np.array(
                [(q, m) in stages for q, m in zip(held_out["quantity"], held_out["method"])]
            )
            held_out = held_out[servable].reset_index(drop=True)
            if len(held_out) == 0:
                continue
            mean, std = self._predict_raw(stages, training, held_out)
            part = held_out.copy()
            part["mean"] = mean
            part["raw_std"] = std
            part["scenario"] = self._scenarios(training, held_out)
            part["fold"] = fold
            level_domain = LevelDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(training)
            part = pd.concat([part, _difficulty_features(level_domain, training, held_out)], axis=1)
            records.append(part)
        if not records:
            raise DopantgapError(
                "Cross-validation found nothing to hold out: the table needs at least two elements."
            )
        residuals = pd.concat(records, ignore_index=True)
        residuals["error"] = residuals["value"] - residuals["mean"]
        residuals["z"] = residuals["error"] / np.maximum(residuals["raw_std"], 1e-9)
        return residuals

    def _cross_validate_upgrade(self, core, name):
        """Out-of-fold upgrade predictions, and the corrections best left to the shifts.

        Each correction stage is relearned without some of the elements computed at
        both levels, which are then predicted from their computed cheap level (the only
        part of the chain an upgrade needs), twice: as the column shifts' prior plus the
        learner, and as the prior alone. A stage whose learner does not lower the
        out-of-fold mean absolute error keeps the prior alone (its name is returned),
        so an upgrade is never worse than the shift rule on the table's own evidence.

        Returns
        -------
        residuals : DataFrame
            The kept form's out-of-fold predictions (empty when no stage has three
            elements at both levels).
        shift_only : frozenset
            (quantity, method) of the corrections that keep the prior alone.
        """
        records, shift_only = [], set()
        rng = np.random.default_rng(self._seed() + 1)
        # fold numbers continue after the main loop's, so that every fold id is unique
        fold = int(min(max(self.n_folds, 2), core["element"].nunique()))
        for quantity, methods in self.quantity_levels_.items():
            for position in range(1, len(methods)):
                cells, target, kind = self._stage_rows(core, quantity, position)
                if kind != "correction":
                    continue
                both = np.array(sorted(cells["element"].unique()))
                if len(both) < 3:
                    continue
                rng.shuffle(both)
                below = core[(core["quantity"] == quantity) & (core["method"] == methods[position - 1])]
                forms = {"learner": [], "shift": []}
                for group in np.array_split(both, min(_UPGRADE_FOLDS, len(both))):
                    test = cells["element"].isin(group).to_numpy()
                    encoder = CellEncoder(self.descriptors_, self.compositions_, self.descriptor_values_)
                    encoder.fit(cells[~test])
                    training_x, hidden_x = encoder.transform(cells[~test]), encoder.transform(cells[test])
                    part = cells[test].reset_index(drop=True)
                    cheap = part.merge(below[_CELL + ["value"]], on=_CELL, how="left")["value"].to_numpy()
                    part["method"] = methods[position]
                    part["quantity"] = quantity
                    part["value"] = target[test] + cheap
                    part["scenario"] = "upgrade"
                    part["fold"] = fold
                    fold += 1
                    # what the fold knew: the table less the hidden elements' cells at this level
                    hidden = (
                        (core["quantity"] == quantity)
                        & (core["method"] == methods[position])
                        & core["element"].isin(group)
                    )
                    known = core[~hidden]
                    level_domain = LevelDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(known)
                    part = pd.concat([part, _difficulty_features(level_domain, known, part)], axis=1)
                    n_elements = cells.loc[~test, "element"].nunique()
                    for form in forms:
                        learner = self._new_learner(
                            name, encoder, int((~test).sum()), template=None, kind="correction",
                            n_elements=n_elements, shift_only=form == "shift",
                        )
                        learner.fit(training_x, target[~test])
                        correction, std = learner.predict(hidden_x, return_std=True)
                        forms[form].append(
                            part.assign(
                                mean=np.asarray(correction, dtype=float) + cheap,
                                raw_std=np.asarray(std, dtype=float),
                            )
                        )
                found = {form: pd.concat(parts, ignore_index=True) for form, parts in forms.items()}
                error = {form: float(np.mean(np.abs(rows["value"] - rows["mean"]))) for form, rows in found.items()}
                kept = "learner" if error["learner"] < error["shift"] else "shift"
                if kept == "shift":
                    shift_only.add((quantity, methods[position]))
                records.append(found[kept])
        if not records:
            return pd.DataFrame(), frozenset(shift_only)
        residuals = pd.concat(records, ignore_index=True)[
            list(REQUIRED_COLUMNS)
            + ["mean", "raw_std", "scenario", "fold", "domain_distance", "domain_ratio", "element_cells"]
        ]
        residuals["error"] = residuals["value"] - residuals["mean"]
        residuals["z"] = residuals["error"] / np.maximum(residuals["raw_std"], 1e-9)
        return residuals, frozenset(shift_only)

    def _metrics(self, name, residuals):
        rows = []
        residuals = residuals.assign(covered=cross_conformal_covered(residuals, "z", 0.9))
        for scenario in SCENARIOS:
            part = residuals[residuals["scenario"] == scenario]
            for quantity, sub in [("all", part)] + list(part.groupby("quantity")):
                if len(sub) == 0:
                    continue
                rows.append(
                    {
                        "learner": name,
                        "scenario": scenario,
                        "quantity": quantity,
                        "n": len(sub),
                        "mae": float(np.mean(np.abs(sub["error"]))),
                        "rmse": float(np.sqrt(np.mean(sub["error"] ** 2))),
                        "coverage_raw": float(np.mean(np.abs(sub["z"]) <= 1.6448536269514722)),
                        "coverage_calibrated": float(np.mean(sub["covered"])),
                    }
                )
        return pd.DataFrame(rows)
