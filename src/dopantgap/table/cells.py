"""Reading one cell of a table: element symbols, key labels and energies.

Every function here refuses what it cannot read with a one-line
:class:`~dopantgap.errors.TableError` naming the file and line.
"""

import importlib.util
import math
import re
import sqlite3
from pathlib import Path

from dopantgap.errors import TableError
from dopantgap.symbols import SYMBOLS, normalise_symbol
from dopantgap.table.columns import MAX_ABS_VALUE, WIDE_SEPARATOR, shown

__all__ = ["CellRegister", "is_number", "parse_element", "parse_key", "parse_value"]

# A plain decimal number in ASCII digits. float() alone would also take "1_000", "nan",
# "infinity" and non-ASCII digits, none of which belong in a table of energies.
_NUMBER = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
_DECIMAL_COMMA = re.compile(r"[+-]?[0-9]*,[0-9]+(?:[eE][+-]?[0-9]+)?")
_NUMBER_WITH_UNIT = re.compile(
    r"([+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?)\s*([A-Za-z/]+)"
)
_SYMBOL_WITH_SUFFIX = re.compile(r"([A-Za-z]{1,2})(?:[^A-Za-z].*)?")


def is_number(text):
    """True if ``text`` (stripped) is a plain decimal number as :func:`parse_value` reads it."""
    return _NUMBER.fullmatch(text.strip()) is not None


def parse_element(text, line, path_text):
    """Canonical symbol of an element cell (``fe`` -> ``Fe``); refuses blanks and unknowns."""
    stripped = text.strip()
    if not stripped:
        raise TableError(
            "the element is blank; expected a chemical symbol such as Fe; fill it in or "
            "remove the row",
            path=path_text,
            line=line,
        )
    symbol = normalise_symbol(stripped)
    if symbol is None:
        hint = _symbol_suggestion(stripped)
        raise TableError(
            f"unknown element {stripped!r}; expected a chemical symbol such as Fe or W"
            + (f"; did you mean {hint}?" if hint else "; correct the symbol"),
            path=path_text,
            line=line,
        )
    return symbol


def _symbol_suggestion(text):
    """Likely intended symbol(s) for a text that is not a symbol, as a phrase, or ''."""
    lowered = text.lower()
    # isdigit() alone takes superscripts and other scripts' digits, which int() refuses
    if lowered.isascii() and lowered.isdigit() and len(lowered) <= 3 and 1 <= int(lowered) <= len(SYMBOLS):
        return f"{SYMBOLS[int(lowered) - 1]} (element number {int(lowered)})"
    by_name = _symbols_by_name()
    if lowered in by_name:
        return by_name[lowered]
    with_suffix = _SYMBOL_WITH_SUFFIX.fullmatch(text)
    if with_suffix and len(text) > len(with_suffix.group(1)):
        symbol = normalise_symbol(with_suffix.group(1))
        if symbol is not None:
            return f"{symbol} (the element column holds the symbol only)"
    close = [symbol for symbol in SYMBOLS if _edit_distance(lowered, symbol.lower()) == 1]
    # Many candidates (e.g. for a single wrong letter) is not a suggestion but a guess.
    if 1 <= len(close) <= 3:
        return " or ".join(close)
    return ""


def _edit_distance(first, second):
    """Optimal string alignment distance (insertions, deletions, substitutions, swaps)."""
    previous_previous = None
    previous = list(range(len(second) + 1))
    for i, first_char in enumerate(first, start=1):
        current = [i] + [0] * len(second)
        for j, second_char in enumerate(second, start=1):
            cost = 0 if first_char == second_char else 1
            current[j] = min(previous[j] + 1, current[j - 1] + 1, previous[j - 1] + cost)
            if (previous_previous is not None and i > 1 and j > 1
                    and first_char == second[j - 2] and first[i - 2] == second_char):
                current[j] = min(current[j], previous_previous[j - 2] + 1)
        previous_previous, previous = previous, current
    return previous[-1]


_NAME_CACHE = {}


def _symbols_by_name():
    """English element names (lower case) -> symbol, from mendeleev's bundled database.

    Only used to word a suggestion, so a missing or unreadable database gives no names
    rather than an error.
    """
    if "names" not in _NAME_CACHE:
        names = {}
        try:
            spec = importlib.util.find_spec("mendeleev")  # finds the folder without importing
            folder = list(spec.submodule_search_locations)[0]
            database = Path(folder) / "elements.db"
            connection = sqlite3.connect(f"{database.as_uri()}?mode=ro", uri=True)
            try:
                for symbol, name in connection.execute("SELECT symbol, name FROM elements"):
                    if symbol in SYMBOLS and name:
                        names[name.lower()] = symbol
            finally:
                connection.close()
        except (AttributeError, ImportError, IndexError, TypeError, OSError, sqlite3.Error):
            names = {}
        _NAME_CACHE["names"] = names
    return _NAME_CACHE["names"]


def parse_key(text, column, line, path_text, layout_is_long):
    """Stripped text of a host, site, method or quantity cell; refuses blanks (and ``/``)."""
    stripped = text.strip()
    if not stripped:
        raise TableError(
            f"{column} is blank; every computed value needs element, host, site, method and "
            f"quantity; fill in the {column} or remove the row",
            path=path_text,
            line=line,
        )
    if layout_is_long and WIDE_SEPARATOR in stripped:
        raise TableError(
            f"{column} {stripped!r} contains '{WIDE_SEPARATOR}', which dopantgap uses to join "
            "host/site/method/quantity into wide column names; use another character such as '-'",
            path=path_text,
            line=line,
        )
    return stripped


def parse_value(text, where, line, path_text):
    """Float of a cell's text, refusing anything that is not a finite energy in eV."""
    stripped = text.strip()
    if not stripped:
        raise TableError(
            f"{where} is blank; a long table lists computed values only: fill it in or "
            "remove the row",
            path=path_text,
            line=line,
        )
    if _NUMBER.fullmatch(stripped):
        number = float(stripped)
        if not math.isfinite(number):
            raise TableError(
                f"{where} {stripped!r} overflows to infinity; expected a finite energy in eV",
                path=path_text,
                line=line,
            )
        if abs(number) > MAX_ABS_VALUE:
            raise TableError(
                f"{where} {stripped!r} has an absurd magnitude (|value| > {MAX_ABS_VALUE:g}): "
                "is it in meV or J? dopantgap expects eV; convert it",
                path=path_text,
                line=line,
            )
        return number
    if _DECIMAL_COMMA.fullmatch(stripped):
        raise TableError(
            f"{where} {stripped!r} uses a decimal comma; write it with a decimal point "
            f"({stripped.replace(',', '.')})",
            path=path_text,
            line=line,
        )
    try:
        special = float(stripped)
    except ValueError:
        special = None
    if special is not None and not math.isfinite(special):
        raise TableError(
            f"{where} is {stripped!r}, not a finite number; a value that was not computed is "
            "left out (long layout: remove the row; wide layout: leave the cell empty)",
            path=path_text,
            line=line,
        )
    with_unit = _NUMBER_WITH_UNIT.fullmatch(stripped)
    if with_unit:
        raise TableError(
            f"{where} {stripped!r} is not a plain number; write the number only "
            f"({with_unit.group(1)}), in eV",
            path=path_text,
            line=line,
        )
    raise TableError(
        f"{where} {stripped!r} is not a number; expected an energy in eV such as -1.25",
        path=path_text,
        line=line,
    )


class CellRegister:
    """Finds duplicate cells: merges exact ones with a notice, refuses conflicting ones."""

    def __init__(self, path_text):
        self.path_text = path_text
        self.first_seen = {}  # key -> (line, value, extras)
        self.notices = []

    def accept(self, key, value, extras, line, context=""):
        """Return True if the cell is new; False if it repeats an earlier identical cell."""
        if key not in self.first_seen:
            self.first_seen[key] = (line, value, extras)
            return True
        first_line, first_value, first_extras = self.first_seen[key]
        described = ", ".join(shown(part) for part in key)
        if value != first_value:
            raise TableError(
                f"{context}conflicting duplicate: ({described}) is {value!r} here but "
                f"{first_value!r} on line {first_line}; keep one of the two lines",
                path=self.path_text,
                line=line,
            )
        notice = (
            f"{self.path_text}:{line}: {context}same as line {first_line} (element, host, site, "
            f"method, quantity and value); kept line {first_line}"
        )
        differing = [name for name in extras if extras[name] != first_extras.get(name)]
        if differing:
            notice += (
                f"; its other column(s) {', '.join(map(repr, differing))} differ and the text "
                f"of line {first_line} was kept"
            )
        self.notices.append(notice)
        return False
