"""Writing a table (or any output frame) as CSV or as an Excel workbook, read back bit for bit."""

import math
from pathlib import Path

import numpy as np

from dopantgap.atomic import atomic_path
from dopantgap.errors import DopantgapError

__all__ = ["OUTPUT_SUFFIXES", "check_output_suffix", "write_table", "write_workbook"]

#: File types an output table can be written as: comma-separated text and Excel workbooks.
OUTPUT_SUFFIXES = (".csv", ".xlsx")


def check_output_suffix(path, option="--out"):
    """The suffix of an output file, refused in one line unless it is ``.csv`` or ``.xlsx``.

    Parameters
    ----------
    path : str or Path
    option : str, default="--out"
        Named in the message.

    Returns
    -------
    str
        ``".csv"`` or ``".xlsx"`` (lower case).

    Raises
    ------
    DopantgapError
        For any other suffix (``.xls``, ``.ods``, ``.tsv``, none ...).
    """
    suffix = Path(path).suffix.lower()
    if suffix not in OUTPUT_SUFFIXES:
        shown = f"'{suffix}'" if suffix else "no file type"
        raise DopantgapError(
            f"{option} {path}: {shown} is not a table format dopantgap writes; end the name in "
            f".csv (comma-separated text) or .xlsx (Excel workbook)."
        )
    return suffix


def _kept_columns(frame):
    return [name for name in frame.columns if not str(name).startswith("_")]


def write_table(frame, path):
    """Write a table as UTF-8 CSV with ``\\n`` line ends, or as a workbook, atomically.

    Columns whose names start with ``_`` (``_file``, ``_line``) are left out. Floats are
    written in their shortest exact form, so reading the file back gives the same numbers
    bit for bit. A path ending in ``.xlsx`` is written by :func:`write_workbook`; any
    other as CSV.

    Parameters
    ----------
    frame : pandas.DataFrame
        Table to write; it is not changed.
    path : str or Path
        Target file; its folder is created if needed. An interrupted write leaves any
        earlier file at ``path`` untouched.
    """
    if Path(path).suffix.lower() == ".xlsx":
        write_workbook(frame, path)
        return
    kept = _kept_columns(frame)
    with atomic_path(path) as temporary:
        frame.loc[:, kept].to_csv(
            temporary, index=False, encoding="utf-8", lineterminator="\n"
        )


def _workbook_value(value):
    """A cell value openpyxl stores as it is: None for missing, plain Python scalars."""
    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return None if math.isnan(value) else float(value)
    return str(value)


def _workbook_cell(sheet, value):
    from openpyxl.cell import WriteOnlyCell

    value = _workbook_value(value)
    if isinstance(value, float) and math.isfinite(value):
        # openpyxl writes floats with 16 significant digits ("%.16g"), which loses the last
        # bit of some (0.1 + 0.2); the shortest exact form, stored as a number, keeps it
        cell = WriteOnlyCell(sheet, value=repr(value))
        cell.data_type = "n"
        return cell
    if isinstance(value, float):
        value = repr(value)  # inf or -inf: a workbook has no such number, so as text
    cell = WriteOnlyCell(sheet, value=value)
    if isinstance(value, str):
        cell.data_type = "s"  # text stays text, even '=...'
    return cell


def write_workbook(frame, path, sheet_name="table"):
    """Write a table as a one-sheet Excel workbook (``.xlsx``), atomically.

    Numbers are stored as numbers (floats in their shortest exact form, so the reader gets
    them back bit for bit), missing values as empty cells, and text always as text: a
    label starting with ``=`` is never turned into a formula. Columns whose names start
    with ``_`` are left out, as in :func:`write_table`.

    Parameters
    ----------
    frame : pandas.DataFrame
        Table to write; it is not changed.
    path : str or Path
        Target file; its folder is created if needed.
    sheet_name : str, default="table"

    Raises
    ------
    DopantgapError
        If a text holds a character a workbook cannot store (a control character).
    """
    import openpyxl  # imported here: only workbook users pay for it
    from openpyxl.utils.exceptions import IllegalCharacterError

    kept = _kept_columns(frame)
    book = openpyxl.Workbook(write_only=True)
    sheet = book.create_sheet(sheet_name)

    def row_of(values):
        return [_workbook_cell(sheet, value) for value in values]

    try:
        sheet.append(row_of(kept))
        for values in frame.loc[:, kept].itertuples(index=False, name=None):
            sheet.append(row_of(values))
    except IllegalCharacterError:
        raise DopantgapError(
            f"{path}: a label or note holds a control character, which an Excel workbook cannot "
            f"store; write a .csv file instead."
        ) from None
    with atomic_path(path) as temporary:
        book.save(temporary)
