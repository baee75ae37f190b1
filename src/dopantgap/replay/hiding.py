"""Which cells a replay hides: the expensive level of all but a few elements.

Hiding rule
-----------
It mimics real rounds of calculations: the cheap level is known everywhere, the expensive level
for a few elements. With ``method`` the level replayed (default the most costly in ``cost``;
without costs the last of :func:`dopantgap.surrogate.order_levels`): a seeded ``keep_fraction``
(default 20 %, at least 2 and at most all but one) of the elements that have cells of
``method`` keep them visible; the ``method`` cells of every other element are hidden.
Cells of every other method stay visible. The candidates of both strategies are the
hidden cells (and only those: a cell the completed table lacks cannot be revealed);
the picker sees only the visible table, plus the names of elements whose every cell is
hidden (``element_symbols``), and its picks are filtered to revealable cells.
"""

import numpy as np

from dopantgap.errors import DopantgapError
from dopantgap.reproducible import seed_integer
from dopantgap.surrogate import order_levels

__all__ = ["hide_cells"]

# fewest elements that keep their replayed-level cells visible (common practice, no source)
_KEEP_MIN_ELEMENTS = 2


def hide_cells(table, method=None, keep_fraction=0.2, random_state=0, levels=None):
    """Split a completed table into what the replay starts from and what it hides.

    Parameters
    ----------
    table : DataFrame
        The completed long table.
    method : str or None, default=None
        Level replayed; None: the most expensive (``order_levels(table, levels)``).
    keep_fraction : float, default=0.2
        Share of the elements with ``method`` cells that keep them visible.
    random_state : None, int, RandomState or Generator, default=0
        Seed of the draw (``reproducible.seed_integer``); the elements kept do not
        depend on the order of the table's rows.
    levels : sequence of str or None, default=None
        Methods cheapest first, as for ``Surrogate(levels=...)``.

    Returns
    -------
    visible : DataFrame
        Rows of ``table`` left visible (all columns, in table order).
    hidden : DataFrame
        The hidden rows (all columns, in table order).
    method : str
    """
    seed = seed_integer(random_state)
    methods = order_levels(table, levels)
    if method is None:
        method = methods[-1]
    if method not in methods:
        raise DopantgapError(f"--method: {method!r} is not a method of the table; choose one of {', '.join(methods)}.")
    if not 0.0 < float(keep_fraction) < 1.0:
        raise DopantgapError(f"--keep-fraction must lie strictly between 0 and 1 (e.g. 0.2), got {keep_fraction}.")
    with_method = sorted(set(table.loc[table["method"] == method, "element"]))
    if len(with_method) < _KEEP_MIN_ELEMENTS + 1:
        raise DopantgapError(
            f"the table has {method!r} cells for {len(with_method)} element(s); a replay needs at least "
            f"{_KEEP_MIN_ELEMENTS + 1} (some kept to learn from, some hidden to reveal)."
        )
    n_keep = int(round(float(keep_fraction) * len(with_method)))
    n_keep = min(max(n_keep, _KEEP_MIN_ELEMENTS), len(with_method) - 1)
    rng = np.random.default_rng(seed)
    kept = set(rng.choice(with_method, size=n_keep, replace=False).tolist())
    is_hidden = ((table["method"] == method) & ~table["element"].isin(kept)).to_numpy()
    return table[~is_hidden], table[is_hidden], method
