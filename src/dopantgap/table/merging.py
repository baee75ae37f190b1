"""Merging new results into a table without altering an earlier row."""

import numpy as np
import pandas as pd

from dopantgap.errors import TableError
from dopantgap.table.columns import KEY_COLUMNS, REQUIRED_COLUMNS, shown

__all__ = ["ORIGINAL_LABEL", "PROVENANCE_COLUMN", "merge_results"]


#: Column that says where each row of a merged table came from.
PROVENANCE_COLUMN = "source"
#: Provenance given to the rows of a table that had no provenance column yet.
ORIGINAL_LABEL = "original"


def _where(frame, position, fallback):
    """``file:line`` of a row read by :func:`read_table`, or a row number of a frame."""
    if "_file" in frame.columns and "_line" in frame.columns:
        return f"{frame['_file'].iat[position]}:{int(frame['_line'].iat[position])}"
    return f"{fallback} row {position + 1}"


def merge_results(table, results, label, column=PROVENANCE_COLUMN):
    """The table with new computed cells appended, each row marked with its provenance.

    Earlier rows are kept as they are, in their order, with every value and extra column
    unchanged; new rows follow in their order. A cell present in both with the same value
    is not repeated (a notice says so); with a different value the merge is refused.

    Parameters
    ----------
    table : pandas.DataFrame
        The table so far, as returned by :func:`read_table` (or an earlier merge).
    results : pandas.DataFrame
        New computed cells in the long layout, as returned by :func:`read_table`.
    label : str
        Provenance written in ``column`` on the new rows (for example ``"round 2"``).
    column : str, default="source"
        Provenance column. If ``table`` has it, its text is kept as is; otherwise it is
        added with ``"original"`` on every earlier row. A provenance column in ``results``
        is replaced by ``label``.

    Returns
    -------
    pandas.DataFrame
        Earlier rows then new rows; columns of ``table`` first, then extra columns that
        only ``results`` has (blank on earlier rows). ``_file``/``_line`` are kept, so
        each row can still be traced to its file and line. ``attrs["notices"]`` lists
        the exact repeats; ``attrs["n_added"]`` counts the new rows.

    Raises
    ------
    TableError
        For a conflicting cell: same element, host, site, method and quantity with a
        different value; the message names both files and lines.
    """
    label = str(label)
    missing = [name for name in REQUIRED_COLUMNS if name not in results.columns]
    if missing:
        raise TableError(f"the results lack the column(s) {', '.join(missing)}; "
                         f"give them in the long layout ({', '.join(REQUIRED_COLUMNS)})")
    earlier = table.copy()
    if column not in earlier.columns:
        earlier[column] = pd.Series([ORIGINAL_LABEL] * len(earlier), index=earlier.index, dtype=str)
    known = {}
    for position, key in enumerate(earlier[list(KEY_COLUMNS)].itertuples(index=False, name=None)):
        known.setdefault(key, position)
    keep = []
    notices = []
    for position, key in enumerate(results[list(KEY_COLUMNS)].itertuples(index=False, name=None)):
        if key not in known:
            keep.append(position)
            continue
        old_position = known[key]
        old_value = float(earlier["value"].iat[old_position])
        new_value = float(results["value"].iat[position])
        here = _where(results, position, "results")
        there = _where(earlier, old_position, "table")
        described = ", ".join(shown(part) for part in key)
        if old_value != new_value:
            raise TableError(
                f"{here}: conflicting result: ({described}) is {new_value!r} here but "
                f"{old_value!r} in {there}; earlier values are never replaced: correct or "
                "remove one of the two lines"
            )
        notices.append(f"{here}: same cell and value as {there}; kept the earlier row")
    added = results.iloc[keep].copy()
    added[column] = pd.Series([label] * len(added), index=added.index, dtype=str)
    columns = list(earlier.columns) + [name for name in added.columns if name not in earlier.columns]
    for name in columns:
        # a row with no file of its own (built in memory) has line 0
        blank, dtype = (0, np.int64) if name == "_line" else ("", str)
        for part in (earlier, added):
            if name not in part.columns:
                part[name] = pd.Series([blank] * len(part), index=part.index, dtype=dtype)
    if len(added):
        merged = pd.concat([earlier[columns], added[columns]], ignore_index=True)
    else:
        merged = earlier[columns].reset_index(drop=True)
    merged["value"] = merged["value"].astype(np.float64)
    if "_line" in merged.columns:
        merged["_line"] = merged["_line"].astype(np.int64)
    merged.attrs["notices"] = list(table.attrs.get("notices", [])) + notices
    merged.attrs["n_added"] = len(added)
    return merged
