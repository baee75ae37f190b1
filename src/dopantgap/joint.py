"""The joint Gaussian of an element grid's missing cells, across levels of theory.

What the picker ranks and the screen decides on: calibrated means and covariances of the
cells not yet computed, with the chain between levels carried through.
"""

import numpy as np
import pandas as pd

from dopantgap.errors import DopantgapError
from dopantgap.symbols import normalise_symbol
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS
from dopantgap.surrogate.stages import stage_joint

__all__ = ["MissingJoint", "cell_grid", "missing_joint", "missing_joints"]

_CELL = ["element", "host", "site"]
# Most missing cells of one quantity held in one joint covariance (8 bytes each squared:
# 6000 cells take 290 MB; common practice, no source).
_MAX_BLOCK_CELLS = 6000


class MissingJoint:
    """The missing target cells of one quantity, their calibrated mean and covariance."""

    def __init__(self, quantity, cells, mean, cov):
        self.quantity = quantity
        self.cells = cells  # KEY_COLUMNS + scenario, one row per missing target cell
        self.mean = mean
        self.cov = cov


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


def missing_joint(surrogate, grid, quantity, methods, known):
    """Calibrated joint of the missing cells of ``quantity`` at ``methods``.

    Every level is written as a sum of independent stage processes: value(level k) at a
    cell is the user's number where computed, else stage_k + value(level k-1) for a
    correction stage (stage_k alone for a direct one). The weight of stage s in
    value(level k) is therefore 0 or 1 per cell, and the covariance of two cells is the
    sum over stages of their weights times the stage's covariance: the same numbers as
    ``Surrogate._joint`` within one level, and the chain's covariance across levels.
    """
    levels = surrogate.quantity_levels_[quantity]
    rows = grid[grid["quantity"] == quantity]
    wanted = [method for method in levels if method in methods and method in set(rows["method"])]
    if not wanted:
        return None
    top = max(levels.index(method) for method in wanted)
    units = rows[_CELL].drop_duplicates().reset_index(drop=True)
    n_units = len(units)
    unit_keys = list(units.itertuples(index=False, name=None))
    stage_covs, level_means, level_weights, level_computed = [], [], [], []
    for position, method in enumerate(levels[: top + 1]):
        stage = surrogate.stages_[(quantity, method)]
        stage_mean, stage_cov = stage_joint(surrogate, stage, units)
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
    if len(records) > _MAX_BLOCK_CELLS:
        raise DopantgapError(
            f"{len(records)} missing {quantity} cells are too many to rank jointly (at most "
            f"{_MAX_BLOCK_CELLS}); narrow the candidates with --method, or take one host at a "
            "time with --host."
        )
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


def missing_joints(surrogate, grid, methods, quantities):
    core = surrogate.table_[list(REQUIRED_COLUMNS)]
    known = surrogate._known(core)
    blocks = []
    for quantity in quantities:
        block = missing_joint(surrogate, grid, quantity, methods, known)
        if block is not None:
            blocks.append(block)
    return blocks

