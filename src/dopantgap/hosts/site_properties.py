"""Per host and site, from the optional columns of a host file: multiplicities,
coordinations, and the site kind that ties a site to other hosts' sites."""

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
    kinds : dict, optional
        (host, site) -> site kind shared with other hosts' sites (``site_kind``).
    sites : dict, optional
        Host -> the site labels the file lists for it, in file order.
    """

    def __init__(self, multiplicity=None, coordination=None, source="none given", kinds=None, sites=None):
        self.multiplicity = dict(multiplicity or {})
        self.coordination = dict(coordination or {})
        self.source = source
        self.kinds = dict(kinds or {})
        self.sites = {host: list(labels) for host, labels in (sites or {}).items()}

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
    """Read site multiplicities, coordinations and site kinds from a host file.

    Parameters
    ----------
    path : str or Path
        CSV with a header row holding ``host`` and ``site`` and one or more of
        ``multiplicity`` (sites of that kind per formula unit, > 0),
        ``coordination`` (neighbour sites from which a vacancy binds to a dopant on
        that site, a whole number >= 1) and ``site_kind`` (a name shared by sites
        of different hosts that behave alike, e.g. ``cation`` for ``sub_Zn`` in ZnS
        and ``sub_Mg`` in MgO); other columns (``formula`` ...) are ignored and
        blank cells mean "not given". Blank lines and lines starting with ``#``
        are skipped. Example rows: ``ZnS,ZnS,sub_Zn,1,12``.

    Returns
    -------
    SiteProperties
        Empty when the file has no site column (a host file that only maps labels
        to formulas).

    Raises
    ------
    TableError
        For a file that cannot be read, a missing column, a bad number or a host and
        site given twice; the message names the file and line.
    """
    header_line, header, rows = read_host_rows(path, "host,site,multiplicity,coordination")
    header = [cell.lower() for cell in header]
    named = ("multiplicity", "coordination", "site_kind")
    if not any(name in header for name in named) and "site" not in header:
        return SiteProperties(source=f"{path} (no site column)")
    for needed in ("host", "site"):
        if needed not in header:
            raise TableError(
                f"header has no column {needed!r}; site properties need 'host,site' beside "
                f"'multiplicity', 'coordination' or 'site_kind'",
                path=path, line=header_line,
            )
    column = {name: header.index(name) for name in ("host", "site") + named if name in header}
    multiplicity, coordination, kinds, sites, seen = {}, {}, {}, {}, {}
    for line_number, cells in rows:
        cells = cells + [""] * (len(header) - len(cells))
        host, site = cells[column["host"]].strip(), cells[column["site"]].strip()
        given = {name: cells[column[name]].strip() for name in named if name in column}
        if host and site and site not in sites.setdefault(host, []):
            sites[host].append(site)
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
        if given.get("site_kind"):
            kinds[(host, site)] = given["site_kind"]
    return SiteProperties(multiplicity, coordination, source=str(path), kinds=kinds,
                          sites={host: labels for host, labels in sites.items() if labels})
