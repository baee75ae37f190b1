"""Read, check, reshape, summarise and write the user's table of impurity energies.

The table holds DFT energies (in eV) of impurity elements, one value per cell. A cell is
named by five keys: the element, the host crystal, the lattice site, the method (level of
theory) and the quantity (for example a formation or binding energy).

Two layouts are read:

long
    one computed cell per row, with the columns ``element, host, site, method, quantity,
    value`` plus any extra columns the user keeps (notes, run folders ...).
wide
    one row per element, an ``element`` column and one column per cell kind named
    ``host/site/method/quantity``; an empty cell means "not computed". Extra columns whose
    names have no ``/`` are copied onto every long row of that element.

Decisions on the points left open by the module's contract:

* Only comma-delimited text is read. A file whose header row is split by semicolons or tabs
  (and holds no comma) is refused with a message to save it again with commas, rather than
  guessed: semicolon files usually come from spreadsheets set to a decimal comma, and a
  wrong guess there would silently misread numbers. The same holds for ``.tsv`` files.
* Text must be UTF-8 (a byte-order mark is accepted). Other encodings such as cp1252 are not
  guessed, because a wrong guess changes the text of element and host names without any
  error; the message names the line and the byte and says how to save as UTF-8.
* Rows whose fields are all blank (for example ``,,,,,`` left by a spreadsheet) are skipped;
  they still count for line numbers. A column with a blank header is accepted only while all
  its cells are blank; a non-blank cell under it is an error, so no user data is dropped.
* Column names starting with ``_`` are refused like the reserved names, because ``_file``
  and ``_line`` are added here and :func:`write_table` leaves out every ``_`` column.
* ``/`` is refused inside host, site, method and quantity of a long table, since
  :func:`to_wide` joins those four with ``/`` and the name would no longer split back.
* Workbooks are read with the values a spreadsheet program last saved; a formula cell with
  no saved value is an error (the file must be opened and saved once), never a silent blank.

All problems are reported as one :class:`~dopantgap.errors.TableError` naming the file and
the line of the first problem in file order.
"""

import csv
import hashlib
import importlib.util
import io
import json
import math
import re
import sqlite3
import warnings
import zipfile
from datetime import date, datetime, time
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.atomic import atomic_path
from dopantgap.errors import TableError
from dopantgap.symbols import SYMBOLS, normalise_symbol

__all__ = [
    "KEY_COLUMNS",
    "REQUIRED_COLUMNS",
    "RESERVED_COLUMNS",
    "MAX_ABS_VALUE",
    "WIDE_SEPARATOR",
    "read_table",
    "write_table",
    "to_wide",
    "coverage",
    "coverage_text",
    "table_hash",
    "PROVENANCE_COLUMN",
    "ORIGINAL_LABEL",
    "merge_results",
]

KEY_COLUMNS = ("element", "host", "site", "method", "quantity")
REQUIRED_COLUMNS = KEY_COLUMNS + ("value",)
RESERVED_COLUMNS = ("std", "lo", "hi", "status", "scenario")
MAX_ABS_VALUE = 1000.0  # eV
WIDE_SEPARATOR = "/"

_LAYOUTS = ("auto", "long", "wide")
_WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")
_WIDE_PARTS = KEY_COLUMNS[1:]  # host, site, method, quantity
_WIDE_EXAMPLE = "MgO/substitutional/PBE/formation_energy"
_HASH_PREFIX = "dopantgap-table-v1"

# A plain decimal number in ASCII digits. float() alone would also take "1_000", "nan",
# "infinity" and non-ASCII digits, none of which belong in a table of energies.
_NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
_DECIMAL_COMMA = re.compile(r"[+-]?[0-9]*,[0-9]+(?:[eE][+-]?[0-9]+)?")
_NUMBER_WITH_UNIT = re.compile(
    r"([+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?)\s*([A-Za-z/]+)"
)
_SYMBOL_WITH_SUFFIX = re.compile(r"([A-Za-z]{1,2})(?:[^A-Za-z].*)?")


# --------------------------------------------------------------------------- reading


def read_table(path, *, layout="auto", sheet=None):
    """Read and check a table of impurity energies.

    Parameters
    ----------
    path : str or Path
        A comma-delimited text file (``.csv``; ``.txt``/``.tsv`` are read the same way) or an
        Excel workbook (``.xlsx``/``.xlsm``).
    layout : {"auto", "long", "wide"}
        ``"auto"`` reads the wide layout when there is no ``value`` column and at least one
        column is named ``host/site/method/quantity``; otherwise the long layout.
    sheet : str or int, optional
        Workbook sheet, by name or 0-based position; default the first sheet. Only for
        workbooks.

    Returns
    -------
    pandas.DataFrame
        Long rows in file order with columns ``element, host, site, method, quantity``
        (stripped text; element symbols in canonical case), ``value`` (float64, eV), the
        extra columns as read (text, empty cell -> ``""``), ``_file`` (the path as given)
        and ``_line`` (1-based physical line, or spreadsheet row). ``attrs["notices"]`` is a
        list of one-line messages about things accepted but worth telling.

    Raises
    ------
    TableError
        For the first problem in file order, as ``path:line: message``.
    ValueError
        For a ``layout`` other than the three above (a programming error, not bad input).

    Examples
    --------
    >>> frame = read_table("energies.csv")  # doctest: +SKIP
    >>> frame[["element", "value"]].head()  # doctest: +SKIP
    """
    if layout not in _LAYOUTS:
        raise ValueError(f"layout must be one of {', '.join(_LAYOUTS)}, not {layout!r}")
    path_text = str(path)
    file_path = Path(path)
    if not file_path.exists():
        raise TableError(
            f"file not found (looked in {file_path.resolve().parent}); check the name and folder",
            path=path_text,
        )
    if file_path.is_dir():
        raise TableError("this is a folder, not a table file; give the .csv or .xlsx file inside it",
                         path=path_text)
    suffix = file_path.suffix.lower()
    if suffix == ".xls":
        raise TableError(
            "old Excel .xls workbooks are not read; save it as .xlsx or as CSV (comma-delimited, UTF-8)",
            path=path_text,
        )
    if suffix in _WORKBOOK_SUFFIXES:
        records = _workbook_records(file_path, path_text, sheet)
        fixed_width = False
    else:
        if sheet is not None:
            raise TableError(
                f"a sheet ({sheet!r}) was asked for, but this is a text file, not a workbook; "
                "drop the sheet option or give the .xlsx file",
                path=path_text,
            )
        records = _text_records(file_path, path_text)
        fixed_width = True

    header_line, header_cells = records[0]
    data_records = records[1:]
    if not data_records:
        raise TableError(
            "the file has a header row but no data rows; add one row per computed value "
            "(long layout) or per element (wide layout)",
            path=path_text,
            line=header_line,
        )
    header = _read_header(header_cells, header_line, path_text)
    if layout == "auto":
        has_wide_column = any(_wide_parts(name) is not None for name in header.named.values())
        layout = "wide" if ("value" not in header.positions and has_wide_column) else "long"
    if layout == "long":
        frame = _read_long(header, data_records, path_text, fixed_width)
    else:
        frame = _read_wide(header, data_records, path_text, fixed_width)
    return frame


def _text_records(file_path, path_text):
    """Decode a text file and split it into (line, fields) records, blank rows skipped."""
    try:
        raw = file_path.read_bytes()
    except OSError as error:
        raise TableError(f"cannot read the file ({error.strerror}); check its permissions",
                         path=path_text) from None
    if raw.startswith(b"PK\x03\x04"):
        raise TableError(
            "not a text file: this looks like an Excel workbook; give it the .xlsx extension "
            "or save it as CSV (comma-delimited, UTF-8)",
            path=path_text,
            line=1,
        )
    nul_position = raw.find(b"\x00")
    if nul_position >= 0:
        raise TableError(
            "not a text file: it contains NUL bytes (a binary file, or text saved as UTF-16); "
            "save the table as CSV (comma-delimited, UTF-8)",
            path=path_text,
            line=raw.count(b"\n", 0, nul_position) + 1,
        )
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        bad_byte = raw[error.start]
        raise TableError(
            f"not UTF-8 text: byte 0x{bad_byte:02X} cannot be decoded (the file was probably "
            "saved as cp1252/Latin-1); save it again as 'CSV UTF-8'",
            path=path_text,
            line=raw.count(b"\n", 0, error.start) + 1,
        ) from None
    if not text.strip():
        raise TableError(
            "the file is empty; expected a header row such as "
            "'element,host,site,method,quantity,value' followed by data rows",
            path=path_text,
            line=1,
        )
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    records = []
    while True:
        start_line = reader.line_num + 1
        try:
            fields = next(reader)
        except StopIteration:
            break
        except csv.Error as error:
            raise TableError(
                f"cannot split this row into fields ({error}); check for an unclosed or stray "
                'double quote: a field holding a comma or quote is written as "a, ""b"""',
                path=path_text,
                line=start_line,
            ) from None
        if all(not field.strip() for field in fields):
            continue
        if not records:
            _check_delimiter(fields, start_line, path_text)
        records.append((start_line, fields))
    return records


def _check_delimiter(header_fields, line, path_text):
    """Refuse a header row that is clearly split by semicolons or tabs instead of commas."""
    if len(header_fields) != 1:
        return
    for delimiter, name in ((";", "semicolons"), ("\t", "tabs")):
        if len(header_fields[0].split(delimiter)) >= 2:
            raise TableError(
                f"the header row is separated by {name}, not commas; use commas as the delimiter "
                "(in a spreadsheet: save as 'CSV UTF-8 (comma delimited)', with '.' as the "
                "decimal mark)",
                path=path_text,
                line=line,
            )


def _workbook_records(file_path, path_text, sheet):
    """Read one workbook sheet into (row number, text cells) records, blank rows skipped."""
    import openpyxl  # imported here: only workbook users pay for it

    def load(data_only):
        with warnings.catch_warnings():
            # openpyxl warns about workbook features it does not keep (validation, styles);
            # the cell values we read are not affected.
            warnings.simplefilter("ignore")
            return openpyxl.load_workbook(file_path, read_only=False, data_only=data_only)

    try:
        values_book = load(True)
        formulas_book = load(False)
    except (zipfile.BadZipFile, KeyError, OSError, ValueError, TypeError, IndexError,
            openpyxl.utils.exceptions.InvalidFileException) as error:
        raise TableError(
            f"cannot open as an Excel workbook ({type(error).__name__}: {error}); "
            "open it in a spreadsheet program and save it again as .xlsx, or save it as CSV",
            path=path_text,
        ) from None
    try:
        sheet_names = values_book.sheetnames
        if sheet is None:
            sheet_name = sheet_names[0]
        elif isinstance(sheet, int) and not isinstance(sheet, bool):
            if not 0 <= sheet < len(sheet_names):
                raise TableError(
                    f"sheet number {sheet} does not exist; the workbook has {len(sheet_names)} "
                    f"sheet(s) (numbered from 0): {', '.join(map(repr, sheet_names))}",
                    path=path_text,
                )
            sheet_name = sheet_names[sheet]
        else:
            if sheet not in sheet_names:
                raise TableError(
                    f"sheet {sheet!r} not found; the workbook has: "
                    f"{', '.join(map(repr, sheet_names))}",
                    path=path_text,
                )
            sheet_name = sheet
        value_rows = values_book[sheet_name].iter_rows(values_only=True)
        formula_rows = formulas_book[sheet_name].iter_rows(values_only=True)
        records = []
        for row_number, (values, formulas) in enumerate(zip(value_rows, formula_rows), start=1):
            cells = []
            for column_number, (value, formula) in enumerate(zip(values, formulas), start=1):
                if value is None and isinstance(formula, str) and formula.startswith("="):
                    letter = openpyxl.utils.get_column_letter(column_number)
                    raise TableError(
                        f"cell {letter}{row_number} holds the formula {formula!r} with no saved "
                        "result; open the workbook in a spreadsheet program and save it, or "
                        "paste the values instead of formulas",
                        path=path_text,
                        line=row_number,
                    )
                cells.append(_cell_text(value))
            if all(not cell.strip() for cell in cells):
                continue
            records.append((row_number, cells))
    finally:
        values_book.close()
        formulas_book.close()
    if not records:
        raise TableError(
            f"sheet {sheet_name!r} is empty; expected a header row such as "
            "'element, host, site, method, quantity, value' followed by data rows",
            path=path_text,
            line=1,
        )
    return records


def _cell_text(value):
    """Text of a workbook cell; floats as repr so the number reads back bit for bit."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (datetime, date, time)):
        return value.isoformat()
    return str(value)


class _Header:
    """Column positions found in the header row."""

    def __init__(self, line):
        self.line = line
        self.width = 0
        self.positions = {}  # canonical or extra name -> 0-based position
        self.named = {}  # 0-based position -> name, for every named column
        self.blank = []  # positions of columns with a blank name
        self.raw = []  # names as written, for messages


def _read_header(cells, line, path_text):
    header = _Header(line)
    # Workbooks report every column up to the sheet's last used one; trailing unnamed
    # columns there are checked like blank-named columns in text files.
    header.width = len(cells)
    header.raw = list(cells)
    for position, raw_name in enumerate(cells):
        stripped = raw_name.strip()
        if not stripped:
            header.blank.append(position)
            continue
        lowered = stripped.lower()
        if lowered in RESERVED_COLUMNS or stripped.startswith("_"):
            why = ("dopantgap adds a column of that name to its outputs"
                   if lowered in RESERVED_COLUMNS else
                   "names starting with '_' are kept for dopantgap's own bookkeeping")
            raise TableError(
                f"column {position + 1} is named {raw_name!r}, a reserved name ({why}); "
                f"rename it, for example to 'user_{stripped.lstrip('_')}'",
                path=path_text,
                line=line,
            )
        name = lowered if lowered in REQUIRED_COLUMNS else raw_name
        if name in header.positions:
            first = header.positions[name] + 1
            raise TableError(
                f"columns {first} and {position + 1} are both named {name!r}; "
                "give each column its own name",
                path=path_text,
                line=line,
            )
        header.positions[name] = position
        header.named[position] = name
    return header


def _wide_parts(name):
    """The four stripped parts of a wide column name, or None if it is not 4 non-empty parts."""
    if WIDE_SEPARATOR not in name:
        return None
    parts = tuple(part.strip() for part in name.split(WIDE_SEPARATOR))
    if len(parts) != len(_WIDE_PARTS) or not all(parts):
        return None
    return parts


def _found_columns(header):
    return ", ".join(repr(name) for name in header.raw if name.strip()) or "none"


def _check_row_width(fields, header, line, path_text, fixed_width):
    """Check the field count and that no data sits under an unnamed column."""
    if fixed_width and len(fields) != header.width:
        raise TableError(
            f"this row has {len(fields)} fields but the header has {header.width}; "
            "check for a missing field or an unquoted comma (a decimal comma such as 1,5 "
            "must be written 1.5; text holding a comma goes in double quotes)",
            path=path_text,
            line=line,
        )
    for position in header.blank + list(range(header.width, len(fields))):
        if position < len(fields) and fields[position].strip():
            raise TableError(
                f"column {position + 1} has no name in the header but holds "
                f"{fields[position]!r} here; give the column a name or clear it",
                path=path_text,
                line=line,
            )


def _parse_element(text, line, path_text):
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
    if lowered.isdigit() and 1 <= int(lowered) <= len(SYMBOLS):
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


def _parse_key(text, column, line, path_text, layout_is_long):
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


def _parse_value(text, where, line, path_text):
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


class _CellRegister:
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
        described = ", ".join(key)
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


def _read_long(header, records, path_text, fixed_width):
    missing = [name for name in REQUIRED_COLUMNS if name not in header.positions]
    if missing:
        misnamed = [name for name in header.named.values()
                    if WIDE_SEPARATOR in name and _wide_parts(name) is None]
        hint = (
            f"; a wide table instead needs an 'element' column and columns named "
            f"host{WIDE_SEPARATOR}site{WIDE_SEPARATOR}method{WIDE_SEPARATOR}quantity, "
            f"for example {_WIDE_EXAMPLE!r}"
        )
        if misnamed:
            hint += (f" (column {misnamed[0]!r} is not 4 non-empty parts separated by "
                     f"'{WIDE_SEPARATOR}')")
        raise TableError(
            f"missing required column(s) {', '.join(map(repr, missing))}; found columns: "
            f"{_found_columns(header)}; a long table needs {', '.join(REQUIRED_COLUMNS)}" + hint,
            path=path_text,
            line=header.line,
        )
    extra_names = [name for position, name in sorted(header.named.items())
                   if name not in REQUIRED_COLUMNS]
    register = _CellRegister(path_text)
    columns = {name: [] for name in REQUIRED_COLUMNS + tuple(extra_names)}
    lines = []
    for line, fields in records:
        _check_row_width(fields, header, line, path_text, fixed_width)
        fields = fields + [""] * (header.width - len(fields))
        element = _parse_element(fields[header.positions["element"]], line, path_text)
        keys = [element] + [
            _parse_key(fields[header.positions[column]], column, line, path_text, True)
            for column in _WIDE_PARTS
        ]
        value = _parse_value(fields[header.positions["value"]], "value", line, path_text)
        extras = {name: fields[header.positions[name]] for name in extra_names}
        if not register.accept(tuple(keys), value, extras, line):
            continue
        for column, key in zip(KEY_COLUMNS, keys):
            columns[column].append(key)
        columns["value"].append(value)
        for name in extra_names:
            columns[name].append(extras[name])
        lines.append(line)
    return _assemble(columns, extra_names, lines, path_text, register.notices)


def _read_wide(header, records, path_text, fixed_width):
    if "element" not in header.positions:
        raise TableError(
            f"missing required column 'element'; found columns: {_found_columns(header)}; "
            f"a wide table needs an 'element' column and columns named "
            f"host{WIDE_SEPARATOR}site{WIDE_SEPARATOR}method{WIDE_SEPARATOR}quantity",
            path=path_text,
            line=header.line,
        )
    wide_columns = []  # (position, parts, name)
    extra_names = []
    seen_parts = {}
    for position, name in sorted(header.named.items()):
        if name == "element":
            continue
        if WIDE_SEPARATOR in name:
            parts = _wide_parts(name)
            if parts is None:
                raise TableError(
                    f"column {name!r} is not a wide-layout name: expected exactly 4 non-empty "
                    f"parts host{WIDE_SEPARATOR}site{WIDE_SEPARATOR}method{WIDE_SEPARATOR}"
                    f"quantity, for example {_WIDE_EXAMPLE!r}; rename it "
                    f"(or remove '{WIDE_SEPARATOR}' if it is a note column)",
                    path=path_text,
                    line=header.line,
                )
            if parts in seen_parts:
                raise TableError(
                    f"columns {seen_parts[parts]!r} and {name!r} name the same "
                    f"host/site/method/quantity; merge them into one column",
                    path=path_text,
                    line=header.line,
                )
            seen_parts[parts] = name
            wide_columns.append((position, parts, name))
        elif name in REQUIRED_COLUMNS:
            raise TableError(
                f"column {name!r} does not belong in a wide table, whose host, site, method "
                f"and quantity come from the column names and whose values fill the cells; "
                f"use the long layout (columns {', '.join(REQUIRED_COLUMNS)}) or remove it",
                path=path_text,
                line=header.line,
            )
        else:
            extra_names.append(name)
    if not wide_columns:
        raise TableError(
            f"no wide-layout column found; found columns: {_found_columns(header)}; name each "
            f"value column host{WIDE_SEPARATOR}site{WIDE_SEPARATOR}method{WIDE_SEPARATOR}"
            f"quantity, for example {_WIDE_EXAMPLE!r}, or use the long layout with columns "
            f"{', '.join(REQUIRED_COLUMNS)}",
            path=path_text,
            line=header.line,
        )
    register = _CellRegister(path_text)
    columns = {name: [] for name in REQUIRED_COLUMNS + tuple(extra_names)}
    lines = []
    for line, fields in records:
        _check_row_width(fields, header, line, path_text, fixed_width)
        fields = fields + [""] * (header.width - len(fields))
        element = _parse_element(fields[header.positions["element"]], line, path_text)
        extras = {name: fields[header.positions[name]] for name in extra_names}
        computed_here = 0
        for position, parts, name in wide_columns:
            if not fields[position].strip():
                continue  # empty cell: not computed
            computed_here += 1
            value = _parse_value(fields[position], f"column {name!r}", line, path_text)
            key = (element,) + parts
            if not register.accept(key, value, extras, line, context=f"{element} in {name!r}: "):
                continue
            for column, part in zip(KEY_COLUMNS, key):
                columns[column].append(part)
            columns["value"].append(value)
            for extra in extra_names:
                columns[extra].append(extras[extra])
            lines.append(line)
        if computed_here == 0:
            register.notices.append(
                f"{path_text}:{line}: {element} has no computed cells; nothing read from this row"
            )
    if not lines:
        raise TableError(
            "the wide table has element rows but not one computed cell; fill in at least one "
            "value",
            path=path_text,
            line=header.line,
        )
    return _assemble(columns, extra_names, lines, path_text, register.notices)


def _assemble(columns, extra_names, lines, path_text, notices):
    data = {}
    for column in KEY_COLUMNS:
        data[column] = pd.Series(columns[column], dtype=str)
    data["value"] = pd.Series(np.asarray(columns["value"], dtype=np.float64))
    for name in extra_names:
        data[name] = pd.Series(columns[name], dtype=str)
    data["_file"] = pd.Series([path_text] * len(lines), dtype=str)
    data["_line"] = pd.Series(np.asarray(lines, dtype=np.int64))
    frame = pd.DataFrame(data)
    frame.attrs["notices"] = list(notices)
    return frame


# --------------------------------------------------------------------------- writing


def write_table(frame, path):
    """Write a table as UTF-8 CSV with ``\\n`` line ends, atomically.

    Columns whose names start with ``_`` (``_file``, ``_line``) are left out. Floats are
    written in their shortest exact form, so reading the file back gives the same numbers
    bit for bit.

    Parameters
    ----------
    frame : pandas.DataFrame
        Table to write; it is not changed.
    path : str or Path
        Target file; its folder is created if needed. An interrupted write leaves any
        earlier file at ``path`` untouched.
    """
    kept = [name for name in frame.columns if not str(name).startswith("_")]
    with atomic_path(path) as temporary:
        frame.loc[:, kept].to_csv(
            temporary, index=False, encoding="utf-8", lineterminator="\n"
        )


# --------------------------------------------------------------------------- reshaping


def _column_names(frame):
    """Wide column names ``host/site/method/quantity`` of each row."""
    return (
        frame["host"].astype(str) + WIDE_SEPARATOR + frame["site"].astype(str) + WIDE_SEPARATOR
        + frame["method"].astype(str) + WIDE_SEPARATOR + frame["quantity"].astype(str)
    )


def _check_unique_cells(frame):
    repeated = frame.duplicated(list(KEY_COLUMNS), keep="first")
    if repeated.any():
        row = frame[repeated].iloc[0]
        where = {}
        if "_file" in frame.columns and "_line" in frame.columns:
            where = {"path": row["_file"], "line": int(row["_line"])}
        described = ", ".join(str(row[column]) for column in KEY_COLUMNS)
        raise TableError(f"cell ({described}) appears more than once; keep one row per cell",
                         **where)


def to_wide(frame):
    """One row per element, one column per ``host/site/method/quantity``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table as returned by :func:`read_table`.

    Returns
    -------
    pandas.DataFrame
        Index ``element`` (order of first appearance), columns ``host/site/method/quantity``
        (order of first appearance), float64 values, NaN where not computed.
    """
    _check_unique_cells(frame)
    names = _column_names(frame)
    elements = list(dict.fromkeys(frame["element"]))
    column_order = list(dict.fromkeys(names))
    long = pd.DataFrame({
        "element": frame["element"].to_numpy(dtype=object),
        "column": names.to_numpy(dtype=object),
        "value": frame["value"].to_numpy(dtype=np.float64),
    })
    wide = long.pivot(index="element", columns="column", values="value")
    wide = wide.reindex(index=elements, columns=column_order).astype(np.float64)
    wide.index.name = "element"
    wide.columns.name = None
    return wide


def coverage(frame):
    """How many elements are computed in each ``host/site/method/quantity`` column.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table as returned by :func:`read_table`.

    Returns
    -------
    pandas.DataFrame
        One row per column in order of first appearance, with ``host, site, method,
        quantity, column`` (the joined name), ``n_elements_computed``, ``n_elements`` (all
        elements of the table) and ``fraction_computed``. ``attrs["totals"]`` holds
        ``n_rows, n_elements, n_columns, n_cells`` (elements x columns), ``n_computed`` and
        ``fraction_computed`` (NaN for an empty table).
    """
    n_elements = int(frame["element"].nunique())
    grouped = frame.groupby(list(_WIDE_PARTS), sort=False)["element"].nunique()
    rows = []
    for parts, n_computed in grouped.items():
        rows.append({
            **dict(zip(_WIDE_PARTS, parts)),
            "column": WIDE_SEPARATOR.join(parts),
            "n_elements_computed": int(n_computed),
        })
    result = pd.DataFrame(rows, columns=list(_WIDE_PARTS) + ["column", "n_elements_computed"])
    for name in list(_WIDE_PARTS) + ["column"]:
        result[name] = result[name].astype(str)
    result["n_elements_computed"] = result["n_elements_computed"].astype(np.int64)
    result["n_elements"] = np.int64(n_elements)
    result["fraction_computed"] = (
        result["n_elements_computed"].to_numpy(dtype=np.float64) / n_elements
        if n_elements else np.full(len(result), np.nan)
    )
    n_columns = len(result)
    n_cells = n_elements * n_columns
    n_computed = int(result["n_elements_computed"].sum())
    result.attrs["totals"] = {
        "n_rows": int(len(frame)),
        "n_elements": n_elements,
        "n_columns": n_columns,
        "n_cells": n_cells,
        "n_computed": n_computed,
        "fraction_computed": n_computed / n_cells if n_cells else float("nan"),
    }
    return result


def _percent(part, whole):
    return f"{100.0 * part / whole:.1f} %" if whole else "n/a"


def coverage_text(frame):
    """Plain-text summary of a table's coverage, for the ``check`` command.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table as returned by :func:`read_table`.

    Returns
    -------
    str
        A few counts (rows, elements, columns, computed cells out of elements x columns)
        followed by an aligned table of computed cells per host / site / method / quantity.
        Lines end with ``\\n``.
    """
    table = coverage(frame)
    totals = table.attrs["totals"]
    counts = [
        ("rows read", f"{totals['n_rows']}"),
        ("elements", f"{totals['n_elements']}"),
        ("columns (host/site/method/quantity)", f"{totals['n_columns']}"),
        ("computed cells",
         f"{totals['n_computed']} of {totals['n_cells']} "
         f"({_percent(totals['n_computed'], totals['n_cells'])})"),
    ]
    label_width = max(len(label) for label, _ in counts)
    lines = [f"{label.ljust(label_width)}  {value}" for label, value in counts]
    if len(table):
        headings = ["host", "site", "method", "quantity", "elements computed", "share"]
        body = [
            [row.host, row.site, row.method, row.quantity,
             f"{row.n_elements_computed} of {row.n_elements}",
             _percent(row.n_elements_computed, row.n_elements)]
            for row in table.itertuples(index=False)
        ]
        widths = [max(len(heading), *(len(cells[i]) for cells in body))
                  for i, heading in enumerate(headings)]
        numeric = {4, 5}  # counts read best right-aligned

        def render(cells):
            padded = [cell.rjust(widths[i]) if i in numeric else cell.ljust(widths[i])
                      for i, cell in enumerate(cells)]
            return ("  " + "   ".join(padded)).rstrip()

        lines += ["", "computed cells per host / site / method / quantity:",
                  render(headings)]
        lines += [render(cells) for cells in body]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- identity


def table_hash(frame):
    """SHA-256 of the table's data, independent of row order and of extra columns.

    Parameters
    ----------
    frame : pandas.DataFrame
        Table with at least the six required columns.

    Returns
    -------
    str
        64 hexadecimal digits. Values enter as exact binary floats (``float.hex``), with
        ``-0.0`` taken as ``0.0``; text enters as the exact strings.
    """
    rows = sorted(
        [str(element), str(host), str(site), str(method), str(quantity),
         (float(value) + 0.0).hex()]
        for element, host, site, method, quantity, value in zip(
            *(frame[column] for column in REQUIRED_COLUMNS)
        )
    )
    # JSON quoting keeps the fields apart whatever characters they hold.
    canonical = json.dumps([_HASH_PREFIX, list(REQUIRED_COLUMNS), rows],
                           ensure_ascii=True, separators=(",", ":"))
    return hashlib.sha256(canonical.encode("ascii")).hexdigest()


# --------------------------------------------------------------------------- merging


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
        described = ", ".join(key)
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
