"""The joint Gaussian of an element grid's missing cells, across levels of theory.

What the picker ranks and the screen decides on: calibrated means and covariances of the
cells not yet computed, with the chain between levels carried through.
"""

from collections import Counter

import numpy as np
import pandas as pd

from dopantgap.errors import DopantgapError
from dopantgap.progress import step
from dopantgap.symbols import normalise_symbol
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS
from dopantgap.surrogate.stages import stage_joint

__all__ = ["MAX_JOINT_CELLS", "MissingJoint", "cell_grid", "joint_groups", "missing_joint", "missing_joints"]

_CELL = ["element", "host", "site"]
#: Most missing cells of one quantity held in one joint covariance (8 bytes each squared:
#: 6000 cells take 290 MB; common practice, no source). A quantity with more is weighed
#: in groups of whole hosts (``joint_groups``), so that memory grows with the number of
#: missing cells, not with its square.
MAX_JOINT_CELLS = 6000


class MissingJoint:
    """The missing target cells of one quantity, their calibrated mean and covariance."""

    def __init__(self, quantity, cells, mean, cov, n_groups=1):
        self.quantity = quantity
        self.cells = cells  # KEY_COLUMNS + scenario, one row per missing target cell
        self.mean = mean
        self.cov = cov
        # joints the quantity's missing cells were cut into (``joint_groups``)
        self.n_groups = n_groups


def cell_grid(surrogate, element_symbols=(), extra_columns=None):
    """Every element (table's, then extra ones) times every column of the table (and the
    (host, site, method, quantity) rows of ``extra_columns``, e.g. a new host's)."""
    table = surrogate.table_
    symbols = list(dict.fromkeys(table["element"]))
    for symbol in element_symbols or ():
        canonical = normalise_symbol(symbol)
        if canonical is None:
            raise DopantgapError(
                f"--elements: {symbol!r} is not an element symbol; e.g. --elements Ti,V."
            )
        if canonical not in symbols:
            symbols.append(canonical)
    columns = table[["host", "site", "method", "quantity"]].drop_duplicates()
    if extra_columns is not None:
        columns = pd.concat([columns, extra_columns[["host", "site", "method", "quantity"]]], ignore_index=True)
    return pd.DataFrame(
        [
            {"element": symbol, "host": host, "site": site, "method": method, "quantity": quantity}
            for symbol in symbols
            for host, site, method, quantity in columns.itertuples(index=False, name=None)
        ],
        columns=list(KEY_COLUMNS),
    )


def missing_joint(surrogate, grid, quantity, methods, known, stage_cache=None):
    """Calibrated joint of the missing cells of ``quantity`` at ``methods``.

    ``stage_cache`` (``shared_stage_cache``, or None) keeps the joint over the cells
    asked for of the stages that plausible versions of a model share (those they do not
    re-tune): on a 10,000-cell model, recomputing the cheap stage's covariance for every
    version was half of ``next``.

    Every level is written as a sum of independent stage processes: value(level k) at a
    cell is the user's number where computed, else stage_k + value(level k-1) for a
    correction stage (stage_k alone for a direct one). The weight of stage s in
    value(level k) is therefore 0 or 1 per cell, and the covariance of two cells is the
    sum over stages of their weights times the stage's covariance: the same numbers as
    ``Surrogate._joint`` within one level, and the chain's covariance across levels.
    """
    levels = surrogate.quantity_levels_[quantity]
    rows = grid[grid["quantity"] == quantity]
    wanted = _wanted_methods(surrogate, rows, quantity, methods)
    if not wanted:
        return None
    top = max(levels.index(method) for method in wanted)
    # only the (element, host, site) with a missing target cell: a stage's covariance
    # over some cells is the same numbers as the part of it over more cells
    open_rows = rows[_missing_rows(rows, wanted, known)]
    units = open_rows[_CELL].drop_duplicates().reset_index(drop=True)
    n_units = len(units)
    unit_keys = list(units.itertuples(index=False, name=None))
    stage_covs, level_means, level_weights, level_computed = [], [], [], []
    for position, method in enumerate(levels[: top + 1]):
        stage = surrogate.stages_[(quantity, method)]
        stage_mean, stage_cov = _stage_joint_once(surrogate, stage, units, unit_keys, stage_cache)
        stage_covs.append(stage_cov)
        values = np.array([known.get(key + (method, quantity), np.nan) for key in unit_keys])
        computed = ~np.isnan(values)
        open_ = (~computed).astype(float)
        mean = np.array(stage_mean, dtype=float)
        if stage.kind == "correction" and position > 0:
            weights = [previous * open_ for previous in level_weights[-1]] + [open_]
            mean = mean + level_means[-1]
        else:
            weights = [np.zeros(n_units)] * position + [open_]
        level_means.append(np.where(computed, values, mean))
        level_weights.append(weights)
        level_computed.append(computed)
    # the missing target cells, in grid order
    present = set(zip(rows["element"], rows["host"], rows["site"], rows["method"]))
    unit_index = {key: index for index, key in enumerate(unit_keys)}
    records, cell_unit, cell_level = [], [], []
    for method in wanted:
        position = levels.index(method)
        for key in unit_keys:
            if key + (method,) in present and not level_computed[position][unit_index[key]]:
                records.append(key + (method, quantity))
                cell_unit.append(unit_index[key])
                cell_level.append(position)
    if not records:
        return None
    cells = pd.DataFrame(records, columns=list(KEY_COLUMNS))
    cell_unit, cell_level = np.array(cell_unit), np.array(cell_level)
    cov = np.zeros((len(cells), len(cells)))
    for stage_position, stage_cov in enumerate(stage_covs):
        weight = np.array(
            [
                level_weights[level][stage_position][unit] if stage_position <= level else 0.0
                for unit, level in zip(cell_unit, cell_level)
            ]
        )
        if not weight.any():
            continue
        cov += np.outer(weight, weight) * stage_cov[np.ix_(cell_unit, cell_unit)]
    mean = np.array([level_means[level][unit] for unit, level in zip(cell_unit, cell_level)])
    core = surrogate.table_[list(REQUIRED_COLUMNS)]
    scenarios = surrogate._scenarios(core, cells)
    scale = surrogate.std_factors(cells, raw_std=np.sqrt(np.clip(np.diag(cov), 0.0, None)))
    cov = cov * np.outer(scale, scale)
    cells["scenario"] = scenarios
    return MissingJoint(quantity, cells, mean, (cov + cov.T) / 2.0)


def shared_stage_cache(versions):
    """An empty ``stage_cache`` for the stages that more than one of ``versions`` (fitted
    surrogates) hold: only those are kept, since a joint over thousands of cells is
    hundreds of megabytes (id -> {units: joint}; the versions keep the stages alive)."""
    held = Counter(id(stage) for version in versions for stage in version.stages_.values())
    return {key: {} for key, count in held.items() if count > 1}


def _stage_joint_once(surrogate, stage, units, unit_keys, stage_cache):
    """``stage_joint`` of the units, read from ``stage_cache`` when the stage is one it
    keeps and was asked for the same units before."""
    kept = None if stage_cache is None else stage_cache.get(id(stage))
    if kept is None:
        return stage_joint(surrogate, stage, units)
    key = tuple(unit_keys)
    if key not in kept:
        kept[key] = stage_joint(surrogate, stage, units)
    return kept[key]


def _wanted_methods(surrogate, rows, quantity, methods):
    """The levels of ``quantity`` among ``methods`` that the grid ``rows`` have, cheapest first."""
    levels = surrogate.quantity_levels_[quantity]
    present = set(rows["method"])
    return [method for method in levels if method in methods and method in present]


def _missing_rows(rows, wanted, known):
    """Boolean mask of the grid ``rows`` that are missing cells of a ``wanted`` method."""
    keys = rows[list(KEY_COLUMNS)].itertuples(index=False, name=None)
    return np.array(
        [key[3] in wanted and key not in known for key in keys], dtype=bool
    ).reshape(len(rows))


def joint_groups(surrogate, grid, quantity, methods, known, max_cells=MAX_JOINT_CELLS):
    """The grid rows of ``quantity`` cut into groups of at most ``max_cells`` missing cells.

    One group when the quantity has at most ``max_cells`` missing cells (the exact
    joint). Otherwise whole hosts are packed into groups in the grid's order; a host with
    more missing cells than ``max_cells`` is cut by site, and a site by runs of elements.
    The cells of different groups are treated as independent: a pick's benefit counts
    the cells of its own group only.

    Parameters
    ----------
    surrogate : Surrogate
        Fitted (its levels per quantity).
    grid : DataFrame
        ``cell_grid`` output.
    quantity : str
    methods : sequence of str
        The levels whose missing cells are weighed.
    known : dict
        Computed cell key -> value (``Surrogate._known``).
    max_cells : int, default=MAX_JOINT_CELLS

    Returns
    -------
    list of DataFrame
        Subsets of ``grid`` (their rows of ``quantity``), none empty of missing cells.
    """
    rows = grid[grid["quantity"] == quantity]
    wanted = _wanted_methods(surrogate, rows, quantity, methods)
    missing = _missing_rows(rows, wanted, known)
    if not missing.any():
        return []
    if missing.sum() <= max_cells:
        return [rows]
    pieces = []  # (missing cells, row mask), in grid order

    def cut(mask, by):
        for value in dict.fromkeys(rows[by][mask]):
            yield mask & (rows[by] == value).to_numpy()

    for host_mask in cut(np.ones(len(rows), dtype=bool), "host"):
        for site_mask in [host_mask] if missing[host_mask].sum() <= max_cells else cut(host_mask, "site"):
            if missing[site_mask].sum() <= max_cells:
                pieces.append((int(missing[site_mask].sum()), site_mask))
                continue
            run, count = np.zeros(len(rows), dtype=bool), 0
            for element_mask in cut(site_mask, "element"):
                n = int(missing[element_mask].sum())
                if count and count + n > max_cells:
                    pieces.append((count, run))
                    run, count = np.zeros(len(rows), dtype=bool), 0
                run, count = run | element_mask, count + n
            pieces.append((count, run))
    groups, current, count = [], np.zeros(len(rows), dtype=bool), 0
    for n, mask in pieces:
        if n == 0:
            continue
        if count and count + n > max_cells:
            groups.append(rows[current])
            current, count = np.zeros(len(rows), dtype=bool), 0
        current, count = current | mask, count + n
    groups.append(rows[current])
    return groups


def missing_joints(surrogate, grid, methods, quantities, max_cells=MAX_JOINT_CELLS, progress=None,
                   stage_cache=None):
    """Calibrated joints of the missing cells of each of ``quantities`` at ``methods``.

    Parameters
    ----------
    surrogate : Surrogate
        Fitted.
    grid : DataFrame
        ``cell_grid`` output.
    methods, quantities : sequence of str
    max_cells : int, default=MAX_JOINT_CELLS
        Most missing cells in one joint (``joint_groups``).
    progress : object or None, default=None
        Told ``update(1)`` after each quantity (``progress.step``).
    stage_cache : dict or None, default=None
        ``shared_stage_cache(versions)``, passed to the calls for each of the versions
        (``missing_joint``); no stage may change while it is in use.

    Returns
    -------
    list of MissingJoint
        One per quantity, or one per group of hosts where a quantity has more than
        ``max_cells`` missing cells; ``MissingJoint.n_groups`` says how many its quantity has.
    """
    core = surrogate.table_[list(REQUIRED_COLUMNS)]
    known = surrogate._known(core)
    blocks = []
    for quantity in quantities:
        groups = joint_groups(surrogate, grid, quantity, methods, known, max_cells)
        found = [missing_joint(surrogate, rows, quantity, methods, known, stage_cache) for rows in groups]
        found = [block for block in found if block is not None]
        for block in found:
            block.n_groups = len(found)
        blocks += found
        step(progress)
    return blocks

