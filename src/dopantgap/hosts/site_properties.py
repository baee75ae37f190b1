"""Site multiplicities and coordinations per host, from the optional columns of a host file."""

import math

from dopantgap.errors import TableError
from dopantgap.hosts.host_file import read_host_rows

__all__ = ["SiteProperties", "read_site_properties"]


class SiteProperties:
    """Per (host, site): sites per formula unit and coordination, with where each came from.

    Parameters
    ----------
    multiplicity : dict, optional
        (host, site) -> sites of that kind per formula unit.
    coordination : dict, optional
        (host, site) -> neighbour sites from which a vacancy binds to a dopant there.
    source : str, default="none given"
        Where the numbers were read, for the notes a command prints.
    """

    def __init__(self, multiplicity=None, coordination=None, source="none given"):
        self.multiplicity = dict(multiplicity or {})
        self.coordination = dict(coordination or {})
        self.source = source

    def multiplicities(self, host, sites):
        """Sites per formula unit for ``sites`` of ``host``, and the sites that defaulted to 1."""
        values = [self.multiplicity.get((host, site)) for site in sites]
        defaulted = [site for site, value in zip(sites, values) if value is None]
        return [1.0 if value is None else value for value in values], defaulted

    def coordination_of(self, host, site):
        """The coordination given for ``site`` of ``host``, or None."""
        return self.coordination.get((host, site))


def _positive(text, column, path, line, whole=False):
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not math.isfinite(value) or value <= 0 or (whole and value != int(value)):
        kind = "a whole number >= 1" if whole else "a positive number"
        raise TableError(f"{column} {text!r} is not {kind}; e.g. 12", path=path, line=line)
    return value


def read_site_properties(path):
    """Read site multiplicities and coordinations from a host file.

    Parameters
    ----------
    path : str or Path
        CSV with a header row holding ``host`` and ``site`` and one or both of
        ``multiplicity`` (sites of that kind per formula unit, > 0) and
        ``coordination`` (neighbour sites from which a vacancy binds to a dopant on
        that site, a whole number >= 1); other columns (``formula`` ...) are ignored
        and blank cells mean "not given". Blank lines and lines starting with ``#``
        are skipped. Example rows: ``ZnS,ZnS,sub_Zn,1,12``.

    Returns
    -------
    SiteProperties
        Empty when the file has neither ``multiplicity`` nor ``coordination`` (a host
        file that only maps labels to formulas).

    Raises
    ------
    TableError
        For a file that cannot be read, a missing column, a bad number or a host and
        site given twice; the message names the file and line.
    """
    header_line, header, rows = read_host_rows(path, "host,site,multiplicity,coordination")
    header = [cell.lower() for cell in header]
    if "multiplicity" not in header and "coordination" not in header:
        return SiteProperties(source=f"{path} (no multiplicity or coordination column)")
    for needed in ("host", "site"):
        if needed not in header:
            raise TableError(
                f"header has no column {needed!r}; site properties need 'host,site' beside "
                f"'multiplicity' and/or 'coordination'",
                path=path, line=header_line,
            )
    column = {name: header.index(name) for name in ("host", "site", "multiplicity", "coordination") if name in header}
    multiplicity, coordination, seen = {}, {}, {}
    for line_number, cells in rows:
        cells = cells + [""] * (len(header) - len(cells))
        host, site = cells[column["host"]].strip(), cells[column["site"]].strip()
        given = {
            name: cells[column[name]].strip() for name in ("multiplicity", "coordination") if name in column
        }
        if not any(given.values()):
            continue  # a host row with no site property (e.g. only host,formula)
        if not host or not site:
            raise TableError("a site property needs both its host and its site; fill both", path=path, line=line_number)
        if (host, site) in seen:
            raise TableError(
                f"host {host!r} site {site!r} is given twice (first on line {seen[(host, site)]}); keep one",
                path=path, line=line_number,
            )
        seen[(host, site)] = line_number
        if given.get("multiplicity"):
            multiplicity[(host, site)] = _positive(given["multiplicity"], "multiplicity", path, line_number)
        if given.get("coordination"):
            coordination[(host, site)] = _positive(given["coordination"], "coordination", path, line_number, whole=True)
    return SiteProperties(multiplicity, coordination, source=str(path))
