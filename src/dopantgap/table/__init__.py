"""The user's table of impurity energies: read, check, write, reshape, summarise, merge.

One module per concept:

``columns``    the column names of a table and of the outputs; labels shown escaped
``files``      a CSV or workbook file -> rows of text
``cells``      one cell -> an element symbol, a label or an energy in eV
``reading``    :func:`read_table`: the long and wide layouts, with file:line errors
``labels``     labels that differ only in letter case; where a row came from
``suspects``   :func:`suspect_values`: values a unit slip or a flipped sign explains
``frames``     :func:`check_frame`: the reader's checks for a DataFrame built in memory
``writing``    :func:`write_table` (CSV or workbook), :func:`write_workbook`
``reshaping``  :func:`to_wide`
``summary``    :func:`coverage`, :func:`coverage_text`
``identity``   :func:`table_hash`
``merging``    :func:`merge_results`

Every problem reaches the user as one :class:`~dopantgap.errors.TableError` naming the file
and line.
"""

from dopantgap.table.columns import (
    KEY_COLUMNS,
    MAX_ABS_VALUE,
    REQUIRED_COLUMNS,
    RESERVED_COLUMNS,
    WIDE_SEPARATOR,
    shown,
)
from dopantgap.table.frames import SUSPECT_POLICIES, check_frame, refuse_or_warn
from dopantgap.table.identity import table_hash
from dopantgap.table.merging import ORIGINAL_LABEL, PROVENANCE_COLUMN, merge_results
from dopantgap.table.reading import read_table
from dopantgap.table.reshaping import to_wide
from dopantgap.table.summary import coverage, coverage_text
from dopantgap.table.suspects import SUSPECT_COLUMNS, SUSPECT_THRESHOLD, suspect_values
from dopantgap.table.writing import OUTPUT_SUFFIXES, check_output_suffix, write_table, write_workbook

__all__ = [
    "KEY_COLUMNS",
    "MAX_ABS_VALUE",
    "ORIGINAL_LABEL",
    "OUTPUT_SUFFIXES",
    "PROVENANCE_COLUMN",
    "REQUIRED_COLUMNS",
    "RESERVED_COLUMNS",
    "SUSPECT_COLUMNS",
    "SUSPECT_POLICIES",
    "SUSPECT_THRESHOLD",
    "WIDE_SEPARATOR",
    "check_frame",
    "check_output_suffix",
    "coverage",
    "coverage_text",
    "merge_results",
    "read_table",
    "refuse_or_warn",
    "shown",
    "suspect_values",
    "table_hash",
    "to_wide",
    "write_table",
    "write_workbook",
]
