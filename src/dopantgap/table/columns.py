"""The column names of a table and of dopantgap's outputs, and how labels are shown."""

import unicodedata

__all__ = [
    "KEY_COLUMNS",
    "MAX_ABS_VALUE",
    "REQUIRED_COLUMNS",
    "RESERVED_COLUMNS",
    "WIDE_SEPARATOR",
    "shown",
]

KEY_COLUMNS = ("element", "host", "site", "method", "quantity")
REQUIRED_COLUMNS = KEY_COLUMNS + ("value",)
#: Names dopantgap adds to its outputs (the filled table of ``fill``); a user column of
#: the same name would collide with them, so the reader refuses it. A test keeps this
#: list in step with ``fill.FILLED_COLUMNS``.
RESERVED_COLUMNS = (
    "std", "lo", "hi", "status", "scenario", "domain_distance", "outside_domain", "caution",
)
MAX_ABS_VALUE = 1000.0  # eV
WIDE_SEPARATOR = "/"

WIDE_PARTS = KEY_COLUMNS[1:]  # host, site, method, quantity
WIDE_EXAMPLE = "MgO/substitutional/PBE/formation_energy"
#: Columns the reader adds to every row: the file and the 1-based line it came from.
LOCATION_COLUMNS = ("_file", "_line")

_ESCAPES = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def shown(text):
    """``text`` with control and invisible formatting characters escaped, for printing.

    A label holding an ANSI escape or a newline would otherwise rewrite the terminal
    or split a line of ``check``'s output. Letters of any script are kept as they are.

    Parameters
    ----------
    text : object
        Converted with ``str``.

    Returns
    -------
    str

    Examples
    --------
    >>> shown("sub\\x1b[31mMg\\n")
    'sub\\\\x1b[31mMg\\\\n'
    """
    pieces = []
    for character in str(text):
        if character in _ESCAPES:
            pieces.append(_ESCAPES[character])
        elif character == "\\":
            pieces.append(character)
        elif unicodedata.category(character)[0] in ("C", "Z") and character != " ":
            code = ord(character)
            pieces.append(f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}" if code < 0x10000
                          else f"\\U{code:08x}")
        else:
            pieces.append(character)
    return "".join(pieces)
