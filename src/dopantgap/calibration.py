"""Turn cross-validated residuals into intervals that hold, scenario by scenario.

A missing cell of an element with many computed cells, an element never computed and
an expensive-level cell whose cheap level is known are different questions with
different errors. For each scenario the standardised out-of-fold residuals
z = (truth - mean) / std are kept; an interval at level L is mean +/- q_L * std, with
q_L the split-conformal quantile of |z| (Vovk, Gammerman & Shafer 2005; Lei et al.
2018, "Distribution-free predictive inference for regression", JASA, eq. 4 with
normalised scores): the ceil((n + 1) L)-th smallest |z|. Where n is too small for L,
the Gaussian quantile scaled by the 90 % conformal quantile is used instead.

Cells within a scenario differ too: an element far from those computed at a cell's
level, or with few computed cells of its own, is harder than the model's spread says;
and a model fitted on few cells can be surest exactly where it is wrong, so the model's
own spread enters as a feature as well (its sensitivity learned from the residuals).
:class:`DifficultyModel` learns, per scenario, how the size of the standardised
residuals grows with such features, and the scores are divided by it before their
quantile is taken (locally weighted conformal prediction: Lei et al. 2018, section 5.2;
Papadopoulos, Vovk & Gammerman 2008, normalised nonconformity), so an unfamiliar cell
gets a wider interval before it is computed, not after.
"""

import math

import numpy as np
from scipy.optimize import lsq_linear
from scipy.stats import binomtest, norm

__all__ = [
    "DIFFICULTY_FEATURES",
    "DifficultyModel",
    "SCENARIOS",
    "ScenarioCalibration",
    "cross_conformal_covered",
    "cross_conformal_widths",
    "fit_calibration",
    "undercovered_scenarios",
]

#: The scenarios a missing cell can be in, in the order they are reported.
SCENARIOS = ("new-cell", "new-element", "upgrade", "sparse-host", "new-host")

# Fewer residuals than this and a key borrows the pooled residuals of a wider group
# (common practice, no source: 20 points give a 90 % quantile to ~ +/-15 %).
_MIN_RESIDUALS = 20
_REFERENCE_LEVEL = 0.9

#: Per-cell features a difficulty model may use: the cell's domain distance over the
#: domain threshold (``domain.LevelDomain``), the element's computed cells of the
#: cell's quantity, the model's own (raw) std of the cell, and the element's overshoot
#: beyond the range of the elements computed at the cell's level along its most extreme
#: descriptor (``domain.LevelDomain.range_excess``).
DIFFICULTY_FEATURES = ("domain_ratio", "element_cells", "raw_std", "range_excess")
# The model's own std enters as log(std); below this (eV) it is taken as this (a
# computed cell has none; common practice, no source).
_STD_FLOOR = 1e-6
# A difficulty model needs this many residuals of its scenario (common practice, no
# source: two slopes and an intercept want tens of points), and its scale stays within
# these bounds, so that a few odd residuals cannot make an interval explode (the upper
# bound: common practice, no source). The lower bound keeps the model from narrowing a
# cell much below the scenario's typical width: its slopes are learned from the few
# elements the folds miss worst, and where those are unlike the rest the slopes narrow
# the others too far. Chosen on invented tables (benchmarks/README.md, "Issue 17, sixth
# steps"): hybrid upgrades of the 10,000-cell scale table covered 0.821 / 0.834 / 0.892 /
# 0.949 with a floor of 0.33 / 0.5 / 0.7 / 1, of the 3,000-cell one 0.873 / 0.938 / 0.975
# / 0.981, of a rough one-host table (tests/integration/test_validate.py) 0.854 / 0.846
# / 0.854 / 0.815: 0.7 is the floor that leaves none of them below 0.85.
_MIN_DIFFICULTY_RESIDUALS = 40
_SCALE_BOUNDS = (0.7, 4.0)
# Direction of each feature's effect on the residuals' scale (ratio up, cells down, the
# model's own std down, overshoot up)
_SIGNS = np.array([1.0, -1.0, -1.0, 1.0])
# Beyond the domain limit (ratio > 1) a cell's scale is at least its ratio, up to this
# cap (common practice, no source: an extrapolation's error grows with the distance
# travelled beyond the data, and the table holds no residual that could say by how much).
_EXTRAPOLATION_CAP = 10.0
# |z| of exactly 0 (a cell predicted to the last digit) would give log(0); the floor's
# value: common practice, no source
_LOG_FLOOR = 0.02


class DifficultyModel:
    """How much larger than the model's own spread a cell's error tends to be.

    The model is log|z| = a + b * domain_ratio - c * log(1 + element_cells)
    - d * log(raw_std) + e * range_excess with b, c, e >= 0 and 0 <= d <= 1, fitted by
    bounded least squares on centred features, b, c and d first, then e on what they
    leave (the expected log|z| of a Gaussian residual is log sigma plus a constant, so
    the slopes describe how the residuals' scale changes; the constant is left to the
    conformal quantile). The signs are fixed by what is physically sensible:
    a cell farther from the elements computed at its level is never judged easier, an
    element with more computed cells never harder. ``d`` is the score's sensitivity to
    the model's own spread (the role of the constant beta in the normalised score
    |r| / (sigma + beta): Papadopoulos, Vovk & Gammerman 2011, "Regression conformal
    prediction with nearest neighbours", JAIR 40, eq. 13): d = 0 trusts the model's std
    as it is, d = 1 gives no cell of the scenario much less than the typical cell's
    width. A Gaussian process fitted on a dozen cells can put a std of 0.01 eV on a cell
    it misses by 0.2 eV; where the out-of-fold residuals show such cells, d > 0 widens
    them. ``e`` reads the element's overshoot beyond the range of the elements computed
    at the level along its most extreme descriptor, which the distance (an average over
    descriptors) dilutes: a 4d metal when only 3d metals were computed at the level
    differs from them most in its period, which none of them varies. It is fitted after
    the others so that where overshoot and distance grow together the distance keeps its
    slope (fitted jointly, the overshoot took the distance's slope and narrowed the
    cells far from the computed elements inside their range: an invented rough table's
    missing upgrade cells went from 85 % to 83 % covered). ``scale(features)`` is
    exp(b * (ratio - mean ratio) - c * (log cells - mean log cells) - d * (log std -
    mean log std) + e * (overshoot - mean overshoot)), clipped to [0.7, 4] after the
    ratio and the overshoot are capped at twice the largest seen in fitting: the model
    widens the cells it finds harder than the typical one and narrows the others at
    most to 0.7x (the conformal quantile then sets the common width); and for a cell
    beyond the domain limit (ratio > 1) at least the ratio itself (at most 10). That
    last floor is what no fitted slope can give: residuals come from cells the table
    could hide, and an element unlike every element computed at a level leaves no such
    residual behind.

    Parameters
    ----------
    features : DataFrame
        Columns ``DIFFICULTY_FEATURES`` (missing ones count as 0).
    scores : array-like
        Standardised residuals z of the same rows.

    Attributes
    ----------
    slopes_ : ndarray of shape (4,)
        b, c, d and e; zeros when there were fewer than 40 residuals (model folders
        written before the overshoot have three, before the model's own std two).
    centre_ : ndarray of shape (4,)
        Mean domain ratio, mean log(1 + element_cells), mean log(raw_std) and mean
        overshoot of the fitting rows.
    ratio_cap_ : float
    excess_cap_ : float
    """

    def __init__(self, features, scores):
        design = self._design(features)
        if len(design) and np.isnan(design[:, 2]).all():
            design[:, 2] = 0.0  # no std given: a constant column, which gets no slope
        scores = np.abs(np.asarray(scores, dtype=float))
        finite = np.isfinite(design).all(axis=1) if len(design) else np.zeros(0, dtype=bool)
        self.ratio_cap_ = 2.0 * float(design[finite, 0].max()) if finite.any() else 0.0
        self.excess_cap_ = 2.0 * float(design[finite, 3].max()) if finite.any() else 0.0
        self.centre_ = design[finite].mean(axis=0) if finite.any() else np.zeros(len(_SIGNS))
        self.slopes_ = np.zeros(len(_SIGNS))
        if finite.sum() >= _MIN_DIFFICULTY_RESIDUALS:
            # a level with no computed element at all (infinite ratio) says nothing of slopes
            target = np.log(scores[finite] + _LOG_FLOOR)
            centred = design[finite] - self.centre_
            # bounded slopes on (ratio, -log cells, -log std, overshoot), least squares on the
            # centred system
            signed = centred * _SIGNS
            upper = np.array([np.inf, np.inf, 1.0, np.inf])
            # a feature constant over the fitting rows (no std given) carries no slope
            constant = np.ptp(centred, axis=0) <= 1e-12
            upper[constant] = 0.0
            centred_target = target - target.mean()
            first = lsq_linear(
                signed[:, :3], centred_target, bounds=(np.zeros(3), np.maximum(upper[:3], 1e-300))
            ).x
            slopes = np.append(first, 0.0)
            if not constant[3]:
                # the overshoot explains only what the other three leave: where it and the
                # distance both grow, the distance keeps the slope it would have alone
                leftover = centred_target - signed[:, :3] @ first
                slopes[3] = max(0.0, float(signed[:, 3] @ leftover) / float(signed[:, 3] @ signed[:, 3]))
            # the solver's last digits are not a slope: what it leaves near 0 is 0
            self.slopes_ = np.where(constant | (slopes < 1e-10), 0.0, slopes)

    @staticmethod
    def _design(features):
        n_rows = len(features)

        def column(name):
            return np.asarray(features[name], dtype=float) if name in features else None

        ratio, cells, spread = column("domain_ratio"), column("element_cells"), column("raw_std")
        excess = column("range_excess")
        ratio = np.zeros(n_rows) if ratio is None else ratio
        cells = np.zeros(n_rows) if cells is None else cells
        excess = np.zeros(n_rows) if excess is None else excess
        log_spread = np.full(n_rows, np.nan) if spread is None else np.log(np.maximum(spread, _STD_FLOOR))
        return np.column_stack([ratio, np.log1p(np.maximum(cells, 0.0)), log_spread, excess])

    def scale(self, features):
        """Factor by which each row's residuals are expected to exceed the usual ones.

        Parameters
        ----------
        features : DataFrame
            Columns ``DIFFICULTY_FEATURES``.

        Returns
        -------
        ndarray
            Factors within [0.7, 4] (up to 10 beyond the domain limit); 1
            within the domain when nothing was learned.
        """
        design = self._design(features)
        ratio = np.nan_to_num(design[:, 0], nan=0.0, posinf=_EXTRAPOLATION_CAP)
        # the floor binds beyond the domain limit only; inside it the learned scale rules
        beyond = np.where(ratio > 1.0, np.minimum(ratio, _EXTRAPOLATION_CAP), 0.0)
        if not np.any(self.slopes_):
            return np.maximum(beyond, 1.0)
        design[:, 0] = np.minimum(ratio, self.ratio_cap_)
        # an overshoot larger than any in fitting is taken at twice the largest seen
        design[:, 3] = np.minimum(np.nan_to_num(design[:, 3], nan=0.0), getattr(self, "excess_cap_", 0.0))
        # models fitted before the std feature have two slopes, before the overshoot three
        n_slopes = len(self.slopes_)
        if n_slopes > 2:
            # a cell whose own std is unknown is taken as typical of the fitting rows
            design[:, 2] = np.where(np.isfinite(design[:, 2]), design[:, 2], self.centre_[2])
        exponent = (design[:, :n_slopes] - self.centre_) @ (self.slopes_ * _SIGNS[:n_slopes])
        return np.maximum(np.clip(np.exp(exponent), *_SCALE_BOUNDS), beyond)


def fit_calibration(residuals, score_column="z", adaptive=True):
    """A :class:`ScenarioCalibration` from out-of-fold residuals.

    Parameters
    ----------
    residuals : DataFrame
        Columns ``scenario``, ``quantity``, ``score_column`` and, for adaptive widths,
        ``DIFFICULTY_FEATURES``.
    score_column : str, default="z"
    adaptive : bool, default=True
        Learn a :class:`DifficultyModel` per scenario and calibrate the scores divided
        by it; False (or no feature column) gives the same width to every cell of a
        scenario and quantity.

    Returns
    -------
    ScenarioCalibration
    """
    scores = residuals[score_column].to_numpy(dtype=float)
    difficulty = {}
    # the model's own std is optional (a baseline has none); distance and cells are not
    has_features = all(name in residuals.columns for name in DIFFICULTY_FEATURES[:2])
    if adaptive and has_features and len(residuals):
        scenario_of = residuals["scenario"].to_numpy()
        scaled = scores.copy()
        for scenario in SCENARIOS:
            rows = scenario_of == scenario
            if not rows.any():
                continue
            model = DifficultyModel(residuals.loc[rows], scores[rows])
            difficulty[scenario] = model
            scaled[rows] = scores[rows] / model.scale(residuals.loc[rows])
        scores = scaled
    groups = {}
    for key, index in residuals.groupby(["scenario", "quantity"]).indices.items():
        groups[key] = scores[index]
    return ScenarioCalibration(groups, difficulty=difficulty)


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
        (scenario, quantity) -> array of standardised residuals (truth - mean) / std,
        already divided by the cell's difficulty where ``difficulty`` is given.
    difficulty : dict or None, default=None
        Scenario -> :class:`DifficultyModel` (``fit_calibration`` builds both).

    Attributes
    ----------
    scores_ : dict
        Key -> sorted |z|, for keys (scenario, quantity), (scenario, None) and
        (None, None), the last two pooled.
    borrowed_ : set
        Scenarios with too few residuals of their own, using all residuals pooled.
    """

    def __init__(self, scores, difficulty=None):
        self.difficulty_ = dict(difficulty or {})

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

    def difficulty(self, scenario, features):
        """Per-cell factor on the raw std of cells of one scenario (1 without a model).

        Parameters
        ----------
        scenario : str
        features : DataFrame
            Columns ``DIFFICULTY_FEATURES``.

        Returns
        -------
        ndarray
        """
        # model folders written before adaptive widths have no difficulty models
        model = getattr(self, "difficulty_", {}).get(scenario)
        if model is None:
            return np.ones(len(features))
        return model.scale(features)

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


def cross_conformal_covered(residuals, score_column="z", level=0.9, adaptive=True):
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
    adaptive : bool, default=True
        Judge with per-cell widths (``fit_calibration``): the difficulty models, too,
        are learned from the other folds only.

    Returns
    -------
    ndarray of bool
    """
    if len(residuals) == 0:
        return np.zeros(0, dtype=bool)
    scores = np.abs(residuals[score_column].to_numpy(dtype=float))
    half_width, _scale = cross_conformal_widths(residuals, score_column, level, adaptive)
    return scores <= half_width


def cross_conformal_widths(residuals, score_column="z", level=0.9, adaptive=True):
    """Per row, the factors the other folds' calibration puts on the row's own spread.

    Parameters
    ----------
    residuals : DataFrame
        As in :func:`cross_conformal_covered`.
    score_column : str, default="z"
    level : float, default=0.9
    adaptive : bool, default=True

    Returns
    -------
    half_width : ndarray
        Interval half-width over the row's raw std (its scenario and quantity's conformal
        quantile times its difficulty), from a calibration without the row's fold.
    std_scale : ndarray
        The calibrated std over the raw std, likewise.
    """
    half_width = np.full(len(residuals), np.nan)
    std_scale = np.full(len(residuals), np.nan)
    folds = residuals["fold"].to_numpy()
    scenarios = residuals["scenario"].to_numpy()
    quantities = residuals["quantity"].to_numpy()
    for fold in np.unique(folds):
        inside = folds == fold
        calibration = fit_calibration(residuals[~inside], score_column, adaptive=adaptive)
        own = residuals[inside]
        difficulty = np.ones(len(own))
        for scenario in np.unique(scenarios[inside]):
            rows = scenarios[inside] == scenario
            difficulty[rows] = calibration.difficulty(scenario, own[rows])
        found = {}
        for offset, position in enumerate(np.flatnonzero(inside)):
            key = (scenarios[position], quantities[position])
            if key not in found:
                found[key] = (calibration.half_width(key[0], level, key[1]), calibration.std_scale(key[0], key[1]))
            half_width[position] = found[key][0] * difficulty[offset]
            std_scale[position] = found[key][1] * difficulty[offset]
    return half_width, std_scale


#: Chance of flagging well-calibrated intervals as too narrow (one-sided; common
#: practice, no source). Cells of one element are not independent, so the test reads
#: more cells than it has and flags sooner than the level says: hence a strict one.
UNDERCOVERAGE_SIGNIFICANCE = 0.01


def undercovered_scenarios(cv_metrics, level=_REFERENCE_LEVEL, significance=UNDERCOVERAGE_SIGNIFICANCE):
    """Scenarios whose calibrated intervals held fewer hidden values than they state, beyond chance.

    Parameters
    ----------
    cv_metrics : DataFrame
        ``Surrogate.cv_metrics_``: per learner, scenario and quantity, ``n`` cells and
        ``coverage_calibrated`` (cross-conformal, out of fold).
    level : float, default=0.9
        The intervals' stated coverage.
    significance : float, default=UNDERCOVERAGE_SIGNIFICANCE
        A scenario is returned when an exact one-sided binomial test (``scipy.stats.binomtest``)
        finds so few cells inside less likely than this under the stated level.

    Returns
    -------
    list of dict
        ``scenario``, ``n``, ``coverage`` and ``p_value`` of the kept learner's pooled rows
        (quantity "all"), in the order of ``SCENARIOS``.
    """
    pooled = cv_metrics[(cv_metrics["quantity"] == "all") & cv_metrics["chosen"].astype(bool)]
    found = []
    for scenario in SCENARIOS:
        rows = pooled[pooled["scenario"] == scenario]
        if len(rows) == 0:
            continue
        n = int(rows["n"].iat[0])
        coverage = float(rows["coverage_calibrated"].iat[0])
        if n == 0 or math.isnan(coverage):
            continue
        p_value = binomtest(int(round(coverage * n)), n, level, alternative="less").pvalue
        if p_value < significance:
            found.append({"scenario": scenario, "n": n, "coverage": coverage, "p_value": float(p_value)})
    return found
