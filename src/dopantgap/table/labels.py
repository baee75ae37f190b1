"""Labels that would split one column of data in two, and where a row came from.

Host, site, method and quantity labels are compared exactly elsewhere in dopantgap, so
``sub_s`` beside ``sub_S`` or ``GGA`` beside ``gga`` would make two columns of what the
user meant as one. Host labels are chemical formulas, read case-sensitively: ``SI`` is
sulphur and iodine, not silicon, so a host label that is an element symbol in the wrong
case is worth a notice even when nothing else clashes with it.
"""

from dopantgap.errors import TableError
from dopantgap.symbols import normalise_symbol
from dopantgap.table.columns import LOCATION_COLUMNS, shown

__all__ = ["check_label_case", "host_case_notices", "row_error", "row_place"]

_CASE_CHECKED = ("host", "site", "method", "quantity")


def row_place(frame, position):
    """Where row ``position`` of ``frame`` came from, as ``(path, line)`` or ``(None, None)``.

    Rows read by :func:`~dopantgap.table.read_table` carry ``_file`` and ``_line``; rows
    built in memory (or added with line 0 by a merge) do not.
    """
    if all(name in frame.columns for name in LOCATION_COLUMNS):
        line = frame["_line"].iat[position]
        try:
            line = int(line)
        except (TypeError, ValueError):
            return None, None
        if line > 0:
            return str(frame["_file"].iat[position]), line
    return None, None


def row_describe(frame, position):
    """``path:line`` of a row read from a file, else ``row N (index I)`` of the frame."""
    path, line = row_place(frame, position)
    if path is not None:
        return f"{path}:{line}"
    return f"row {position + 1} (index {shown(frame.index[position])})"


def row_error(frame, position, message):
    """A one-line :class:`TableError` about row ``position`` of ``frame``."""
    path, line = row_place(frame, position)
    if path is not None:
        return TableError(message, path=path, line=line)
    return TableError(f"{row_describe(frame, position)} of the table: {message}")


def check_label_case(frame):
    """Refuse host, site, method or quantity labels that differ only in letter case.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table with stripped text labels, in file order.

    Raises
    ------
    TableError
        At the first row whose label has another spelling earlier in the table, naming
        both spellings and the line (or row) of each.
    """
    for column in _CASE_CHECKED:
        if column not in frame.columns:
            continue
        first_spelling = {}  # casefolded label -> (label, position)
        for position, label in enumerate(frame[column]):
            label = str(label)
            folded = label.casefold()
            if folded not in first_spelling:
                first_spelling[folded] = (label, position)
                continue
            earlier, earlier_position = first_spelling[folded]
            if earlier == label:
                continue
            why = ""
            if column == "host":
                why = (" (host labels are chemical formulas, read case-sensitively: 'SI' "
                       "would be sulphur and iodine, 'Si' silicon)")
            raise row_error(
                frame,
                position,
                f"{column} {label!r} here and {earlier!r} at "
                f"{row_describe(frame, earlier_position)} differ only in letter case{why}; "
                f"dopantgap would read them as two different {column}s: use one spelling",
            )


def host_case_notices(frame):
    """Notices for host labels that are an element symbol written in another case.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table with stripped text labels.

    Returns
    -------
    list of str
        One line per such host label, at its first row.
    """
    notices = []
    seen = set()
    for position, host in enumerate(frame["host"]):
        host = str(host)
        if host in seen:
            continue
        seen.add(host)
        symbol = normalise_symbol(host)
        if symbol is None or symbol == host:
            continue
        notices.append(
            f"{row_describe(frame, position)}: host {host!r} is read as a chemical "
            f"formula, case-sensitively, not as the element {symbol}; if {symbol} is meant, "
            f"write {symbol!r}"
        )
    return notices
