"""Optional host properties (lattice constant, band gap, structure ...) from the host file.

Every column of a host file other than ``host``, ``formula``, ``site``,
``multiplicity``, ``coordination`` and ``note``/``notes`` is a host property. Its unit
is written in brackets in the header (``lattice_constant [angstrom]``); a header with
no brackets gives a unitless property. A column of numbers is numeric; a column of
words (``fcc``, ``rocksalt``) is a category. A host listed on several rows (one per
site) gives each property once: the other rows repeat the same value or leave it blank.
"""

import math
import re

import numpy as np
import pandas as pd

from dopantgap.errors import TableError
from dopantgap.hosts.host_file import read_host_rows

__all__ = ["HOST_FILE_RESERVED_COLUMNS", "HostProperties", "read_host_properties"]

HOST_FILE_RESERVED_COLUMNS = frozenset(
    {"host", "formula", "site", "multiplicity", "coordination", "site_kind", "note", "notes"}
)

_HEADER = re.compile(r"^(?P<name>[^\[\]]*?)\s*(?:\[(?P<unit>[^\[\]]*)\])?\s*$")
_NAME = re.compile(r"^[a-z][a-z0-9_]*$")


class HostProperties:
    """Host properties read from a host file, one value per host, with units and kinds.

    Parameters
    ----------
    values : pandas.DataFrame
        Index: host labels (name ``host``) in order of first appearance in the file;
        one column per property: float64 for numeric properties, object (str) for
        categories; NaN where the file gives no value.
    units : dict of str to str
        Property -> unit as written in the header brackets; ``""`` for unitless.
    kinds : dict of str to str
        Property -> ``"numeric"`` or ``"category"``.
    source : str, default="none given"
        Where the values were read, for notes and column definitions.
    """

    def __init__(self, values=None, units=None, kinds=None, source="none given"):
        if values is None:
            values = pd.DataFrame(index=pd.Index([], name="host", dtype=object))
        self.values = values
        self.units = dict(units or {})
        self.kinds = dict(kinds or {})
        self.source = source

    @property
    def names(self):
        """Property names in file order."""
        return list(self.values.columns)

    @property
    def numeric_names(self):
        """Names of the numeric properties."""
        return [name for name in self.names if self.kinds[name] == "numeric"]

    @property
    def category_names(self):
        """Names of the category properties."""
        return [name for name in self.names if self.kinds[name] == "category"]

    def missing(self):
        """Hosts without a value, per property.

        Returns
        -------
        dict of str to list of str
            Property -> host labels the file gives no value for; properties given for
            every host are left out.
        """
        gaps = {}
        for name in self.names:
            hosts = [str(host) for host in self.values.index[self.values[name].isna()]]
            if hosts:
                gaps[name] = hosts
        return gaps

    def notes(self):
        """One line per property with missing hosts, and one per unitless numeric property."""
        lines = []
        for name, hosts in self.missing().items():
            lines.append(f"host property {name!r} not given for: {', '.join(hosts)} (left missing)")
        for name in self.numeric_names:
            if not self.units[name]:
                lines.append(
                    f"host property {name!r} has no unit in the header and is read as unitless; "
                    f"write e.g. '{name} [eV]' if it has one"
                )
        return lines


def _property_name(text, path, line):
    match = _HEADER.match(text.strip())
    if match is None:
        raise TableError(
            f"header {text!r} is not 'name' or 'name [unit]'; e.g. 'band_gap [eV]'",
            path=path, line=line,
        )
    name = re.sub(r"[\s\-]+", "_", match.group("name").strip().lower())
    if not _NAME.match(name):
        raise TableError(
            f"header {text!r} gives no usable property name (letters, digits, '_'); "
            "e.g. 'lattice_constant [angstrom]'",
            path=path, line=line,
        )
    unit = (match.group("unit") or "").strip()
    return name, unit


def _number(text):
    """Finite float of ``text``, or None when it is not a number."""
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def read_host_properties(path):
    """Read the optional host properties of a host file.

    Parameters
    ----------
    path : str or Path
        CSV with a header row holding ``host``; every column but ``host``,
        ``formula``, ``site``, ``multiplicity``, ``coordination``, ``note`` and
        ``notes`` is a property, written ``name [unit]`` or ``name`` (unitless).
        Blank lines and lines starting with ``#`` are skipped; blank cells mean
        "not given". Example header: ``host,formula,lattice_constant [angstrom],structure``.

    Returns
    -------
    HostProperties
        One row per host of the file; no columns when the file has no property column.

    Raises
    ------
    TableError
        For a file that cannot be read, a missing ``host`` column, a header given
        twice, a column mixing numbers and words, categories differing only in letter
        case, a value without its host, or a host given two different values; the
        message names the file and line and the fix.
    """
    header_line, header, rows = read_host_rows(path, "host,formula,band_gap [eV]")
    lowered = [cell.lower() for cell in header]
    if "host" not in lowered:
        raise TableError("header has no column 'host'; the first row must name 'host' and the properties",
                         path=path, line=header_line)
    host_column = lowered.index("host")
    columns, units = {}, {}
    for position, cell in enumerate(header):
        if cell.lower() in HOST_FILE_RESERVED_COLUMNS:
            continue
        name, unit = _property_name(cell, path, header_line)
        if name in columns or name in HOST_FILE_RESERVED_COLUMNS:
            raise TableError(f"property {name!r} is named twice in the header; keep one column",
                             path=path, line=header_line)
        columns[name], units[name] = position, unit

    hosts = []
    cells_of = {name: {} for name in columns}  # name -> host -> (text, line)
    for line_number, cells in rows:
        cells = cells + [""] * (len(header) - len(cells))
        host = cells[host_column].strip()
        given = {name: cells[position].strip() for name, position in columns.items()}
        given = {name: value for name, value in given.items() if value}
        if not host:
            if given:
                raise TableError(
                    f"property {next(iter(given))!r} is given without its host; fill the host cell",
                    path=path, line=line_number,
                )
            continue
        if host not in hosts:
            hosts.append(host)
        for name, value in given.items():
            seen = cells_of[name].get(host)
            if seen is None:
                cells_of[name][host] = (value, line_number)
                continue
            first, first_line = seen
            same_number = _number(first) is not None and _number(first) == _number(value)
            if first != value and not same_number:
                raise TableError(
                    f"host {host!r} has {name} {value!r} here but {first!r} on line {first_line}; "
                    "a host has one value: give it once or repeat it alike",
                    path=path, line=line_number,
                )

    values, kinds = {}, {}
    for name in columns:
        given = cells_of[name]
        numbers = {host: _number(value) for host, (value, _) in given.items()}
        words = [host for host, number in numbers.items() if number is None]
        if not words:  # an all-blank column too: numeric, every host missing
            kinds[name] = "numeric"
            values[name] = np.array([numbers.get(host, np.nan) for host in hosts], dtype=float)
            continue
        if len(words) < len(given) or units[name]:
            host = words[0]
            word, line_number = given[host]
            why = "its header gives a unit" if units[name] else "the column also holds numbers"
            raise TableError(
                f"{name} {word!r} of host {host!r} is not a number, but {why}; give a number "
                "or leave the cell blank",
                path=path, line=line_number,
            )
        kinds[name] = "category"
        spelled = {}
        for host, (word, line_number) in given.items():
            earlier = spelled.setdefault(word.lower(), (word, line_number))
            if earlier[0] != word:
                raise TableError(
                    f"{name} {word!r} differs from {earlier[0]!r} (line {earlier[1]}) only in letter "
                    "case; write them alike",
                    path=path, line=line_number,
                )
        values[name] = np.array([given[host][0] if host in given else np.nan for host in hosts], dtype=object)
    table = pd.DataFrame(index=pd.Index(hosts, name="host", dtype=object))
    for name in columns:
        table[name] = values[name]
    return HostProperties(table, units, kinds, source=str(path))
