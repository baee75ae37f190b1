"""Read and check the user's table of impurity energies.

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
* Host, site, method and quantity labels that differ only in letter case (``sub_s`` and
  ``sub_S``, ``GGA`` and ``gga``) are refused, naming both spellings and their lines: kept
  apart they would split one column of data in two. Host labels are chemical formulas read
  case-sensitively (``SI`` is sulphur and iodine, ``Si`` silicon); a host label that is an
  element symbol in the wrong case gets a notice saying how it is read.
* In the wide layout a column name without ``/`` is a note column; one that splits into
  four parts at blanks, ``\\``, ``|``, ``;`` or ``:`` (``MgO sub PBE E``) is refused
  as a misspelt value column instead of being copied as a note, and a note column holding
  only numbers gets a notice.

All problems are reported as one :class:`~dopantgap.errors.TableError` naming the file and
the line of the first problem in file order.
"""

import re
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.errors import TableError
from dopantgap.table.cells import CellRegister, is_number, parse_element, parse_key, parse_value
from dopantgap.table.columns import (
    KEY_COLUMNS,
    REQUIRED_COLUMNS,
    RESERVED_COLUMNS,
    WIDE_EXAMPLE,
    WIDE_PARTS,
    WIDE_SEPARATOR,
)
from dopantgap.table.files import text_records, workbook_records
from dopantgap.table.labels import check_label_case, host_case_notices

__all__ = ["read_table"]

_LAYOUTS = ("auto", "long", "wide")
_WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")
_OTHER_SEPARATORS = re.compile(r"[\s\\|;:]+")


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
        records = workbook_records(file_path, path_text, sheet)
        fixed_width = False
    else:
        if sheet is not None:
            raise TableError(
                f"a sheet ({sheet!r}) was asked for, but this is a text file, not a workbook; "
                "drop the sheet option or give the .xlsx file",
                path=path_text,
            )
        records = text_records(file_path, path_text)
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
    check_label_case(frame)
    frame.attrs["notices"] += host_case_notices(frame)
    return frame



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


def _misspelt_wide_parts(name):
    """Four parts of a name split at blanks, backslashes, bars, semicolons or colons, or None.

    ``MgO sub PBE E`` is a wide-layout column name typed with blanks instead of ``/``.
    """
    parts = [part for part in _OTHER_SEPARATORS.split(name.strip()) if part]
    return tuple(parts) if len(parts) == len(WIDE_PARTS) else None


def _wide_parts(name):
    """The four stripped parts of a wide column name, or None if it is not 4 non-empty parts."""
    if WIDE_SEPARATOR not in name:
        return None
    parts = tuple(part.strip() for part in name.split(WIDE_SEPARATOR))
    if len(parts) != len(WIDE_PARTS) or not all(parts):
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



def _read_long(header, records, path_text, fixed_width):
    missing = [name for name in REQUIRED_COLUMNS if name not in header.positions]
    if missing:
        misnamed = [name for name in header.named.values()
                    if (WIDE_SEPARATOR in name and _wide_parts(name) is None)
                    or (WIDE_SEPARATOR not in name and _misspelt_wide_parts(name) is not None)]
        hint = (
            f"; a wide table instead needs an 'element' column and columns named "
            f"host{WIDE_SEPARATOR}site{WIDE_SEPARATOR}method{WIDE_SEPARATOR}quantity, "
            f"for example {WIDE_EXAMPLE!r}"
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
    register = CellRegister(path_text)
    columns = {name: [] for name in REQUIRED_COLUMNS + tuple(extra_names)}
    lines = []
    for line, fields in records:
        _check_row_width(fields, header, line, path_text, fixed_width)
        fields = fields + [""] * (header.width - len(fields))
        element = parse_element(fields[header.positions["element"]], line, path_text)
        keys = [element] + [
            parse_key(fields[header.positions[column]], column, line, path_text, True)
            for column in WIDE_PARTS
        ]
        value = parse_value(fields[header.positions["value"]], "value", line, path_text)
        extras = {name: fields[header.positions[name]] for name in extra_names}
        if register.accept(tuple(keys), value, extras, line):
            _append_cell(columns, lines, tuple(keys), value, extras, line)
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
    _refuse_filled_wide(header, path_text)
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
                    f"quantity, for example {WIDE_EXAMPLE!r}; rename it "
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
            f"quantity, for example {WIDE_EXAMPLE!r}, or use the long layout with columns "
            f"{', '.join(REQUIRED_COLUMNS)}",
            path=path_text,
            line=header.line,
        )
    _check_wide_label_case(wide_columns, header, path_text)
    notices = _check_note_columns(extra_names, header, records, path_text)
    register = CellRegister(path_text)
    register.notices.extend(notices)
    columns = {name: [] for name in REQUIRED_COLUMNS + tuple(extra_names)}
    lines = []
    for line, fields in records:
        _check_row_width(fields, header, line, path_text, fixed_width)
        fields = fields + [""] * (header.width - len(fields))
        element = parse_element(fields[header.positions["element"]], line, path_text)
        extras = {name: fields[header.positions[name]] for name in extra_names}
        computed_here = 0
        for position, parts, name in wide_columns:
            if not fields[position].strip():
                continue  # empty cell: not computed
            computed_here += 1
            value = parse_value(fields[position], f"column {name!r}", line, path_text)
            key = (element,) + parts
            if register.accept(key, value, extras, line, context=f"{element} in {name!r}: "):
                _append_cell(columns, lines, key, value, extras, line)
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


# fill --format wide writes "host|site|method|quantity std" (and lo, hi, status) beside
# each value column; read back, its predictions would pass for computed values
_FILLED_COMPANIONS = ("std", "lo", "hi", "status")


def _refuse_filled_wide(header, path_text):
    for name in header.named.values():
        stem, _, kind = name.rpartition(" ")
        if kind in _FILLED_COMPANIONS and len(stem.split("|")) == len(WIDE_PARTS):
            raise TableError(
                f"column {name!r} marks a table filled by dopantgap (fill --format wide): read "
                f"back, its predicted values would count as computed ones; give the table of "
                f"your computed values, or the long filled table's rows whose status is 'computed'",
                path=path_text,
                line=header.line,
            )


def _check_wide_label_case(wide_columns, header, path_text):
    """Refuse wide column names whose parts differ from another's only in letter case."""
    for index, part_name in enumerate(WIDE_PARTS):
        first_spelling = {}
        for _position, parts, name in wide_columns:
            label = parts[index]
            earlier = first_spelling.setdefault(label.casefold(), (label, name))
            if earlier[0] != label:
                why = (" (host labels are chemical formulas, read case-sensitively: 'SI' "
                       "would be sulphur and iodine, 'Si' silicon)" if part_name == "host" else "")
                raise TableError(
                    f"columns {earlier[1]!r} and {name!r} spell the {part_name} "
                    f"{earlier[0]!r} and {label!r}, which differ only in letter case{why}; "
                    f"dopantgap would read them as two different {part_name}s: use one spelling",
                    path=path_text,
                    line=header.line,
                )


def _check_note_columns(extra_names, header, records, path_text):
    """Refuse a misspelt value column; notices for note columns that hold only numbers.

    In the wide layout a column whose name is not ``host/site/method/quantity`` is a note
    copied onto every row of the element; a value column whose name was typed with blanks
    (``MgO sub PBE E``) would otherwise be dropped from the data without a word.
    """
    notices = []
    for name in extra_names:
        position = header.positions[name]
        cells = [fields[position].strip() for _line, fields in records if position < len(fields)]
        cells = [cell for cell in cells if cell]
        if not cells or not all(is_number(cell) for cell in cells):
            continue
        parts = _misspelt_wide_parts(name)
        if parts is not None:
            raise TableError(
                f"column {name!r} holds numbers but its name is not a wide-layout name: "
                f"expected host{WIDE_SEPARATOR}site{WIDE_SEPARATOR}method{WIDE_SEPARATOR}"
                f"quantity separated by '{WIDE_SEPARATOR}', for example {WIDE_EXAMPLE!r}; "
                f"rename it {WIDE_SEPARATOR.join(parts)!r} if it holds energies, or without "
                f"blanks (for example {'_'.join(parts)!r}) if it is a note column",
                path=path_text,
                line=header.line,
            )
        notices.append(
            f"{path_text}:{header.line}: column {name!r} holds only numbers but is read as a "
            f"note column (copied onto each of the element's rows), not as energies; if it "
            f"holds energies, name it host{WIDE_SEPARATOR}site{WIDE_SEPARATOR}method"
            f"{WIDE_SEPARATOR}quantity, for example {WIDE_EXAMPLE!r}"
        )
    return notices


def _append_cell(columns, lines, key, value, extras, line):
    """Add one computed cell (its keys, value and the row's extra columns) to the columns."""
    for column, part in zip(KEY_COLUMNS, key):
        columns[column].append(part)
    columns["value"].append(value)
    for name, text in extras.items():
        columns[name].append(text)
    lines.append(line)


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
