"""What ``dopantgap check`` tells about a table before anything is learned from it.

How each host label is read (a chemical formula, case-sensitively, or a host file's
formula), which host atoms each site label names (the reference an impurity there is
compared with, :func:`dopantgap.elements.reference_atoms`), the suspect values of
:func:`dopantgap.table.suspect_values`, and the coverage. The host labels go through the
same parsing as ``fit``, so a label ``check`` accepts is one ``fit`` accepts.
"""

import pandas as pd

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.table import coverage_text, shown

__all__ = ["checkup_text", "host_readings", "site_readings"]

_SAME_WEIGHT = 1e-12


def _where(rows):
    if "_file" in rows.columns and "_line" in rows.columns:
        return f"{rows['_file'].iat[0]}:{int(rows['_line'].iat[0])}"
    return ""


def host_readings(table, host_file_map=None):
    """The composition each host label of the table is read as.

    Parameters
    ----------
    table : pandas.DataFrame
        Long table (as returned by :func:`dopantgap.table.read_table`).
    host_file_map : dict or str or Path, optional
        Host label -> composition, or a host file (``--hosts``), as for
        :func:`dopantgap.elements.host_compositions`.

    Returns
    -------
    pandas.DataFrame
        One row per host label, in order of first appearance: ``host``, ``composition``
        (dict element -> atoms per formula unit), ``formula_text`` (``"Zn 1 + S 1"``),
        ``from_host_file`` (bool) and ``where`` (first ``file:line``, or ``""``).

    Raises
    ------
    DopantgapError
        For a label that is neither a formula nor in the host file, located at its first
        row, exactly as ``fit`` refuses it.
    """
    mapping = host_file_map
    if isinstance(mapping, (str, bytes)) or hasattr(mapping, "__fspath__"):
        mapping = elements.read_host_file(mapping)
    listed = {str(label).strip() for label in (mapping or {})}
    rows = []
    for host, part in table.groupby("host", sort=False):
        where = _where(part)
        try:
            composition = elements.host_compositions([host], mapping)[host]
        except DopantgapError as error:
            prefix = f"{where}: " if where else ""
            raise DopantgapError(f"{prefix}{error}; on the command line: --hosts HOST_FILE") from error
        rows.append({
            "host": host,
            "composition": composition,
            "formula_text": " + ".join(f"{symbol} {count:g}" for symbol, count in composition.items()),
            "from_host_file": str(host).strip() in listed,
            "where": where,
        })
    return pd.DataFrame(rows, columns=["host", "composition", "formula_text", "from_host_file", "where"])


def site_readings(table, hosts):
    """Which host atoms each site label of the table names.

    Parameters
    ----------
    table : pandas.DataFrame
        Long table.
    hosts : pandas.DataFrame
        :func:`host_readings` of the same table.

    Returns
    -------
    pandas.DataFrame
        One row per host and site, in order of first appearance: ``host``, ``site``,
        ``weights`` (dict host element -> weight, summing to 1), ``reading`` (a phrase:
        ``"Mg (named in the label)"``, ``"composition mix Zn 0.50, S 0.50 (no single host
        element named)"`` or ``"C (the host's one element)"``) and ``where``.
    """
    compositions = dict(zip(hosts["host"], hosts["composition"]))
    rows = []
    for (host, site), part in table.groupby(["host", "site"], sort=False):
        composition = compositions[host]
        weights = elements.reference_atoms(site, composition)
        mix = elements.reference_atoms(None, composition)
        same_as_mix = weights.keys() == mix.keys() and all(
            abs(weights[symbol] - mix[symbol]) < _SAME_WEIGHT for symbol in mix
        )
        listed = ", ".join(f"{symbol} {weight:.2f}" for symbol, weight in weights.items())
        if len(composition) == 1:
            reading = f"{next(iter(composition))} (the host's one element)"
        elif not same_as_mix:
            named = ", ".join(weights) if len(weights) == 1 else listed
            reading = f"{named} (named in the label)"
        else:
            reading = f"composition mix {listed} (no single host element named)"
        rows.append({"host": host, "site": site, "weights": weights, "reading": reading,
                     "where": _where(part)})
    return pd.DataFrame(rows, columns=["host", "site", "weights", "reading", "where"])


def _aligned(rows):
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    return ["  " + "   ".join(cell.ljust(widths[i]) for i, cell in enumerate(row)).rstrip()
            for row in rows]


def checkup_text(table, hosts, sites, suspects):
    """The report of ``dopantgap check``, as plain text (control characters escaped).

    Parameters
    ----------
    table : pandas.DataFrame
        Long table.
    hosts, sites : pandas.DataFrame
        :func:`host_readings` and :func:`site_readings` of it.
    suspects : pandas.DataFrame
        :func:`dopantgap.table.suspect_values` of it.

    Returns
    -------
    str
        Lines ending with ``\\n``: the host formulas, the site readings, the suspect values
        (or that there are none) and the coverage.
    """
    lines = ["hosts (labels read as chemical formulas, case-sensitively: 'Co' is cobalt, "
             "'CO' carbon and oxygen):"]
    lines += _aligned([
        [shown(row.host), row.formula_text + ("  (from the host file)" if row.from_host_file else "")]
        for row in hosts.itertuples(index=False)
    ])
    lines += ["", "sites (the host atoms an impurity there is compared with):"]
    lines += _aligned([[shown(row.host), shown(row.site), row.reading] for row in sites.itertuples(index=False)])
    lines.append("")
    if len(suspects):
        lines.append(f"suspect values ({len(suspects)}; a unit slip or a flipped sign would explain each):")
        lines += [f"  {shown(message)}" for message in suspects["message"]]
    else:
        lines.append("suspect values: none (no value that a meV or kJ/mol slip or a flipped sign "
                     "would explain)")
    lines += ["", coverage_text(table).rstrip("\n")]
    return "\n".join(lines) + "\n"
