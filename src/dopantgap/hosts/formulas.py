"""Host labels as compositions: chemical formulas, and host files that map other labels to them.

:func:`parse_formula` turns host labels such as ``"GaN"`` or ``"Al2O3"`` into
compositions, :func:`read_host_file` reads a CSV that maps other labels (such as
``diamond``) to formulas, and :func:`host_compositions` gives every host label of a
table its composition.
"""

import re
from pathlib import Path

from dopantgap.errors import DopantgapError, TableError
from dopantgap.hosts.host_file import read_host_rows
from dopantgap.symbols import normalise_symbol

__all__ = ["host_compositions", "parse_formula", "read_host_file"]


_FORMULA_TOKEN = re.compile(r"([A-Z][a-z]*)|(\()|(\))|(\d+(?:\.\d+)?|\.\d+)")


def _not_a_formula(text, reason):
    return DopantgapError(
        f"host {text!r} is not a chemical formula ({reason}); name the host by its formula "
        "(for example 'GaN', 'Al2O3', or 'C' for diamond) or map the label to a formula in "
        "a host file (CSV with columns host,formula)"
    )


def parse_formula(text):
    """Composition of a chemical formula such as ``"SnO2"`` or ``"Ca(OH)2"``.

    Parameters
    ----------
    text : str
        Formula: element symbols with their usual capitalisation, optional
        counts (integers or decimals such as ``Fe0.95O``) and parentheses
        with a count. Surrounding blanks are ignored.

    Returns
    -------
    dict of str to float
        Element -> number of atoms per formula unit, in order of first
        appearance; repeated elements are summed.

    Raises
    ------
    DopantgapError
        If ``text`` is not a formula (e.g. ``"diamond"``); the message says
        to use the formula or a host file.

    Examples
    --------
    >>> parse_formula("Al2O3")
    {'Al': 2.0, 'O': 3.0}
    """
    if not isinstance(text, str) or not text.strip():
        raise _not_a_formula(text, "it is empty")
    formula = text.strip()
    # Each stack level holds the counts of one pair of parentheses.
    stack = [{}]
    last_group = None
    position = 0
    while position < len(formula):
        match = _FORMULA_TOKEN.match(formula, position)
        if match is None:
            raise _not_a_formula(
                text, f"unexpected {formula[position]!r} at character {position + 1}"
            )
        symbol_text, opening, closing, count_text = match.groups()
        if symbol_text is not None:
            if normalise_symbol(symbol_text) != symbol_text:
                raise _not_a_formula(text, f"{symbol_text!r} is not an element symbol")
            last_group = {symbol_text: 1.0}
            _add_counts(stack[-1], last_group)
        elif opening is not None:
            stack.append({})
            last_group = None
        elif closing is not None:
            if len(stack) == 1:
                raise _not_a_formula(text, f"unmatched ')' at character {position + 1}")
            inner = stack.pop()
            if not inner:
                raise _not_a_formula(text, f"empty parentheses at character {position + 1}")
            last_group = inner
            _add_counts(stack[-1], inner)
        else:
            count = float(count_text)
            if last_group is None:
                raise _not_a_formula(
                    text, f"count {count_text!r} at character {position + 1} follows no "
                    "element or group"
                )
            if count <= 0:
                raise _not_a_formula(text, f"count {count_text!r} is not positive")
            # The group was already added once; add the remaining (count - 1) times.
            _add_counts(stack[-1], {key: value * (count - 1) for key, value in
                                    last_group.items()})
            last_group = None
        position = match.end()
    if len(stack) != 1:
        raise _not_a_formula(text, "a '(' is never closed")
    return stack[0]


def _add_counts(target, addition):
    for symbol, count in addition.items():
        target[symbol] = target.get(symbol, 0.0) + count


def read_host_file(path):
    """Read a CSV that maps host labels to formulas.

    Parameters
    ----------
    path : str or Path
        CSV file with a header row containing the columns ``host`` and
        ``formula`` (other columns are ignored), e.g. a row ``diamond,C``.
        Blank lines and lines starting with ``#`` are skipped.

    Returns
    -------
    dict of str to dict of str to float
        Host label (blanks stripped) -> composition from :func:`parse_formula`.

    Raises
    ------
    TableError
        If the file cannot be read, lacks a column, has an empty cell, a
        formula that does not parse, or a label given twice with different
        formulas; the message names the file and line.
    """
    header_line, header, rows = read_host_rows(path, "host,formula")
    header = [cell.lower() for cell in header]
    for needed in ("host", "formula"):
        if needed not in header:
            raise TableError(
                f"header has no column {needed!r}; the first row must be 'host,formula'",
                path=path, line=header_line,
            )
    host_column, formula_column = header.index("host"), header.index("formula")
    mapping = {}
    formulas = {}
    for line_number, cells in rows:
        if len(cells) <= max(host_column, formula_column):
            raise TableError(
                f"expected {len(header)} columns, found {len(cells)}; give 'host,formula'",
                path=path, line=line_number,
            )
        label = cells[host_column].strip()
        formula = cells[formula_column].strip()
        if not label or not formula:
            raise TableError("empty host or formula cell; fill both", path=path,
                             line=line_number)
        try:
            composition = parse_formula(formula)
        except DopantgapError as error:
            raise TableError(f"formula of host {label!r}: {error}", path=path,
                             line=line_number) from None
        if label in mapping and formulas[label] != formula:
            raise TableError(
                f"host {label!r} is given twice with different formulas "
                f"({formulas[label]!r} and {formula!r}); keep one",
                path=path, line=line_number,
            )
        mapping[label] = composition
        formulas[label] = formula
    return mapping


def host_compositions(host_labels, host_file_map=None):
    """Composition of every host label.

    Parameters
    ----------
    host_labels : iterable of str
        Host labels as they appear in the user's table.
    host_file_map : dict or str or Path, optional
        Label -> composition as returned by :func:`read_host_file`, or the
        path of such a file. Labels found there win; the others must be
        formulas.

    Returns
    -------
    dict of str to dict of str to float
        Label -> composition (fresh dicts), in order of first appearance.

    Raises
    ------
    DopantgapError
        If a label is neither in the host file nor a formula.
    """
    if isinstance(host_file_map, (str, Path)):
        host_file_map = read_host_file(host_file_map)
    mapping = {str(label).strip(): composition
               for label, composition in (host_file_map or {}).items()}
    compositions = {}
    for label in host_labels:
        if label in compositions:
            continue
        key = str(label).strip()
        if key in mapping:
            compositions[label] = dict(mapping[key])
            continue
        try:
            compositions[label] = parse_formula(key)
        except DopantgapError as error:
            if host_file_map:
                raise DopantgapError(
                    f"{error}; the host file given does not list {key!r} either"
                ) from None
            raise
    return compositions
