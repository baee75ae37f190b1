"""Same table and seed, same answer: seeds checked once and derived, rows in one order.

Every public function that draws random numbers takes a ``random_state`` and turns it
into a non-negative integer with :func:`seed_integer` before any work, so a bad seed is
refused at once in one line, and every later draw is seeded from that integer
(:func:`child_seed` for the parts that need their own stream). Tables are put in
:func:`canonical_order` before anything random, so shuffling a table's rows changes no
fold, no draw and no output.
"""

import numbers

import numpy as np
import pandas as pd
from sklearn.utils import check_random_state

from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS

__all__ = ["canonical_order", "child_seed", "learner_seed", "seed_integer"]

# seeds drawn from a generator (or for None) lie in [0, 2**32): what every NumPy and
# scikit-learn seeding path accepts
_SEED_SPAN = 2**32

_RANK = {symbol: rank for rank, symbol in enumerate(SYMBOLS)}


def seed_integer(random_state, name="random_state"):
    """A non-negative integer seed from anything scikit-learn's ``check_random_state`` takes.

    Parameters
    ----------
    random_state : None, int, numpy.random.RandomState or numpy.random.Generator
        An int (any size, at least 0) is kept as it is; a ``RandomState`` or
        ``Generator`` gives one integer drawn from it (advancing it, as scikit-learn's
        estimators do); None draws one from NumPy's global ``RandomState`` (so that
        ``numpy.random.seed`` makes it repeatable, as in scikit-learn).
    name : str, default="random_state"
        How the caller calls the argument, for the message (``--seed`` on the command line).

    Returns
    -------
    int

    Raises
    ------
    DopantgapError
        For a negative int, a bool, a float, a string or anything else.

    Examples
    --------
    >>> seed_integer(7)
    7
    >>> seed_integer(np.random.RandomState(0)) == seed_integer(np.random.RandomState(0))
    True
    """
    if isinstance(random_state, np.random.Generator):
        return int(random_state.integers(0, _SEED_SPAN))
    if random_state is None or isinstance(random_state, np.random.RandomState):
        return int(check_random_state(random_state).randint(0, _SEED_SPAN, dtype=np.int64))
    if isinstance(random_state, numbers.Integral) and not isinstance(random_state, (bool, np.bool_)):
        if random_state < 0:
            raise DopantgapError(f"{name} must be 0 or a positive whole number, got {int(random_state)}.")
        return int(random_state)
    raise DopantgapError(
        f"{name} must be None, a whole number >= 0, a numpy RandomState or a numpy Generator; "
        f"got {random_state!r} ({type(random_state).__name__})."
    )


def child_seed(seed, *path):
    """An integer in [0, 2**32) derived from ``seed`` and ``path`` (NumPy's ``SeedSequence``).

    Parameters
    ----------
    seed : int
        A seed checked by :func:`seed_integer`.
    *path : int
        Which child (for example 1 for a second stream).

    Returns
    -------
    int
    """
    return int(np.random.SeedSequence([int(seed), *map(int, path)]).generate_state(1)[0])


def learner_seed(seed):
    """A seed scikit-learn's estimators accept (below 2**32): ``seed`` itself where it is,
    else one derived from it, so that small seeds give what they always gave."""
    seed = int(seed)
    return seed if seed < _SEED_SPAN else child_seed(seed)


def _element_rank(symbol):
    return _RANK.get(symbol, len(_RANK))


def canonical_order(table, columns=("element", "host", "site", "method", "quantity")):
    """``table``'s rows in an order that does not depend on the order they came in.

    Elements by atomic number, then host, site, method and quantity as text; rows
    equal in all of those by value, then by the other columns' text. Rows are not changed,
    only reordered; the index is renumbered from 0.

    Parameters
    ----------
    table : DataFrame
    columns : sequence of str
        Key columns in sort priority; those absent from ``table`` are skipped.

    Returns
    -------
    DataFrame
    """
    present = [column for column in columns if column in table.columns]
    # ties (repeated cells) by value, then the other columns; provenance columns
    # (``_file``, ``_line``) say where a row came from, not what it is
    rest = sorted(
        (column for column in table.columns if column not in present and not str(column).startswith("_")),
        key=lambda column: (column != "value", str(column)),
    )
    keys = {}
    for column in present:
        text = table[column].astype(str).to_numpy()
        if column == "element":
            keys[len(keys)] = [_element_rank(symbol) for symbol in text]
        keys[len(keys)] = text
    for column in rest:
        keys[len(keys)] = [repr(item) for item in table[column].tolist()]
    if not keys:
        return table.reset_index(drop=True)
    order = pd.DataFrame(keys).sort_values(list(keys), kind="stable").index.to_numpy()
    return table.iloc[order].reset_index(drop=True)
