"""Reading a table file into rows of text: CSV text files and Excel workbooks.

A file becomes a list of ``(line, fields)`` records, the header row first, rows whose
fields are all blank left out (they still count for line numbers). Nothing here knows
what the columns mean; :mod:`dopantgap.table.reading` does.
"""

import csv
import io
import warnings
import zipfile
from datetime import date, datetime, time

from dopantgap.errors import TableError

__all__ = ["text_records", "workbook_records"]


def text_records(file_path, path_text):
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
        # the positions count in error.object, which lacks the byte-order mark if any
        bad_byte = error.object[error.start]
        raise TableError(
            f"not UTF-8 text: byte 0x{bad_byte:02X} cannot be decoded (the file was probably "
            "saved as cp1252/Latin-1); save it again as 'CSV UTF-8'",
            path=path_text,
            line=error.object.count(b"\n", 0, error.start) + 1,
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
    if not records:
        raise TableError(
            "every row of the file is blank (only commas or spaces); expected a header row "
            "such as 'element,host,site,method,quantity,value' followed by data rows",
            path=path_text,
            line=1,
        )
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


def workbook_records(file_path, path_text, sheet):
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
