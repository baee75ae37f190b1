"""Simple reference predictors that the real learners are measured against.

These are reference points, not models to use: each one applies a rule a
researcher could follow by hand (a column average, the value of a chemically
similar element, a cheap number shifted by the usual difference) or a plain
off-the-shelf regressor. A validation run scores them on the same folds as the
surrogate; a learner that does not beat them has learnt nothing worth having.

Every predictor receives ``training`` (the long table of computed cells:
element, host, site, method, quantity, value) and ``cells`` (the cells to
predict: element, host, site, method, quantity) and returns one mean per row of
``cells``. They predict means only: intervals, if wanted, come from their own
out-of-fold residuals, computed by the caller. The inputs are never modified,
``cells["value"]`` is never read, extra columns are ignored, and training rows
whose value is not a finite number are left out of every average.
"""

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingRegressor

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.reproducible import learner_seed, seed_integer
from dopantgap.symbols import atomic_number, normalise_symbol
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS

__all__ = [
    "BASELINES",
    "BASELINE_SCENARIOS",
    "baseline_applies",
    "boosted_trees_baseline",
    "column_mean_baseline",
    "group_neighbour_baseline",
    "level_shift_baseline",
    "nearest_host_baseline",
    "other_hosts_baseline",
    "predict_baseline",
]

#: Names accepted by :func:`predict_baseline`, in the order reports list them.
BASELINES = (
    "column-mean baseline", "group-neighbour baseline", "level-shift baseline", "boosted-trees baseline",
    "other-hosts baseline", "nearest-host baseline",
)

#: Validation scenarios where a rule differs from another one; elsewhere it is not scored
#: or listed. The level-shift rule needs the cell's cheaper level computed, which only
#: the upgrade scenario guarantees (a new element has every level hidden, a new cell's
#: cheaper twin is its own upgrade case): anywhere else it would repeat the column mean.
BASELINE_SCENARIOS = {
    "level-shift baseline": ("upgrade",),
    # rules for a host with no or few rows; in a well-computed host they would only
    # repeat what the host's own column says
    "other-hosts baseline": ("sparse-host", "new-host"),
    "nearest-host baseline": ("sparse-host", "new-host"),
}

_COLUMN_KEYS = ("host", "site", "method", "quantity")
# Ever coarser groupings for the column-mean rule; the last resort is all values.
_MEAN_FALLBACKS = (_COLUMN_KEYS, ("method", "quantity"), ("quantity",))
_CATEGORY_COLUMNS = ("host", "site", "method", "quantity")
# Below this many rows a tree ensemble only re-learns the mean, so say so plainly
# (common practice, no source).
_MIN_TREE_ROWS = 5


def baseline_applies(name, scenario):
    """Whether the baseline ``name`` is scored in the validation ``scenario``.

    Parameters
    ----------
    name : str
        One of :data:`BASELINES`.
    scenario : str
        A validation scenario (``calibration.SCENARIOS``).

    Returns
    -------
    bool
        False where the rule would only repeat another (:data:`BASELINE_SCENARIOS`).

    Examples
    --------
    >>> baseline_applies("level-shift baseline", "new-element")
    False
    >>> baseline_applies("column-mean baseline", "new-element")
    True
    """
    scenarios = BASELINE_SCENARIOS.get(name)
    return scenarios is None or scenario in scenarios


# ---------------------------------------------------------------- input handling
def _canonical_elements(frame, what):
    symbols = []
    for position, text in enumerate(frame["element"]):
        symbol = normalise_symbol(str(text))
        if symbol is None:
            raise DopantgapError(
                f"{what} row {position + 1}: element {text!r} is not a chemical element symbol; "
                "use symbols such as 'Ga' or 'Fe'"
            )
        symbols.append(symbol)
    return symbols


def _require_columns(frame, columns, what):
    if not isinstance(frame, pd.DataFrame):
        raise DopantgapError(f"{what} must be a pandas DataFrame with columns {', '.join(columns)}")
    missing = [column for column in columns if column not in frame.columns]
    if missing:
        raise DopantgapError(
            f"{what} lacks column(s) {', '.join(missing)}; give columns {', '.join(columns)}"
        )


def _prepared_training(training):
    """Private copy of the training cells: key columns, canonical elements, finite values."""
    _require_columns(training, REQUIRED_COLUMNS, "training table")
    prepared = training.loc[:, list(REQUIRED_COLUMNS)].copy().reset_index(drop=True)
    prepared["element"] = _canonical_elements(prepared, "training table")
    try:
        values = pd.to_numeric(prepared["value"], errors="raise").to_numpy(dtype=float, copy=True)
    except (TypeError, ValueError) as error:
        raise DopantgapError(f"training table: column 'value' must hold numbers ({error})") from None
    prepared["value"] = values
    return prepared[np.isfinite(values)].reset_index(drop=True)


def _prepared_cells(cells):
    """Private copy of the key columns of the cells; their value column is never taken."""
    _require_columns(cells, KEY_COLUMNS, "cells")
    prepared = cells.loc[:, list(KEY_COLUMNS)].copy().reset_index(drop=True)
    prepared["element"] = _canonical_elements(prepared, "cells")
    return prepared


def _keys(frame, columns):
    return list(frame[list(columns)].itertuples(index=False, name=None))


def _mean_by(training, columns):
    """Mean value per distinct key tuple of ``columns`` (a dict of tuple -> float)."""
    sums, counts = {}, {}
    for key, value in zip(_keys(training, columns), training["value"].to_numpy()):
        sums[key] = sums.get(key, 0.0) + value
        counts[key] = counts.get(key, 0) + 1
    return {key: sums[key] / counts[key] for key in sums}


# ------------------------------------------------------------------------ rules
def _fallback_means(training, cells, groupings):
    """Each cell's mean over the training cells sharing its keys, trying the groupings in
    turn (finest first); NaN where none has a training cell."""
    mean = np.full(len(cells), np.nan)
    for columns in groupings:
        missing = np.flatnonzero(np.isnan(mean))
        if missing.size == 0:
            break
        means = _mean_by(training, columns)
        keys = _keys(cells, columns)
        for row in missing:
            mean[row] = means.get(keys[row], np.nan)
    return mean


def _column_mean_rule(training, cells):
    mean = _fallback_means(training, cells, _MEAN_FALLBACKS)
    if len(training):
        mean[np.isnan(mean)] = float(training["value"].mean())
    return mean


def column_mean_baseline(training, cells):
    """Mean of the training values of each cell's column, with coarser fallbacks.

    Rule: the mean of the training values of the same (host, site, method,
    quantity) column; if that column has none, the mean of the training values
    of the same (method, quantity); if none, of the same quantity; if none, the
    mean of all training values.

    Parameters
    ----------
    training : pandas.DataFrame
        Computed cells: element, host, site, method, quantity, value (extra
        columns are ignored; rows with a non-finite value are left out).
    cells : pandas.DataFrame
        Cells to predict: element, host, site, method, quantity (a value
        column, if present, is never read).

    Returns
    -------
    numpy.ndarray
        One mean per row of ``cells``, in row order; no NaN unless ``training``
        has no finite value at all (then all NaN).

    Raises
    ------
    DopantgapError
        If a required column is missing or an element is not a symbol.
    """
    return _column_mean_rule(_prepared_training(training), _prepared_cells(cells))


def _element_facts(symbols):
    """Periodic-table group and atomic number of each distinct symbol."""
    distinct = list(dict.fromkeys(symbols))
    if not distinct:
        return {}, {}
    groups = elements.descriptor_table(distinct)["group"]
    return (
        {symbol: float(groups.loc[symbol]) for symbol in distinct},
        {symbol: atomic_number(symbol) for symbol in distinct},
    )


def _group_neighbour_rule(training, cells):
    groups, numbers = _element_facts(list(training["element"]) + list(cells["element"]))
    cell_means = _mean_by(training, KEY_COLUMNS)
    # (host, site, method, quantity, group) -> [(atomic number, element, value)]
    candidates = {}
    for (element, host, site, method, quantity), value in cell_means.items():
        candidates.setdefault((host, site, method, quantity, groups[element]), []).append(
            (numbers[element], element, value)
        )
    mean = np.full(len(cells), np.nan)
    for row, (element, host, site, method, quantity) in enumerate(_keys(cells, KEY_COLUMNS)):
        members = [
            member for member in candidates.get((host, site, method, quantity, groups[element]), ())
            if member[1] != element
        ]
        if members:
            own = numbers[element]
            # Sorting on (distance, atomic number) makes the lighter element win a tie.
            nearest = min(members, key=lambda member: (abs(member[0] - own), member[0]))
            mean[row] = nearest[2]
    missing = np.isnan(mean)
    if missing.any():
        mean[missing] = _column_mean_rule(training, cells[missing].reset_index(drop=True))
    return mean


def group_neighbour_baseline(training, cells):
    """Value of the nearest element of the same periodic-table group, same column.

    Rule: for a cell (element, host, site, method, quantity), among the other
    training elements with a value in the same (host, site, method, quantity)
    column and the same periodic-table group
    (``dopantgap.elements.descriptor_table(...)["group"]``; f-block elements
    share the imputed group given there), take the one nearest in atomic number
    (``dopantgap.symbols.atomic_number``); on a tie the lighter element. Its
    value in that column is the prediction (the mean, if it was computed more
    than once). The cell's own element never counts as its neighbour. With no
    such element, the column-mean rule (:func:`column_mean_baseline`) applies.

    Parameters
    ----------
    training : pandas.DataFrame
        Computed cells: element, host, site, method, quantity, value (extra
        columns are ignored; rows with a non-finite value are left out).
    cells : pandas.DataFrame
        Cells to predict: element, host, site, method, quantity (a value
        column, if present, is never read).

    Returns
    -------
    numpy.ndarray
        One mean per row of ``cells``; no NaN unless ``training`` has no finite
        value at all.

    Raises
    ------
    DopantgapError
        If a required column is missing or an element is not a symbol.
    """
    return _group_neighbour_rule(_prepared_training(training), _prepared_cells(cells))


def _checked_levels(levels):
    if isinstance(levels, str):
        levels = [levels]
    try:
        levels = [str(level) for level in levels]
    except TypeError:
        raise DopantgapError("levels must be a list of methods, cheapest first, e.g. ['gga', 'hyb']") from None
    if len(set(levels)) != len(levels):
        raise DopantgapError(f"levels {levels} name a method twice; list each method once, cheapest first")
    return levels


def _level_shift_rule(training, cells, levels):
    cell_means = _mean_by(training, KEY_COLUMNS)
    below_of = {level: levels[index - 1] for index, level in enumerate(levels) if index > 0}
    # Differences level - level below over elements computed at both, per column
    # and pooled per (quantity, method).
    column_shifts, pooled_shifts = {}, {}
    for (element, host, site, method, quantity), value in cell_means.items():
        below = below_of.get(method)
        if below is None or (element, host, site, below, quantity) not in cell_means:
            continue
        difference = value - cell_means[(element, host, site, below, quantity)]
        column_shifts.setdefault((host, site, method, quantity), []).append(difference)
        pooled_shifts.setdefault((quantity, method), []).append(difference)
    mean = np.full(len(cells), np.nan)
    for row, (element, host, site, method, quantity) in enumerate(_keys(cells, KEY_COLUMNS)):
        below = below_of.get(method)
        if below is None or (element, host, site, below, quantity) not in cell_means:
            continue
        differences = column_shifts.get((host, site, method, quantity)) or pooled_shifts.get((quantity, method))
        shift = float(np.mean(differences)) if differences else 0.0
        mean[row] = cell_means[(element, host, site, below, quantity)] + shift
    missing = np.isnan(mean)
    if missing.any():
        mean[missing] = _column_mean_rule(training, cells[missing].reset_index(drop=True))
    return mean


def level_shift_baseline(training, cells, levels):
    """The cheaper level's value shifted by the average difference between levels.

    Rule: for a cell at a level above the cheapest, whose next-cheaper level was
    computed for the same element, host, site and quantity, the prediction is
    that cheaper value plus the mean of (value at the cell's level - value at
    the level below) over the training elements computed at both levels in the
    cell's (host, site, method, quantity) column. With no such pair in the
    column, the mean over all pairs of that (quantity, method) in any host and
    site; with none there either, a shift of 0. Every other cell (cheapest
    level, no cheaper twin, or a method not in ``levels``) takes the
    column-mean rule (:func:`column_mean_baseline`). A cell computed more than
    once counts with its mean value.

    Parameters
    ----------
    training : pandas.DataFrame
        Computed cells: element, host, site, method, quantity, value (extra
        columns are ignored; rows with a non-finite value are left out).
    cells : pandas.DataFrame
        Cells to predict: element, host, site, method, quantity (a value
        column, if present, is never read).
    levels : sequence of str
        Methods, cheapest first (e.g. ``["gga", "hyb"]``).

    Returns
    -------
    numpy.ndarray
        One mean per row of ``cells``; no NaN unless ``training`` has no finite
        value at all.

    Raises
    ------
    DopantgapError
        If a required column is missing, an element is not a symbol, or
        ``levels`` names a method twice.
    """
    return _level_shift_rule(_prepared_training(training), _prepared_cells(cells), _checked_levels(levels))


def _tree_features(frame, categories):
    """Atomic number, then one indicator per known category; unseen ones stay all zero."""
    parts = [np.array([atomic_number(symbol) for symbol in frame["element"]], dtype=float)[:, None]]
    for column in _CATEGORY_COLUMNS:
        # A plain position map, not pandas.Categorical: pandas deprecates values
        # outside the given categories, and unseen ones are expected here.
        position = {category: index for index, category in enumerate(categories[column])}
        codes = np.array([position.get(value, -1) for value in frame[column]], dtype=int)
        indicators = np.zeros((len(frame), len(categories[column])))
        known = codes >= 0
        indicators[np.flatnonzero(known), codes[known]] = 1.0
        parts.append(indicators)
    return np.hstack(parts)


def _boosted_trees_rule(training, cells, random_state):
    if len(training) < _MIN_TREE_ROWS:
        return _column_mean_rule(training, cells)
    categories = {column: sorted(training[column].unique()) for column in _CATEGORY_COLUMNS}
    model = HistGradientBoostingRegressor(random_state=random_state)
    model.fit(_tree_features(training, categories), training["value"].to_numpy())
    if len(cells) == 0:
        return np.zeros(0)
    return np.asarray(model.predict(_tree_features(cells, categories)), dtype=float)


def boosted_trees_baseline(training, cells, random_state=0):
    """Plain gradient-boosted trees on atomic number and one-hot column labels.

    Rule: scikit-learn's ``HistGradientBoostingRegressor(random_state=random_state)``
    with its default settings, fitted to the training values on these
    features: the atomic number, then one 0/1 indicator per host, site, method
    and quantity seen in ``training`` (sorted); a category of a cell that the
    training table lacks gets all indicators of that column zero. With fewer
    than 5 training rows the column-mean rule (:func:`column_mean_baseline`)
    applies instead.

    Parameters
    ----------
    training : pandas.DataFrame
        Computed cells: element, host, site, method, quantity, value (extra
        columns are ignored; rows with a non-finite value are left out).
    cells : pandas.DataFrame
        Cells to predict: element, host, site, method, quantity (a value
        column, if present, is never read).
    random_state : None, int, RandomState or Generator, default=0
        Seed of the regressor (``reproducible.seed_integer``); the same inputs and
        seed give the same output.

    Returns
    -------
    numpy.ndarray
        One mean per row of ``cells``; no NaN unless ``training`` has no finite
        value at all.

    Raises
    ------
    DopantgapError
        If a required column is missing or an element is not a symbol.
    """
    seed = learner_seed(seed_integer(random_state))
    return _boosted_trees_rule(_prepared_training(training), _prepared_cells(cells), seed)


# --------------------------------------------------------------------- dispatch
def _kinds(frame, site_kinds):
    kinds = site_kinds or {}
    return [kinds.get((host, site), site) for host, site in zip(frame["host"], frame["site"])]


def _other_hosts_rule(training, cells, site_kinds=None):
    training = training.assign(kind=_kinds(training, site_kinds))
    cells = cells.assign(kind=_kinds(cells, site_kinds))
    mean = _fallback_means(
        training, cells, (("element", "kind", "method", "quantity"), ("element", "method", "quantity"))
    )
    missing = np.isnan(mean)
    if missing.any():
        mean[missing] = _column_mean_rule(training, cells[missing].reset_index(drop=True))
    return mean


def other_hosts_baseline(training, cells, site_kinds=None):
    """The impurity's mean over the other hosts: a rule for a host with no rows.

    Rule: the mean of the element's training values on sites of the same kind (the
    host file's ``site_kind``, else the same site label) at the cell's method and
    quantity, over every host; else the element's mean at that method and quantity;
    else the column-mean rule.

    Parameters
    ----------
    training, cells : pandas.DataFrame
        As for :func:`predict_baseline`.
    site_kinds : dict or None, default=None
        (host, site) -> site kind.

    Returns
    -------
    numpy.ndarray
    """
    return _other_hosts_rule(_prepared_training(training), _prepared_cells(cells), site_kinds)


def _nearest_host_rule(training, cells, host_values, site_kinds=None):
    from dopantgap.domain import HostDomain

    mean = _other_hosts_rule(training, cells, site_kinds)
    if host_values is None or len(training) == 0:
        return mean
    undescribed = sorted(set(cells["host"]) - set(host_values.index))
    if undescribed:
        raise DopantgapError(
            f"nearest-host baseline: host(s) {', '.join(undescribed)} have no host descriptors in "
            "host_values; build them with hosts.host_descriptor_table over every host"
        )
    training_hosts = [host for host in dict.fromkeys(training["host"]) if host in host_values.index]
    cell_hosts = [host for host in dict.fromkeys(cells["host"]) if host in host_values.index]
    if len(training_hosts) < 2 or not cell_hosts:
        return mean
    domain = HostDomain().fit(host_values.loc[training_hosts])
    if not domain.columns_:
        return mean
    order = dict(zip(cell_hosts, domain.ranked(host_values.loc[cell_hosts])))
    training = training.assign(kind=_kinds(training, site_kinds))
    values = training.groupby(["element", "host", "kind", "method", "quantity"])["value"].mean().to_dict()
    kinds = _kinds(cells, site_kinds)
    for row, (element, host, method, quantity) in enumerate(
        zip(cells["element"], cells["host"], cells["method"], cells["quantity"])
    ):
        for other in order.get(host, ()):
            value = values.get((element, other, kinds[row], method, quantity))
            if value is not None:
                mean[row] = value
                break
    return mean


def nearest_host_baseline(training, cells, host_values, site_kinds=None):
    """The impurity's value in the nearest host: a rule for a host with no rows.

    Rule: among the training hosts where the element is computed on a site of the same
    kind at the cell's method and quantity, the one nearest the cell's host in
    standardised host descriptors (``domain.HostDomain``'s distance) gives its value;
    without one, :func:`other_hosts_baseline`'s rule.

    Parameters
    ----------
    training, cells : pandas.DataFrame
        As for :func:`predict_baseline`.
    host_values : pandas.DataFrame
        Host descriptors indexed by host label (``hosts.host_descriptor_table``).
    site_kinds : dict or None, default=None
        (host, site) -> site kind.

    Returns
    -------
    numpy.ndarray
    """
    return _nearest_host_rule(_prepared_training(training), _prepared_cells(cells), host_values, site_kinds)


def predict_baseline(name, training, cells, levels, random_state=0, site_kinds=None, host_values=None):
    """Means of one reference predictor for the given cells.

    Parameters
    ----------
    name : str
        One of :data:`BASELINES`: ``"column-mean baseline"``
        (:func:`column_mean_baseline`), ``"group-neighbour baseline"``
        (:func:`group_neighbour_baseline`), ``"level-shift baseline"``
        (:func:`level_shift_baseline`), ``"boosted-trees baseline"``
        (:func:`boosted_trees_baseline`), ``"other-hosts baseline"``
        (:func:`other_hosts_baseline`) or ``"nearest-host baseline"``
        (:func:`nearest_host_baseline`); each function's docstring states its rule.
    training : pandas.DataFrame
        Computed cells (e.g. a fold's training cells): element, host, site,
        method, quantity, value; extra columns are ignored; never modified.
    cells : pandas.DataFrame
        Cells to predict (e.g. the fold's held-out cells): element, host, site,
        method, quantity; a value column, if present, is never read; never
        modified.
    levels : sequence of str
        Methods, cheapest first (e.g. ``["gga", "hyb"]``); only the level-shift
        rule uses them.
    random_state : None, int, RandomState or Generator, default=0
        Seed (``reproducible.seed_integer``); only the boosted-trees rule uses it.
    site_kinds : dict or None, default=None
        (host, site) -> site kind; the host rules use them.
    host_values : pandas.DataFrame or None, default=None
        Host descriptors by host label; the nearest-host rule needs them (without, it
        is the other-hosts rule).

    Returns
    -------
    numpy.ndarray
        Float array, one mean per row of ``cells`` in row order; no NaN
        whenever ``training`` has a finite value.

    Raises
    ------
    DopantgapError
        For an unknown ``name`` (the message lists :data:`BASELINES`), a missing
        column, an element that is not a symbol, or repeated ``levels``.

    Examples
    --------
    >>> import pandas as pd
    >>> training = pd.DataFrame({"element": ["Al", "In"], "host": "ZnS", "site": "sub_Zn",
    ...                          "method": "gga", "quantity": "formation_energy",
    ...                          "value": [1.0, 3.0]})
    >>> cells = training[["element", "host", "site", "method", "quantity"]].assign(element="Ga")
    >>> predict_baseline("column-mean baseline", training, cells, ["gga"]).tolist()
    [2.0, 2.0]
    """
    seed = learner_seed(seed_integer(random_state))
    levels = _checked_levels(levels)
    if name not in BASELINES:
        raise DopantgapError(f"unknown baseline {name!r}; choose one of: {', '.join(BASELINES)}")
    training = _prepared_training(training)
    cells = _prepared_cells(cells)
    if name == "column-mean baseline":
        mean = _column_mean_rule(training, cells)
    elif name == "group-neighbour baseline":
        mean = _group_neighbour_rule(training, cells)
    elif name == "level-shift baseline":
        mean = _level_shift_rule(training, cells, levels)
    elif name == "other-hosts baseline":
        mean = _other_hosts_rule(training, cells, site_kinds)
    elif name == "nearest-host baseline":
        mean = _nearest_host_rule(training, cells, host_values, site_kinds)
    else:
        mean = _boosted_trees_rule(training, cells, seed)
    return np.asarray(mean, dtype=float)
