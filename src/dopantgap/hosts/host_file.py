"""The host file as rows: read once, comments and blank lines skipped, line numbers kept."""

import csv
from pathlib import Path

from dopantgap.errors import TableError

__all__ = ["read_host_rows"]


def read_host_rows(path, example_header):
    """The header and data rows of a host file (CSV), each with its line number.

    Parameters
    ----------
    path : str or Path
    example_header : str
        A header to suggest when the file is empty (e.g. ``"host,formula"``).

    Returns
    -------
    header_line : int
    header : list of str
        The header's cells, blanks stripped (letter case kept).
    rows : list of (int, list of str)
        Every later non-blank line that does not start with ``#``: its number and cells.

    Raises
    ------
    TableError
        For a file that is missing, unreadable or holds no header.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise TableError("host file not found; check the path", path=path) from None
    except (OSError, UnicodeDecodeError) as error:
        raise TableError(f"cannot read the host file ({error}); save it as UTF-8 CSV", path=path) from None
    lines = [
        (number, line) for number, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not lines:
        raise TableError(f"host file is empty; give a header such as '{example_header}' and rows", path=path)
    cells = list(csv.reader(line for _, line in lines))
    header = [cell.strip() for cell in cells[0]]
    return lines[0][0], header, [(number, row) for (number, _), row in zip(lines[1:], cells[1:])]
