"""Hosts with no computed cell: which cells they get, and the model that can place them.

A new host is given by its label (a formula, or a label the host file maps to one). Its
sites are the ones the host file lists for it (rows ``host,site``); without such rows,
the table's site labels that name no host atom (``int_oct``, ``sub`` in a table of
elemental hosts) are used, and the sites that name an atom (``sub_Zn``) are left out
with a note: a site naming a host atom is carried to another host only where the host
file says which of its sites it is like (``site_kind``), never guessed. Each new site
gets the methods and quantities that the table's sites of the same kind have.
"""

import pandas as pd

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.features import site_kind
from dopantgap.hosts import SiteProperties

__all__ = ["NewHostPlan", "parse_host_list", "plan_new_hosts"]


def parse_host_list(text, option="--hosts-new"):
    """Host labels from a comma-separated list such as ``"MgO, CaO"``."""
    labels = [word.strip() for word in str(text).split(",")]
    if not labels or any(not label for label in labels):
        raise DopantgapError(f"{option}: give host labels separated by commas, e.g. {option} MgO,CaO.")
    return list(dict.fromkeys(labels))


class NewHostPlan:
    """What a fill of new hosts covers.

    Attributes
    ----------
    surrogate : Surrogate
        The model, able to place the new hosts (``Surrogate.with_new_hosts``).
    columns : DataFrame
        The new hosts' (host, site, method, quantity) columns.
    notes : list of str
        Sites left out and why, one line each.
    outside : dict
        New host -> reason, for the hosts outside the table's hosts (``domain.HostDomain``).
    """

    def __init__(self, surrogate, columns, notes, outside):
        self.surrogate = surrogate
        self.columns = columns
        self.notes = notes
        self.outside = outside


def plan_new_hosts(surrogate, labels, host_file=None):
    """The columns of new hosts, and a model able to predict them.

    Parameters
    ----------
    surrogate : Surrogate
        Fitted on a table with at least three hosts.
    labels : sequence of str
        New host labels: formulas, or labels the host file maps to formulas.
    host_file : str or Path or None, default=None
        Host file with ``host,formula`` and optionally ``site``, ``site_kind`` and
        host properties (``hosts.read_host_properties``).

    Returns
    -------
    NewHostPlan

    Raises
    ------
    DopantgapError
        For a label the table already has, a label that is neither a formula nor in the
        host file, a new site whose kind no table site has, a new host left with no
        site, or a model that cannot place new hosts (fewer than three hosts).
    """
    from dopantgap.hosts import read_host_properties, read_site_properties

    table = surrogate.table_
    known = set(table["host"])
    repeated = [label for label in labels if label in known]
    if repeated:
        raise DopantgapError(
            f"{', '.join(repeated)} already has computed cells in the table; 'fill' covers it without "
            "--hosts-new."
        )
    mapping = elements.read_host_file(host_file) if host_file else None
    compositions = elements.host_compositions(labels, mapping)
    sites_given = read_site_properties(host_file) if host_file else SiteProperties()
    properties = None
    if host_file:
        properties = read_host_properties(host_file)
        if not properties.names:
            properties = None
    site_kinds = {**getattr(surrogate, "site_kinds_", {}), **sites_given.kinds}
    placed = surrogate.with_new_hosts(compositions, host_properties=properties, site_kinds=site_kinds)

    table_columns = table[["host", "site", "method", "quantity"]].drop_duplicates()
    kind_of = [site_kind(host, site, site_kinds) for host, site in zip(table_columns["host"], table_columns["site"])]
    table_columns = table_columns.assign(kind=kind_of)
    generic = sorted(
        {
            site for host, site in zip(table_columns["host"], table_columns["site"])
            if not elements.named_atoms(site, surrogate.compositions_[host])
        }
    )
    named = sorted(set(table_columns["site"]) - set(generic))
    rows, notes = [], []
    for label in labels:
        sites = sites_given.sites.get(label)
        if sites is None:
            sites = generic
            if named:
                notes.append(
                    f"{label}: the table's sites {', '.join(named)} name host atoms and were left out; "
                    f"list {label}'s own sites in the host file (host,site,site_kind) to fill them"
                )
        if not sites:
            raise DopantgapError(
                f"new host {label}: no site to fill. Every site of the table names a host atom "
                f"({', '.join(named)}); list {label}'s sites in the host file with the table site kind "
                f"each is like, e.g. a row '{label},{label},sub_X,<kind>' under the header "
                "'host,formula,site,site_kind', with the same kind on the table's own sites"
            )
        for site in sites:
            kind = site_kind(label, site, site_kinds)
            alike = table_columns[table_columns["kind"] == kind]
            if alike.empty:
                raise DopantgapError(
                    f"new host {label}, site {site}: no site of the table is of kind {kind!r}; give it a "
                    f"site_kind in the host file that table sites share (the table's kinds: "
                    f"{', '.join(sorted(set(kind_of)))})"
                )
            for method, quantity in alike[["method", "quantity"]].drop_duplicates().itertuples(index=False):
                rows.append({"host": label, "site": site, "method": method, "quantity": quantity})
    columns = pd.DataFrame(rows, columns=["host", "site", "method", "quantity"])

    domain = getattr(placed, "host_domain_", None)
    outside = {}
    if domain is not None:
        values = placed.host_values_.loc[list(labels)]
        flags = domain.outside(values)
        distance, nearest = domain.distance(values), domain.nearest(values)
        for position, label in enumerate(labels):
            if flags[position]:
                # enough digits that the distance and the limit never print alike
                digits = 2
                while digits < 6 and f"{distance[position]:.{digits}f}" == f"{domain.threshold_:.{digits}f}":
                    digits += 1
                outside[label] = (
                    f"{distance[position]:.{digits}f} from the nearest table host ({nearest[position]}) in "
                    f"standardised host descriptors, beyond the domain limit {domain.threshold_:.{digits}f}"
                )
    return NewHostPlan(placed, columns, notes, outside)
