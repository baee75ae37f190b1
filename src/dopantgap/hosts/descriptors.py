"""Host descriptors: a host crystal as numbers, from its formula and its host-file properties.

For each of a few elemental descriptors ``d`` (:data:`HOST_ELEMENT_DESCRIPTORS`) a host
gets ``host_mean_<d>`` (the mean over its atoms weighted by atom fraction, so Al2O3
weighs Al 0.4 and O 0.6), ``host_min_<d>`` and ``host_max_<d>`` (over the elements
present). The host file's numeric properties follow as ``host_<name>`` and its
categories one-hot as ``host_<name>=<value>``. A host with such descriptors is a row of
numbers like any other, so what is learned in one host can carry to another.
"""

import numpy as np
import pandas as pd

from dopantgap.elements.descriptors import DESCRIPTORS, Descriptor, descriptor_table
from dopantgap.errors import DopantgapError

__all__ = ["HOST_ELEMENT_DESCRIPTORS", "host_descriptor_table", "host_descriptors", "host_property_columns"]

HOST_ELEMENT_DESCRIPTORS = (
    "electronegativity_pauling",
    "covalent_radius",
    "valence_electrons",
    "ionisation_energy_1",
)

_STATISTICS = (
    ("mean", "mean over the host's atoms weighted by atom fraction"),
    ("min", "smallest over the elements of the host"),
    ("max", "largest over the elements of the host"),
)


def _element_descriptor(name):
    for descriptor in DESCRIPTORS:
        if descriptor.name == name:
            return descriptor
    raise DopantgapError(f"{name!r} is not an elemental descriptor of dopantgap.elements.DESCRIPTORS")


def host_descriptors(properties=None, names=HOST_ELEMENT_DESCRIPTORS):
    """Every column of :func:`host_descriptor_table`, in order, with unit and definition.

    Parameters
    ----------
    properties : HostProperties, optional
        Host-file properties (:func:`dopantgap.hosts.read_host_properties`); their
        columns follow the elemental ones.
    names : sequence of str, default=HOST_ELEMENT_DESCRIPTORS
        Elemental descriptors to summarise over each host's atoms.

    Returns
    -------
    tuple of Descriptor
        Same record as :data:`dopantgap.elements.DESCRIPTORS`: name, unit, source,
        one-line description, and what happens when a value is missing.

    Raises
    ------
    DopantgapError
        If a name is not an elemental descriptor.
    """
    records = []
    for name in names:
        element = _element_descriptor(name)
        for statistic, how in _STATISTICS:
            records.append(Descriptor(
                f"host_{statistic}_{name}", element.unit,
                f"from the host formula and {element.source}",
                f"{element.description}: {how}",
                f"as the elemental descriptor: {element.imputation}",
            ))
    if properties is not None:
        source = f"host file {properties.source}"
        for name in properties.numeric_names:
            unit = properties.units[name]
            records.append(Descriptor(
                f"host_{name}", unit, source,
                f"{name} as given in the host file"
                + ("" if unit else " (no unit in its header: read as unitless)"),
                "none: a host the file gives no value for stays missing (NaN)",
            ))
        for name in properties.category_names:
            column = properties.values[name]
            for value in sorted({str(value) for value in column.dropna()}):
                records.append(Descriptor(
                    f"host_{name}={value}", "", source,
                    f"1 if the host file gives {name} {value!r} for the host, 0 if another value",
                    "none: a host the file gives no value for is missing (NaN) in every column "
                    f"of {name}",
                ))
    seen = set()
    for record in records:
        if record.name in seen:
            raise DopantgapError(
                f"host descriptor {record.name!r} would be made twice; rename the host-file "
                "property of that name"
            )
        seen.add(record.name)
    return tuple(records)


def host_descriptor_table(compositions, properties=None, descriptor_values=None,
                          names=HOST_ELEMENT_DESCRIPTORS):
    """Host descriptors, one row per host.

    Parameters
    ----------
    compositions : dict of str to dict of str to float
        Host label -> composition, e.g. from :func:`dopantgap.hosts.host_compositions`.
    properties : HostProperties, optional
        Host-file properties; hosts the file does not list get NaN in those columns.
    descriptor_values : DataFrame, optional
        A full elemental descriptor table (a model's ``descriptor_values_``) to take
        the elements' numbers from, as :func:`dopantgap.elements.descriptor_table`'s
        ``values``; None: the installed mendeleev's numbers.
    names : sequence of str, default=HOST_ELEMENT_DESCRIPTORS
        Elemental descriptors to summarise over each host's atoms.

    Returns
    -------
    pandas.DataFrame
        Index: host labels in the order of ``compositions`` (name ``host``); columns:
        the names of :func:`host_descriptors` in order; float64. The elemental columns
        are never NaN; property columns are NaN where the host file gives no value
        (nothing is invented for a host the user did not describe).

    Raises
    ------
    DopantgapError
        If a composition is empty or names a non-element, or a descriptor name is unknown.

    Examples
    --------
    >>> table = host_descriptor_table({"MgO": {"Mg": 1.0, "O": 1.0}})
    >>> round(float(table.loc["MgO", "host_mean_electronegativity_pauling"]), 3)
    2.375
    """
    records = host_descriptors(properties, names)
    hosts = list(compositions)
    table = pd.DataFrame(np.nan, index=pd.Index(hosts, name="host", dtype=object),
                         columns=[record.name for record in records], dtype=float)
    for host, composition in compositions.items():
        if not composition:
            raise DopantgapError(f"host {host!r} has an empty composition; give its formula")
        symbols = list(composition)
        counts = np.array([float(composition[symbol]) for symbol in symbols])
        if not np.all(np.isfinite(counts)) or np.any(counts <= 0):
            raise DopantgapError(f"host {host!r} has an atom count that is not positive; check its formula")
        elemental = descriptor_table(symbols, values=descriptor_values)[list(names)].to_numpy(dtype=float)
        fractions = counts / counts.sum()
        for position, name in enumerate(names):
            column = elemental[:, position]
            table.loc[host, f"host_mean_{name}"] = float(fractions @ column)
            table.loc[host, f"host_min_{name}"] = float(column.min())
            table.loc[host, f"host_max_{name}"] = float(column.max())
    if properties is not None:
        given = properties.values
        known = [host for host in hosts if host in given.index]
        for name in properties.numeric_names:
            table.loc[known, f"host_{name}"] = given.loc[known, name].to_numpy(dtype=float)
        for name in properties.category_names:
            prefix = f"host_{name}="
            for column in [column for column in table.columns if column.startswith(prefix)]:
                value = column[len(prefix):]
                for host in known:
                    cell = given.loc[host, name]
                    if isinstance(cell, str):
                        table.loc[host, column] = float(cell == value)
    return table


def host_property_columns(table, names=HOST_ELEMENT_DESCRIPTORS):
    """The columns of a :func:`host_descriptor_table` that come from the host file
    (numeric properties and category one-hots), in order: every column but the ones
    summarising the elements of ``names``.

    Examples
    --------
    >>> host_property_columns(host_descriptor_table({"MgO": {"Mg": 1.0, "O": 1.0}}))
    []
    """
    elemental = {record.name for record in host_descriptors(None, names)}
    return [column for column in table.columns if column not in elemental]
