"""From the long table (one row per computed cell) to the wide one (one row per element)."""

import numpy as np
import pandas as pd

from dopantgap.table.columns import KEY_COLUMNS, WIDE_SEPARATOR, shown
from dopantgap.table.labels import row_error

__all__ = ["to_wide"]


def _column_names(frame):
    """Wide column names ``host/site/method/quantity`` of each row."""
    return (
        frame["host"].astype(str) + WIDE_SEPARATOR + frame["site"].astype(str) + WIDE_SEPARATOR
        + frame["method"].astype(str) + WIDE_SEPARATOR + frame["quantity"].astype(str)
    )


def _check_unique_cells(frame):
    repeated = np.flatnonzero(frame.duplicated(list(KEY_COLUMNS), keep="first").to_numpy())
    if len(repeated):
        position = int(repeated[0])
        described = ", ".join(shown(frame[column].iat[position]) for column in KEY_COLUMNS)
        raise row_error(frame, position,
                        f"cell ({described}) appears more than once; keep one row per cell")


def to_wide(frame, values="value"):
    """One row per element, one column per ``host/site/method/quantity``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table as returned by :func:`read_table` (or any long frame with one row per
        cell, such as a filled table).
    values : str, default="value"
        Column spread into the cells (``"std"`` or ``"status"`` of a filled table, say).

    Returns
    -------
    pandas.DataFrame
        Index ``element`` (order of first appearance), columns ``host/site/method/quantity``
        (order of first appearance); float64 values with NaN where not computed, or, for
        a column that does not hold numbers, objects with NaN where absent.
    """
    _check_unique_cells(frame)
    names = _column_names(frame)
    elements = list(dict.fromkeys(frame["element"]))
    column_order = list(dict.fromkeys(names))
    numeric = pd.api.types.is_numeric_dtype(frame[values]) and not pd.api.types.is_bool_dtype(frame[values])
    long = pd.DataFrame({
        "element": frame["element"].to_numpy(dtype=object),
        "column": names.to_numpy(dtype=object),
        "value": frame[values].to_numpy(dtype=np.float64 if numeric else object),
    })
    wide = long.pivot(index="element", columns="column", values="value")
    wide = wide.reindex(index=elements, columns=column_order).astype(np.float64 if numeric else object)
    wide.index.name = "element"
    wide.columns.name = None
    return wide
