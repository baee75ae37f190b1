"""The ``Surrogate`` estimator: fit a table, refresh on a grown one, predict any cell.

How it learns and calibrates is told in the package docstring (``dopantgap.surrogate``).
The stages live in ``stages``, the cross-validation in ``crossval`` and the predictions
through the chain of levels in ``chain``; the private methods below delegate there, so
that each stays one point a caller (or a test) can reach through the model.
"""

import copy
import numbers

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, clone
from sklearn.utils.validation import check_is_fitted

from dopantgap import elements
from dopantgap.domain import ElementDomain, HostDomain, LevelDomain
from dopantgap.errors import DopantgapError
from dopantgap.features import DEFAULT_DESCRIPTORS
from dopantgap.hosts import host_descriptor_table, host_property_columns
from dopantgap.sizes import MAX_BLOCK_ROWS
from dopantgap.reproducible import canonical_order, seed_integer
from dopantgap.surrogate import chain, crossval
from dopantgap.surrogate.crossval import _calibration, _selection_residuals
from dopantgap.surrogate.stages import fit_stages, new_learner, stage_rows
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS, check_frame

__all__ = ["LEARNERS", "Surrogate", "order_levels"]

#: Learner names accepted by ``Surrogate(learner=...)`` besides ``"auto"``.
LEARNERS = ("gp", "boost")


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


def _check_jobs(n_jobs):
    """Refuse a worker count that is not a whole number, or is 0 or below -1."""
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, numbers.Integral) or n_jobs == 0 or n_jobs < -1:
        raise DopantgapError(f"n_jobs must be a whole number of at least 1, or -1 for every core; got {n_jobs!r}.")


def _check_block_rows(max_block_rows):
    """Refuse a block size that is not a whole number of at least 100."""
    value = max_block_rows
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 100:
        raise DopantgapError(f"max_block_rows must be a whole number of at least 100, got {value!r}.")


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
    host_properties : HostProperties or None, default=None
        Numeric and category host properties (``hosts.read_host_properties``); with
        three or more hosts they join the host descriptors the models see.
    site_kinds : dict or None, default=None
        (host, site) -> site kind shared across hosts (``hosts.read_site_properties``'s
        ``kinds``): how a new host's sites are matched to the table's columns.
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
    n_jobs : int, default=2
        Worker processes for the independent fits: each candidate learner's
        cross-validation folds (``workers.worker_pool``); 1 fits everything in this
        process, -1 uses every core. Inside
        ``cluster.on_cluster`` the work goes to the Dask cluster instead. The model
        is the same whatever the value.
    max_block_rows : int, default=sizes.MAX_BLOCK_ROWS
        Largest stage a Gaussian process is conditioned on in one piece; a larger
        stage is conditioned in blocks of whole hosts, each host's cells predicted
        by its own block (``learners.blocks.BlockedGPR``). Memory grows as the square
        of this number; a larger value lets more hosts share what they teach.
    first_look : bool, default=True
        With ``learner="auto"`` and at least ``crossval.FIRST_LOOK_MIN_CELLS`` (2,000)
        computed cells of 15 elements or more: cross-validate both learners on a
        sample of whole elements first and leave out one whose error there is more
        than ``crossval.FIRST_LOOK_MARGIN`` (1.5) times the other's (successive
        halving, ``crossval.first_look``); False always runs both in full, as
        ``validate`` does.

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
    first_look_ : DataFrame or None
        The first look's record (``crossval.first_look``): per candidate the sample's
        cells and elements, its out-of-fold MAE there and whether it was kept; None
        when there was no first look. A learner left out has no residuals, metrics or
        selection residuals.
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
    host_values_ : DataFrame
        Host descriptors of every host the model knows (``hosts.host_descriptor_table``).
    host_domain_ : HostDomain
        Distance of any host from the table's hosts (``domain.HostDomain``).

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
        host_properties=None,
        site_kinds=None,
        n_jobs=2,
        max_block_rows=MAX_BLOCK_ROWS,
        first_look=True,
    ):
        self.first_look = first_look
        self.n_jobs = n_jobs
        self.max_block_rows = max_block_rows
        self.learner = learner
        self.levels = levels
        self.correction = correction
        self.descriptors = descriptors
        self.host_compositions = host_compositions
        self.host_properties = host_properties
        self.site_kinds = site_kinds
        self.n_folds = n_folds
        self.random_state = random_state
        self.suspect_values = suspect_values

    def __setstate__(self, state):
        # a model folder written before hosts had properties and site kinds lacks them
        state.setdefault("host_properties", None)
        state.setdefault("site_kinds", None)
        state.setdefault("n_jobs", 2)
        state.setdefault("max_block_rows", MAX_BLOCK_ROWS)
        state.setdefault("first_look", True)
        state.setdefault("first_look_", None)
        super().__setstate__(state)

    # ------------------------------------------------------------------ fitting
    def fit(self, table, progress=None):
        """Fit every stage, cross-validate, choose the learner and calibrate.

        Parameters
        ----------
        table : DataFrame
            Long table with columns element, host, site, method, quantity, value
            (as returned by ``table.read_table``); other columns are kept, unused.
        progress : object or None, default=None
            Anything with ``update(n=1)`` (``dopantgap.progress.bar``), told after each
            fit (the full fits and every cross-validation fold); if it has
            ``expect(total)``, it is first told how many there will be.

        Returns
        -------
        self : Surrogate
        """
        # the arguments first: a bad seed or option is refused before any work
        seed = seed_integer(self.random_state)
        descriptors = _checked_descriptors(self.descriptors)
        _check_folds(self.n_folds)
        _check_jobs(self.n_jobs)
        _check_block_rows(self.max_block_rows)
        if not isinstance(self.first_look, (bool, np.bool_)):
            raise DopantgapError(f"first_look must be True or False, got {self.first_look!r}.")
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
        self._describe_hosts()
        self.quantity_levels_ = {
            quantity: [m for m in self.levels_ if m in set(rows["method"])]
            for quantity, rows in table.groupby("quantity", sort=False)
        }
        core = table[list(REQUIRED_COLUMNS)].reset_index(drop=True)
        candidates = LEARNERS if self.learner == "auto" else (self.learner,)
        look = (len(candidates) > 1 and self.first_look and len(core) >= crossval.FIRST_LOOK_MIN_CELLS
                and core["element"].nunique() >= crossval.FIRST_LOOK_MIN_ELEMENTS)
        # every candidate's fits handed to the workers together (crossval.fit_candidates)
        expect = getattr(progress, "expect", None)
        if callable(expect):
            planned = sum(crossval.planned_fits(self, core, name) for name in candidates)
            expect(planned + (crossval.first_look_fits(self, core, candidates) if look else 0))
        self.first_look_ = None
        if look:
            candidates, self.first_look_ = crossval.first_look(self, core, candidates, progress)
            if callable(expect):
                expect(crossval.first_look_fits(self, core, LEARNERS)
                       + sum(crossval.planned_fits(self, core, name) for name in candidates))
        outcomes = self._fit_candidates(core, candidates, progress)
        fitted = {name: outcomes[name][0] for name in candidates}
        residuals = {name: outcomes[name][1] for name in candidates}
        shift_only = {name: outcomes[name][2] for name in candidates}
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
        fresh.site_kinds_ = dict(getattr(self, "site_kinds_", {}))
        fresh._describe_hosts(fitted_on=self.table_)
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
        fresh.first_look_ = getattr(self, "first_look_", None)
        fresh.cv_residuals_by_learner_ = getattr(self, "cv_residuals_by_learner_", {})
        fresh.domain_ = ElementDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(list(table["element"]))
        fresh.level_domain_ = LevelDomain(descriptors=self.descriptors_, descriptor_values=self.descriptor_values_).fit(core)
        return fresh

    def _describe_hosts(self, fitted_on=None):
        """Host descriptors and site kinds of the known hosts, and the host domain
        (fitted on the hosts of ``fitted_on``, default the training table)."""
        self.site_kinds_ = {**getattr(self, "site_kinds_", {}), **dict(self.site_kinds or {})}
        self.host_values_ = host_descriptor_table(
            self.compositions_, self.host_properties, descriptor_values=self.descriptor_values_
        )
        hosts = list(dict.fromkeys((self.table_ if fitted_on is None else fitted_on)["host"]))
        self.host_domain_ = HostDomain().fit(self.host_values_.loc[hosts])

    def with_new_hosts(self, compositions, host_properties=None, site_kinds=None):
        """This model, able to predict hosts with no computed cell.

        Parameters
        ----------
        compositions : dict
            New host label -> composition (``hosts.host_compositions``).
        host_properties : HostProperties or None, default=None
            Their host-file properties (needed when the model was fitted with some).
        site_kinds : dict or None, default=None
            (host, site) -> site kind, for the new hosts' sites.

        Returns
        -------
        Surrogate
            A copy; the stages, calibration and table are shared, only the hosts the
            encoders can place grow. This model is left as it was.

        Raises
        ------
        DopantgapError
            When the model's table has fewer than three hosts (a new host's interval is
            calibrated by leaving hosts out), or a new host's properties are missing.
        """
        check_is_fitted(self)
        if not self.new_host_ready():
            raise DopantgapError(
                f"the model's table has {self.table_['host'].nunique()} host(s); predicting a host "
                "with no rows needs at least 3 (its interval is calibrated by leaving hosts out "
                "in turn). Compute a few cells of the new host and refit instead"
            )
        fresh = copy.copy(self)
        fresh.compositions_ = {**self.compositions_, **compositions}
        if host_properties is not None:
            fresh.host_properties = host_properties
        fresh.site_kinds_ = {**getattr(self, "site_kinds_", {}), **dict(site_kinds or {})}
        fresh.host_values_ = host_descriptor_table(
            fresh.compositions_, fresh.host_properties, descriptor_values=self.descriptor_values_
        )
        fresh.stages_ = {}
        for key, stage in self.stages_.items():
            stage = copy.copy(stage)
            stage.encoder = stage.encoder.with_hosts(fresh.compositions_, fresh.host_values_, fresh.site_kinds_)
            if getattr(stage, "pairs", None) is not None:
                encoder, learner = stage.pairs
                stage.pairs = (encoder.with_hosts(fresh.compositions_, fresh.site_kinds_), learner)
            if getattr(stage, "pairs_properties", None) is not None:
                encoder, learner = stage.pairs_properties
                properties = fresh.host_values_[host_property_columns(fresh.host_values_)]
                stage.pairs_properties = (
                    encoder.with_hosts(fresh.compositions_, fresh.site_kinds_, properties), learner
                )
            fresh.stages_[key] = stage
        return fresh

    def new_host_ready(self):
        """Whether the model can predict a host with no rows: its calibration has the
        ``new-host`` scenario's own residuals (three or more hosts in the table)."""
        check_is_fitted(self)
        residuals = getattr(self, "cv_residuals_", None)
        return residuals is not None and bool((residuals["scenario"] == "new-host").any())

    def _seed(self):
        """The integer every draw derives from: ``seed_``, or ``random_state`` checked for a
        model saved before ``seed_`` existed (or not fitted yet)."""
        seed = getattr(self, "seed_", None)
        return seed_integer(self.random_state) if seed is None else seed


    def _fit_candidates(self, core, candidates, progress=None):
        """Per learner: fitted stages, cross-validated residuals and the corrections that
        keep the column shifts alone (``crossval.fit_candidates``)."""
        return crossval.fit_candidates(self, core, candidates, progress)

    def _stage_rows(self, core, quantity, position):
        """Training cells and target of a stage, and whether it is a correction
        (``stages.stage_rows``)."""
        return stage_rows(self, core, quantity, position)

    def _new_learner(self, name, encoder, n_rows, template, mode="fresh", kind="direct", n_elements=None,
                     shift_only=False):
        """A learner for a stage of ``n_rows`` rows (``stages.new_learner``)."""
        return new_learner(
            self, name, encoder, n_rows, template, mode=mode, kind=kind, n_elements=n_elements,
            shift_only=shift_only,
        )

    def _fit_stages(self, core, name, template, mode="fresh", shift_only=frozenset()):
        """Fit one stage per quantity and level (``stages.fit_stages``)."""
        return fit_stages(self, core, name, template, mode=mode, shift_only=shift_only)

    # ------------------------------------------------------------ predicting
    def _known(self, core):
        """Computed value of every cell key of ``core`` (``chain.known_values``)."""
        return chain.known_values(core)

    def _joint(self, stages, known, quantity, method, cells):
        """Mean and covariance (uncalibrated) of ``cells`` of one quantity and method
        (``chain.joint``); cells computed at this level have zero variance."""
        return chain.joint(self, stages, known, quantity, method, cells)

    def _scenarios(self, core, cells):
        """Scenario of each cell given the cells computed in ``core`` (``chain.scenarios``)."""
        return chain.scenarios(self, core, cells)

    def _predict_raw(self, stages, core, cells):
        """Mean and raw std of cells (``chain.predict_raw``)."""
        return chain.predict_raw(self, stages, core, cells)

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
            host has ten or more, in standardised descriptors; 0 for computed
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
        scale, half = self._calibrated_factors(core, cells, scenarios, level, raw_std=raw_std)
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

    def _calibrated_factors(self, core, cells, scenarios, level=0.9, raw_std=None):
        """Per-cell factors on the raw std: the calibrated std's and the interval's
        half-width's (``chain.calibrated_factors``)."""
        return chain.calibrated_factors(self, core, cells, scenarios, level, raw_std=raw_std)

    def std_factors(self, cells, raw_std=None):
        """Per-cell factor turning the model's own spread into the calibrated std.

        The factor is the scenario and quantity's calibration times the cell's difficulty
        (``calibration.DifficultyModel``): what ``predict`` and ``predict_joint`` apply, so
        that a consumer forming its own covariances (the picker) states the same std.

        Parameters
        ----------
        cells : DataFrame
            Columns element, host, site, method, quantity.
        raw_std : array-like or None, default=None
            The model's own std of each cell (a difficulty feature), when the caller
            has it; predicted otherwise.

        Returns
        -------
        ndarray of shape (n_cells,)
        """
        cells = self._check_cells(cells)
        core = self.table_[list(REQUIRED_COLUMNS)]
        scale, _ = self._calibrated_factors(core, cells, self._scenarios(core, cells), raw_std=raw_std)
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
        raw_std = np.sqrt(np.clip(np.diag(cov), 0.0, None))
        scale, _ = self._calibrated_factors(core, cells, scenarios, raw_std=raw_std)
        return mean, cov * np.outer(scale, scale)

    # ------------------------------------------------------- cross-validation
    def _fold_masks(self, core):
        """Boolean test masks over ``core`` rows, one per fold (``crossval.fold_masks``)."""
        return crossval.fold_masks(self, core)

    def _metrics(self, name, residuals):
        """Per scenario and quantity metrics of one learner (``crossval.metrics``)."""
        return crossval.metrics(name, residuals)
