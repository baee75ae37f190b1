"""A fingerprint of a table's data, the same whatever the row order or extra columns."""

import hashlib
import json

from dopantgap.table.columns import REQUIRED_COLUMNS

__all__ = ["table_hash"]

_HASH_PREFIX = "dopantgap-table-v1"


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
