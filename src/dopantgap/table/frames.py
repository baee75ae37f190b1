"""The reader's checks for a table handed over in memory (a pandas DataFrame).

A notebook user may build the table with pandas instead of reading a file; the model
must then refuse what :func:`~dopantgap.table.read_table` would refuse, with the same
one-line messages (naming ``file:line`` when the frame carries ``_file``/``_line``,
otherwise the row and its index label), and flag the same suspect values.
"""

import warnings
from numbers import Real

import numpy as np
import pandas as pd

from dopantgap.errors import SuspectValueWarning, TableError
from dopantgap.table.cells import parse_element, parse_key, parse_value
from dopantgap.table.columns import KEY_COLUMNS, REQUIRED_COLUMNS, RESERVED_COLUMNS, shown
from dopantgap.table.labels import check_label_case, host_case_notices, row_describe, row_error, row_place
from dopantgap.table.suspects import suspect_values as find_suspect_values

__all__ = ["SUSPECT_POLICIES", "check_frame", "refuse_or_warn"]

#: What to do with suspect values: refuse the table, or keep it with a warning per value.
SUSPECT_POLICIES = ("refuse", "warn")


def refuse_or_warn(suspects, policy):
    """Act on :func:`~dopantgap.table.suspect_values`'s result as ``policy`` says.

    Parameters
    ----------
    suspects : pandas.DataFrame
        Flagged values.
    policy : {"refuse", "warn"}
        "refuse" raises for the first of them; "warn" issues a
        :class:`~dopantgap.errors.SuspectValueWarning` per value.

    Raises
    ------
    TableError
        With "refuse" and at least one suspect value: its message, how many more there
        are, and how to keep them if they are right.
    """
    if policy not in SUSPECT_POLICIES:
        raise ValueError(f"suspect_values must be one of {', '.join(SUSPECT_POLICIES)}, not {policy!r}")
    if len(suspects) == 0:
        return
    if policy == "warn":
        for message in suspects["message"]:
            warnings.warn(f"suspect value kept: {message}", SuspectValueWarning, stacklevel=3)
        return
    more = len(suspects) - 1
    raise TableError(
        suspects["message"].iat[0]
        + (f" ({more} more suspect value{'s' if more > 1 else ''}; 'dopantgap check' lists them)"
           if more else "")
        + "; correct the value, or if it is right keep it with suspect_values='warn' "
        "(command line: --suspect-values warn)"
    )


def _located(frame, position, parse, *arguments):
    """Call a cell parser with the row's file and line, or re-word its error for a frame row."""
    path, line = row_place(frame, position)
    if path is not None:
        return parse(*arguments, line, path)
    try:
        return parse(*arguments, None, None)
    except TableError as error:
        raise row_error(frame, position, str(error)) from None


def _as_text(cell):
    """A label cell as text: blank for missing values, ``str`` of any other scalar."""
    if cell is None or (pd.api.types.is_scalar(cell) and pd.isna(cell)):
        return ""
    return cell if isinstance(cell, str) else str(cell)


def _value_text(cell):
    """A value cell as the text :func:`parse_value` judges (numbers by their exact repr)."""
    if isinstance(cell, (bool, np.bool_)):
        return str(cell)  # refused as "not a number"
    if isinstance(cell, Real):
        try:
            return repr(float(cell))
        except OverflowError:  # an integer beyond any float: parse_value calls it infinite
            return str(cell)
    return _as_text(cell)


def _check_columns(frame):
    if not isinstance(frame, pd.DataFrame):
        raise TableError(
            f"the table must be a pandas DataFrame, not {type(frame).__name__}; read it with "
            "dopantgap.read_table or build a DataFrame with the columns "
            f"{', '.join(REQUIRED_COLUMNS)}"
        )
    names = [str(name) for name in frame.columns]
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise TableError(f"the table has more than one column named {', '.join(map(repr, repeated))}; "
                         "give each column its own name")
    missing = [name for name in REQUIRED_COLUMNS if name not in names]
    if missing:
        near = [name for name in names if name.strip().lower() in missing]
        hint = f" (found {', '.join(map(repr, near))}: the names must be lower case)" if near else ""
        raise TableError(
            f"the table lacks the column(s) {', '.join(missing)}{hint}; read it with "
            f"dopantgap.read_table or rename its columns to {', '.join(REQUIRED_COLUMNS)}"
        )
    for name in names:
        if name.strip().lower() in RESERVED_COLUMNS:
            raise TableError(
                f"column {name!r} has a reserved name (dopantgap adds a column of that name to its "
                f"outputs); rename it, for example to 'user_{name.strip()}'"
            )
    if len(frame) == 0:
        raise TableError("the table has no rows; give one row per computed value")


def check_frame(frame, *, suspect_values="refuse"):
    """A table given as a DataFrame, checked as the reader checks a file.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table with columns ``element, host, site, method, quantity, value`` and any
        extra columns; ``_file``/``_line`` (as :func:`~dopantgap.table.read_table` adds
        them) name the rows in messages. It is not changed.
    suspect_values : {"refuse", "warn"}, default="refuse"
        What to do with values that a unit slip or a flipped sign would explain
        (:func:`~dopantgap.table.suspect_values`): refuse the table, or keep them with a
        :class:`~dopantgap.errors.SuspectValueWarning` each.

    Returns
    -------
    pandas.DataFrame
        A copy with the same columns and index: labels stripped, element symbols in
        canonical case, ``value`` as float64 (numbers unchanged). A row that repeats an
        earlier cell with the same value is left out, as the reader does, with a notice in
        ``attrs["notices"]``.

    Raises
    ------
    TableError
        For the first problem: a missing or reserved column, a blank or unknown label, a
        value that is not a finite energy in eV (NaN, infinity, text, a boolean), a label
        with ``/``, labels that differ only in letter case, two rows giving one cell
        different values, or (with "refuse") a suspect value.
    ValueError
        For a ``suspect_values`` other than the two above.

    Examples
    --------
    >>> import pandas as pd
    >>> rows = pd.DataFrame({"element": ["fe"], "host": ["MgO"], "site": ["sub_Mg"],
    ...                      "method": ["gga"], "quantity": ["E_sol"], "value": [1.5]})
    >>> check_frame(rows)["element"].tolist()
    ['Fe']
    """
    if suspect_values not in SUSPECT_POLICIES:
        raise ValueError(
            f"suspect_values must be one of {', '.join(SUSPECT_POLICIES)}, not {suspect_values!r}"
        )
    _check_columns(frame)
    checked = frame.copy()
    columns = {name: [] for name in REQUIRED_COLUMNS}
    first_seen = {}  # cell key -> (position, value)
    keep = []
    notices = []
    for position in range(len(frame)):
        element = _located(frame, position, parse_element, _as_text(frame["element"].iat[position]))
        key = [element] + [
            _located(frame, position, lambda text, line, path, column=column:
                     parse_key(text, column, line, path, True), _as_text(frame[column].iat[position]))
            for column in KEY_COLUMNS[1:]
        ]
        value = _located(frame, position, lambda text, line, path:
                         parse_value(text, "value", line, path), _value_text(frame["value"].iat[position]))
        key = tuple(key)
        if key in first_seen:
            earlier, earlier_value = first_seen[key]
            described = ", ".join(shown(part) for part in key)
            if value != earlier_value:
                raise row_error(
                    frame, position,
                    f"conflicting duplicate: ({described}) is {value!r} here but {earlier_value!r} "
                    f"at {row_describe(frame, earlier)}; keep one of the two rows",
                )
            notices.append(f"{row_describe(frame, position)}: same cell and value as "
                           f"{row_describe(frame, earlier)}; kept the earlier row")
            continue
        first_seen[key] = (position, value)
        keep.append(position)
        for name, part in zip(REQUIRED_COLUMNS, key + (value,)):
            columns[name].append(part)
    checked = checked.iloc[keep].copy()
    for name in KEY_COLUMNS:
        checked[name] = pd.Series(columns[name], index=checked.index, dtype=str)
    checked["value"] = pd.Series(np.asarray(columns["value"], dtype=np.float64), index=checked.index)
    check_label_case(checked)
    earlier_notices = list(frame.attrs.get("notices", []))
    notices = [notice for notice in notices + host_case_notices(checked) if notice not in earlier_notices]
    checked.attrs["notices"] = earlier_notices + notices
    refuse_or_warn(find_suspect_values(checked), suspect_values)
    return checked
