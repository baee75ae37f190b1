"""Gaussian-process learner: anisotropic Matern on descriptors, random offsets on labels."""

import numbers
from functools import partial
import warnings

import numpy as np
from scipy.optimize import minimize
from sklearn.exceptions import ConvergenceWarning
from sklearn.base import BaseEstimator, RegressorMixin, clone
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, WhiteKernel
from sklearn.model_selection import GroupKFold
from sklearn.utils import check_random_state
from sklearn.utils.validation import check_is_fitted, validate_data

from dopantgap.learners.blocks import BlockedGPR
from dopantgap.learners.conditioned import ConditionedGPR
from dopantgap.learners.kernels import OnColumns, SameLabel
from dopantgap.learners.likelihood import ContractedGradientGPR
from dopantgap.sizes import MAX_BLOCK_ROWS

__all__ = ["GPLearner"]

# Descriptor selection needs enough whole groups (elements) to hold some out; five
# group folds keep it affordable. Common practice, no source.
_MIN_GROUPS_FOR_SELECTION = 6
#: Lower bound (standardised units) of the length scales of ``smooth_columns``.
SMOOTH_LENGTH_SCALE = 3.0
_SELECTION_FOLDS = 5
#: Rows the descriptor choice scores its candidates on (a seeded random subset of a
#: larger stage). Its cost grows as these rows cubed, times candidates and folds; the
#: demo's and the real tables' stages are smaller, so their choice is unchanged.
MAX_SELECTION_ROWS = 1500
#: Fewest rows per hyperparameter the kernel is optimised on (the "ten observations per
#: parameter" rule of thumb of regression; common practice, no source). On an INVENTED
#: table of 3,050 cells over 9 hosts (about 63 hyperparameters) tuning on 400 rows left
#: the 90 % intervals covering 0.849 of the missing cells, on 800 rows 0.876
#: (benchmarks/README.md, "Issue 17, fourth steps").
ROWS_PER_HYPERPARAMETER = 10


class GPLearner(RegressorMixin, BaseEstimator):
    """Gaussian-process regressor built for tables of impurity energies.

    The covariance of two cells is

        c * Matern_ARD(descriptors) * RBF_ARD(indicators)
        + sum over label columns of c_label * [same label]
        + white noise,

    with every hyperparameter bounded and fitted by maximising the marginal
    likelihood (Rasmussen & Williams 2006, eq. 5.8) with L-BFGS-B.
    A label column holding the element's atomic number gives each element an
    offset shared by all its cells, learned from its computed ones; a label
    column holding a column code gives each host/site column its own mean.

    Parameters
    ----------
    label_columns : tuple of int, default=()
        Columns of ``X`` holding integer labels; each gets a random-offset term.
    indicator_columns : tuple of int, default=()
        Columns holding 0/1 indicators (for example of the host/site column); they
        modulate the descriptor covariance through an anisotropic RBF, so the model
        learns how much the columns share.
    ignored_columns : tuple of int, default=()
        Columns the covariance does not look at.
    nu : float, default=2.5
        Smoothness of the Matern kernel.
    max_optimise_samples : int or None, default=400
        The hyperparameters are optimised on at most this many randomly chosen rows,
        or ``ROWS_PER_HYPERPARAMETER`` (10) per hyperparameter if that is more, then
        the model is conditioned on all rows with them held fixed; this keeps a fit
        on ~1000 cells to seconds. None: every row.
    n_restarts_optimizer : int, default=0
        Extra optimiser starts from random hyperparameters.
    max_optimiser_iterations : int, default=80
        L-BFGS-B iterations per start. The likelihood surface is flat near its
        optimum; beyond ~80 iterations the predictions barely move while the fit
        time grows linearly.
    fixed_kernel : Kernel or None, default=None
        A fitted kernel to reuse without optimisation (used by refreshed models).
    initial_kernel : Kernel or None, default=None
        A fitted kernel whose hyperparameters start the optimisation (a warm start,
        within the same bounds); cross-validation folds start from the full fit's
        kernel and optimise afresh on their own rows. Ignored with ``fixed_kernel``.
    smooth_columns : tuple of int, default=()
        Descriptor columns along which the covariance may only vary slowly: their
        Matern length scales are bounded below by ``SMOOTH_LENGTH_SCALE`` standardised
        units. Host descriptors go here: a shorter length scale would only re-label
        the hosts (the indicators do that already), and was measured to let the
        optimiser overfit (segregation table of benchmarks/bench_real.py, one split with
        Cr, Fe, Os, Re held out: new-element MAE 0.35 eV unbounded, 0.09 eV bounded
        at 3, 0.08 eV without host descriptors).
    selection_group_column : int or None, default=None
        Column holding each row's group (the element). When given, the descriptors
        are chosen after the hyperparameter search: ranked by their fitted length
        scales, the nested sets "the k most relevant" are scored by cross-validation
        over whole groups, and the best set is kept if it beats keeping all by more
        than one standard error: the others are switched off at their length-scale
        bound and the rest retuned, and the retuned kernel is kept only if it still
        beats keeping all. Inside a cross-validation fold the choice is remade on the
        fold's own rows. A stage of more than ``MAX_SELECTION_ROWS`` rows scores the
        candidate sets on a seeded random subset of that many rows.
    random_state : int, Generator or None, default=None
        Seed for the subsample and the restarts.
    block_column : int or None, default=None
        Column holding a label (the host/site column code) whose rows
        ``block_groups`` gathers into groups (hosts). When given and a conditioning
        has more than ``max_block_rows`` rows, the process is conditioned in blocks of
        whole groups (:class:`~dopantgap.learners.blocks.BlockedGPR`): memory grows as
        rows times ``max_block_rows`` instead of rows squared, and cells of different
        blocks are treated as independent. None: always one exact conditioning.
    block_groups : dict or None, default=None
        Label in ``block_column`` -> group; needed with ``block_column``.
    max_block_rows : int, default=MAX_BLOCK_ROWS
        Largest conditioning done in one piece.

    Attributes
    ----------
    regressor_ : GaussianProcessRegressor or BlockedGPR
        The fitted regressor (a scikit-learn process, or one per block of hosts);
        ``regressor_.kernel_`` holds the fitted covariance.
    ard_kernel_ : Kernel
        The covariance at the optimum of the hyperparameter search, before descriptors
        were switched off; folds warm-start from it so that they choose afresh.
    kept_descriptor_columns_ : tuple of int
        Columns of ``X`` the descriptor covariance still looks at.
    selection_errors_ : ndarray of shape (n_descriptors,) or None
        Grouped cross-validated mean squared error with the k most relevant
        descriptors, k = 1 .. n_descriptors; None without selection.
    n_features_in_ : int
        Number of input columns.

    Examples
    --------
    >>> import numpy as np
    >>> X = np.linspace(0, 1, 12).reshape(-1, 1)
    >>> learner = GPLearner(random_state=0).fit(X, np.sin(6 * X[:, 0]))
    >>> mean, std = learner.predict(X[:2], return_std=True)
    >>> bool(np.all(std > 0))
    True
    """

    def __init__(
        self,
        label_columns=(),
        indicator_columns=(),
        ignored_columns=(),
        nu=2.5,
        max_optimise_samples=400,
        n_restarts_optimizer=0,
        max_optimiser_iterations=80,
        fixed_kernel=None,
        initial_kernel=None,
        selection_group_column=None,
        random_state=None,
        smooth_columns=(),
        block_column=None,
        block_groups=None,
        max_block_rows=MAX_BLOCK_ROWS,
    ):
        self.smooth_columns = smooth_columns
        self.block_column = block_column
        self.block_groups = block_groups
        self.max_block_rows = max_block_rows
        self.label_columns = label_columns
        self.indicator_columns = indicator_columns
        self.ignored_columns = ignored_columns
        self.nu = nu
        self.max_optimise_samples = max_optimise_samples
        self.n_restarts_optimizer = n_restarts_optimizer
        self.max_optimiser_iterations = max_optimiser_iterations
        self.fixed_kernel = fixed_kernel
        self.initial_kernel = initial_kernel
        self.selection_group_column = selection_group_column
        self.random_state = random_state

    def __setstate__(self, state):
        # a model folder written before smooth columns existed
        state.setdefault("smooth_columns", ())
        # ... or before blocked conditioning
        state.setdefault("block_column", None)
        state.setdefault("block_groups", None)
        state.setdefault("max_block_rows", MAX_BLOCK_ROWS)
        super().__setstate__(state)

    def _descriptor_columns(self, n_features):
        special = {
            int(column)
            for column in (*self.label_columns, *self.indicator_columns, *self.ignored_columns)
        }
        return [column for column in range(n_features) if column not in special]

    def _build_kernel(self, n_features):
        labels = [int(column) for column in self.label_columns]
        indicators = [int(column) for column in self.indicator_columns]
        special = set(labels) | set(indicators) | {int(column) for column in self.ignored_columns}
        for column in special:
            if not 0 <= column < n_features:
                raise ValueError(
                    f"Column index {column} in label_columns/indicator_columns is outside "
                    f"0..{n_features - 1}; X has {n_features} columns."
                )
        descriptors = self._descriptor_columns(n_features)
        smooth = ConstantKernel(1.0, (1e-2, 1e3))
        if descriptors:
            slow = np.isin(descriptors, [int(column) for column in getattr(self, "smooth_columns", ())])
            bounds = np.tile([0.3, 1e3], (len(descriptors), 1))
            bounds[slow, 0] = SMOOTH_LENGTH_SCALE
            start = np.where(slow, 2.0 * SMOOTH_LENGTH_SCALE, 1.0)
            # one bound pair for all (the form older model folders hold) unless some differ
            bounds = bounds if slow.any() else (0.3, 1e3)
            smooth = smooth * OnColumns(Matern(start, bounds, nu=self.nu), tuple(descriptors))
        if indicators:
            smooth = smooth * OnColumns(RBF(np.full(len(indicators), 2.0), (0.3, 1e3)), tuple(indicators))
        kernel = smooth
        for column in labels:
            kernel = kernel + ConstantKernel(0.1, (1e-4, 1e1)) * OnColumns(SameLabel(), (column,))
        return kernel + WhiteKernel(1e-2, (1e-4, 1.0))

    def fit(self, X, y):
        """Fit the hyperparameters (unless ``fixed_kernel``) and condition on (X, y).

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)

        Returns
        -------
        self : GPLearner
        """
        X, y = validate_data(self, X, y, y_numeric=True, dtype=np.float64)
        rng = check_random_state(self.random_state)
        if self.block_column is not None and self.block_groups is None:
            raise ValueError("block_column needs block_groups (label -> group).")
        if self.fixed_kernel is not None:
            self.regressor_ = self._condition(clone(self.fixed_kernel), X, y)
            self.ard_kernel_ = self.regressor_.kernel_
            self.kept_descriptor_columns_ = self._kept_columns(self.regressor_.kernel_, X.shape[1])
            self.selection_errors_ = None
            return self
        limit = self.max_optimise_samples
        if limit is not None and (not isinstance(limit, numbers.Integral) or limit < 2):
            raise ValueError(f"max_optimise_samples must be an integer >= 2 or None, got {limit!r}.")
        start = self._build_kernel(X.shape[1])
        if self.initial_kernel is not None:
            if self.initial_kernel.n_dims != start.n_dims:
                raise ValueError(
                    f"initial_kernel has {self.initial_kernel.n_dims} hyperparameters, but a "
                    f"kernel for X with {X.shape[1]} columns has {start.n_dims}."
                )
            # a warm start: the same kernel form and bounds, from the given optimum
            start = clone(start).clone_with_theta(
                np.clip(self.initial_kernel.theta, start.bounds[:, 0], start.bounds[:, 1])
            )
        rows = None
        if limit is not None:
            # a wide table has one length scale per host/site column: a fixed number of
            # rows would leave each of them fewer rows to be learned from as hosts are added
            limit = max(int(limit), ROWS_PER_HYPERPARAMETER * int(start.n_dims))
        if limit is not None and X.shape[0] > limit:
            rows = np.sort(rng.choice(X.shape[0], size=limit, replace=False))
        self.regressor_ = self._optimise(start, X, y, rows, rng)
        self.ard_kernel_ = self.regressor_.kernel_
        self.selection_errors_ = None
        if self.selection_group_column is not None:
            self._select_descriptors(X, y, rows, rng)
        self.kept_descriptor_columns_ = self._kept_columns(self.regressor_.kernel_, X.shape[1])
        return self

    def _optimise(self, start, X, y, rows, rng, pinned=()):
        """Maximise the marginal likelihood from ``start`` on ``rows`` (all when None),
        hyperparameters at positions ``pinned`` held where they are, then condition the
        regressor on every row."""
        optimiser = ContractedGradientGPR(
            kernel=start,
            optimizer=partial(
                _bounded_lbfgs, max_iterations=int(self.max_optimiser_iterations), pinned=tuple(pinned)
            ),
            normalize_y=True,
            # a random start would move the pinned hyperparameters off their bound
            n_restarts_optimizer=0 if len(pinned) else self.n_restarts_optimizer,
            random_state=rng,
        )
        if rows is None:
            fitted = _fit_quietly(optimiser, X, y)
            return self._condition(fitted.kernel_, X, y) if self._blocked(X) else fitted
        _fit_quietly(optimiser, X[rows], y[rows])
        return self._condition(optimiser.kernel_, X, y)

    def _blocked(self, X):
        """Whether a conditioning on ``X`` is done in blocks."""
        return self.block_column is not None and X.shape[0] > int(self.max_block_rows)

    def _condition(self, kernel, X, y):
        """The process with ``kernel`` held fixed, conditioned on (X, y): in one piece,
        or in blocks of whole groups past ``max_block_rows`` rows."""
        if not self._blocked(X):
            return ConditionedGPR(kernel=kernel, optimizer=None, normalize_y=True).fit(X, y)
        blocked = BlockedGPR(kernel, int(self.block_column), self.block_groups, int(self.max_block_rows))
        return blocked.fit(X, y)

    def _length_scale_slice(self, kernel, n_features):
        """Positions in ``kernel.theta`` of the descriptor length scales (log values)."""
        n_descriptors = len(self._descriptor_columns(n_features))
        position = 0
        for hyperparameter in kernel.hyperparameters:
            if hyperparameter.fixed:
                continue
            # the descriptor Matern is the first length-scale term of the product
            if hyperparameter.name.endswith("kernel__length_scale") and hyperparameter.n_elements == n_descriptors:
                return slice(position, position + n_descriptors)
            position += hyperparameter.n_elements
        return None

    def _kept_columns(self, kernel, n_features):
        descriptors = self._descriptor_columns(n_features)
        where = self._length_scale_slice(kernel, n_features)
        if where is None:
            return tuple(descriptors)
        theta, upper = kernel.theta[where], kernel.bounds[where, 1]
        return tuple(column for column, value, bound in zip(descriptors, theta, upper) if value < bound)

    def _select_descriptors(self, X, y, rows, rng):
        """Keep the most-relevant descriptors whose grouped-CV error is lowest, when that
        beats keeping them all by more than one standard error (a one-standard-error
        rule read toward the simpler default, cf. Hastie, Tibshirani & Friedman, The
        Elements of Statistical Learning, 2nd ed. 2009, section 7.10.1)."""
        kernel = self.regressor_.kernel_
        where = self._length_scale_slice(kernel, X.shape[1])
        scored_X, scored_y = X, y
        if X.shape[0] > MAX_SELECTION_ROWS:
            scored = np.sort(rng.choice(X.shape[0], size=MAX_SELECTION_ROWS, replace=False))
            scored_X, scored_y = X[scored], y[scored]
        groups = scored_X[:, int(self.selection_group_column)]
        n_groups = len(np.unique(groups))
        if where is None or where.stop - where.start < 2 or n_groups < _MIN_GROUPS_FOR_SELECTION:
            return
        theta = kernel.theta
        upper = kernel.bounds[where, 1]
        order = np.argsort(theta[where], kind="stable")  # shortest length scale first
        folds = list(GroupKFold(n_splits=min(_SELECTION_FOLDS, n_groups)).split(scored_X, scored_y, groups))
        candidates = []
        for n_kept in range(1, len(order) + 1):
            trial = theta.copy()
            switched_off = order[n_kept:]
            trial[where.start + switched_off] = upper[switched_off]
            candidates.append(kernel.clone_with_theta(trial))
        errors = np.array([
            _grouped_errors(self._condition, candidate, scored_X, scored_y, folds) for candidate in candidates
        ])
        mean = errors.mean(axis=1)
        chosen = int(np.argmin(mean))
        self.selection_errors_ = mean
        if chosen == len(candidates) - 1 or not _clearly_better(errors[chosen], errors[-1]):
            return
        # the kept hyperparameters were tuned beside the switched-off descriptors:
        # retune them (amplitude and noise above all) with those pinned at the bound,
        # and keep the result only if it still predicts held-out groups clearly better
        # (a retune can move the signal into per-element offsets that do not transfer:
        # measured in benchmarks/bench_real.py on the segregation table)
        switched_off = where.start + order[chosen + 1:]
        retuned = self._optimise(candidates[chosen], X, y, rows, rng, pinned=switched_off)
        if _clearly_better(_grouped_errors(self._condition, retuned.kernel_, scored_X, scored_y, folds), errors[-1]):
            self.regressor_ = retuned

    @property
    def kernel_(self):
        """The fitted covariance (hyperparameters at their optimum)."""
        check_is_fitted(self)
        return self.regressor_.kernel_

    def predict(self, X, return_std=False, return_cov=False):
        """Posterior mean, and optionally its standard deviation or covariance.

        The spread includes the fitted white noise: it describes what a new
        calculation of the cell would give, not only the latent function.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        return_std : bool, default=False
        return_cov : bool, default=False

        Returns
        -------
        mean : ndarray of shape (n_samples,)
        std : ndarray of shape (n_samples,), if ``return_std``
        cov : ndarray of shape (n_samples, n_samples), if ``return_cov``
        """
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, dtype=np.float64)
        if return_std and return_cov:
            raise ValueError("Ask for return_std or return_cov, not both.")
        return self.regressor_.predict(X, return_std=return_std, return_cov=return_cov)


def _grouped_errors(condition, kernel, X, y, folds):
    """Mean squared error on each held-out fold, the kernel's hyperparameters held;
    ``condition(kernel, X, y)`` gives the conditioned process."""
    errors = []
    for train, test in folds:
        model = condition(kernel, X[train], y[train])
        errors.append(np.mean((model.predict(X[test]) - y[test]) ** 2))
    return np.array(errors)


def _clearly_better(errors, reference):
    """True when the fold-paired gain over ``reference`` exceeds its standard error
    (with 16-20 elements a bare minimum chased noise: measured in
    benchmarks/bench_real.py)."""
    gain = np.asarray(reference) - np.asarray(errors)
    if len(gain) < 2:
        return False
    return bool(gain.mean() > gain.std(ddof=1) / np.sqrt(len(gain)))


def _fit_quietly(regressor, X, y):
    """Fit, silencing bound warnings: with ARD, an irrelevant input's length scale
    running to its upper bound is the intended way of switching that input off."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", category=ConvergenceWarning)
        return regressor.fit(X, y)


def _bounded_lbfgs(objective, initial_theta, bounds, max_iterations, pinned=()):
    """L-BFGS-B within the kernel's bounds, with a cap on iterations; the hyperparameters
    at positions ``pinned`` keep their initial values."""
    bounds = np.array(bounds, dtype=float)
    for position in pinned:
        bounds[position] = initial_theta[position]
    result = minimize(
        objective,
        initial_theta,
        method="L-BFGS-B",
        jac=True,
        bounds=bounds,
        options={"maxiter": max_iterations},
    )
    return result.x, result.fun
