"""Element descriptors as the model sees them, and one column's encoded rows built from them."""

import copy

import numpy as np
import pandas as pd

from dopantgap import elements
from dopantgap.errors import DopantgapError

__all__ = ["descriptor_matrix", "explanation_features", "feature_units"]

_DERIVED = "derived: "
# Host-relative term -> descriptor it is made of, read from the terms' own definitions
# (elements.HOST_RELATIVE_DESCRIPTORS, source "derived: covalent_radius").
_HOST_RELATIVE_SOURCES = {
    descriptor.name: descriptor.source[len(_DERIVED):]
    for descriptor in elements.HOST_RELATIVE_DESCRIPTORS
    if descriptor.source.startswith(_DERIVED)
}
# Floor of a descriptor before its logarithm, as in features.CellEncoder.
_LOG_FLOOR = 1e-3
_LOG_PREFIX = "log10_"


def explanation_features(surrogate):
    """Names of the descriptors a surrogate's predictions depend on, in order.

    The model's own descriptors as its encoder names them (``log10_polarisability``),
    then any descriptor a host-relative term is made from that the model does not
    list itself.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.

    Returns
    -------
    list of str
    """
    names = []
    for descriptor in surrogate.descriptors_:
        names.append(_encoded_descriptor_name(surrogate, descriptor))
    for source in _HOST_RELATIVE_SOURCES.values():
        if source not in names and source not in surrogate.descriptors_:
            names.append(source)
    return list(dict.fromkeys(names))


def _encoded_descriptor_name(surrogate, descriptor):
    """The encoder's name of a descriptor (its physical column name)."""
    encoder = next(iter(surrogate.stages_.values())).encoder
    position = list(encoder.descriptors).index(descriptor)
    return encoder.physical_names_[position]


def feature_units(features):
    """Unit of each explanation feature, from the descriptor definitions.

    Parameters
    ----------
    features : sequence of str
        Names from :func:`explanation_features` (or any descriptor name).

    Returns
    -------
    list of str
        ``"pm"``, ``"eV"`` ...; ``""`` for dimensionless descriptors and names that are
        not descriptors (the element's own offset); ``"log10(bohr^3)"`` for a
        ``log10_`` feature, whose values are logarithms of the descriptor.
    """
    units = {descriptor.name: descriptor.unit for descriptor in elements.DESCRIPTORS}
    out = []
    for feature in features:
        unit = units.get(_raw_name(str(feature)), "")
        if str(feature).startswith(_LOG_PREFIX):
            unit = f"log10({unit})" if unit else "log10"
        out.append(unit)
    return out


def _raw_name(feature):
    return feature[len(_LOG_PREFIX):] if feature.startswith(_LOG_PREFIX) else feature


def descriptor_matrix(features, element_symbols, values=None):
    """Descriptor values of elements, one row each, as the encoder uses them.

    Parameters
    ----------
    features : sequence of str
        From :func:`explanation_features`; a ``log10_`` name is the logarithm of the
        descriptor (floored at 1e-3 as in ``features.CellEncoder``).
    element_symbols : sequence of str
        Canonical element symbols.
    values : DataFrame or None, default=None
        The model's descriptor table (``Surrogate.descriptor_values_``); None: the
        installed mendeleev's numbers.

    Returns
    -------
    ndarray of shape (n_elements, n_features)
    """
    table = elements.descriptor_table(list(element_symbols), values=values)
    columns = []
    for feature in features:
        values = table[_raw_name(feature)].to_numpy(dtype=float).copy()
        if feature.startswith(_LOG_PREFIX):
            values = np.log10(np.maximum(values, _LOG_FLOOR))
        columns.append(values)
    return np.column_stack(columns) if columns else np.zeros((len(table), 0))


def _affine_map(encoder, features, host, site, compositions):
    """Which descriptor each physical input of ``encoder`` is made of, and how, for one column.

    Read from the encoder itself, not re-derived: probe elements (chosen among those not
    in the host, so the site's reference atoms keep their values) get made-up descriptor
    values, one descriptor moved per probe, and are encoded by ``encoder.transform``; an
    input's change under a probe is its slope in that descriptor (every input is affine
    in one descriptor for a fixed column: a descriptor itself or a host-relative term of
    it, standardised).

    An input no descriptor moves (a host descriptor: fixed for the column) is kept as
    its constant, with slope 0.

    Returns
    -------
    index, slope, intercept : ndarray of shape (n_physical,)
        Standardised input ``p`` is ``descriptors[:, index[p]] * slope[p] + intercept[p]``.
    rest : ndarray
        The encoded row's other inputs (column indicators and labels) for this column,
        element label excluded: the same for every element.
    """
    table = elements.descriptor_table(values=encoder.descriptor_values)
    host_atoms = set(compositions[host])
    probes = [symbol for symbol in reversed(list(table.index)) if symbol not in host_atoms][: len(features) + 1]
    raw = [_raw_name(feature) for feature in features]
    logarithmic = np.array([feature.startswith(_LOG_PREFIX) for feature in features])
    # probe values near the middle of each descriptor's range, one unit apart (a decade for
    # a logarithmic one), so that the differences carry no cancellation
    base = np.array([
        float(np.log10(max(np.median(table[name]), 1.0))) if log else float(np.median(table[name]))
        for name, log in zip(raw, logarithmic)
    ])
    probe_values = np.tile(base, (len(probes), 1))
    probe_values[1:] += np.eye(len(features))
    for row, symbol in enumerate(probes):
        for column, name in enumerate(raw):
            value = probe_values[row, column]
            table.loc[symbol, name] = 10.0**value if logarithmic[column] else value
    probing = copy.copy(encoder)
    probing.descriptor_values = table
    encoded = probing.transform(pd.DataFrame({"element": probes, "host": host, "site": [site] * len(probes)}))
    physical = encoded[:, : encoder.n_physical_]
    changes = physical[1:] - physical[0]  # (feature, input)
    index, slope, intercept = [], [], []
    for position, name in enumerate(encoder.physical_names_):
        moved = np.flatnonzero(np.abs(changes[:, position]) > 1e-12 * max(1.0, np.abs(changes[:, position]).max()))
        if len(moved) == 0 and name in getattr(encoder, "host_names_", ()):
            index.append(0)
            slope.append(0.0)
            intercept.append(physical[0, position])
            continue
        if len(moved) != 1:
            raise DopantgapError(
                f"explain cannot rebuild the model input {name!r} from the descriptors "
                f"{', '.join(features)}; refit the model with this dopantgap version"
            )
        feature = int(moved[0])
        index.append(feature)
        slope.append(changes[feature, position])
        intercept.append(physical[0, position] - changes[feature, position] * base[feature])
    return np.array(index, dtype=int), np.array(slope), np.array(intercept), encoded[0, encoder.n_physical_:]


class _ColumnEncoding:
    """Encoded input rows of one stage for one (host, site) column, built from descriptors.

    Every physical input of the encoder is an affine function of one descriptor for a
    fixed column (a descriptor itself, or a host-relative term of it), so the standardised
    block is ``D[:, index] * slope + intercept``.
    """

    def __init__(self, encoder, features, host, site, compositions):
        if host not in compositions:
            raise DopantgapError(f"host {host!r} has no composition in the model")
        self.index, self.slope, self.intercept, rest = _affine_map(encoder, list(features), host, site, compositions)
        # the encoder's own indicators and column label for this column (the element label
        # sits between them and varies by element)
        n_indicators = len(encoder.indicator_columns_)
        self.indicators = np.array(rest[:n_indicators], dtype=float)
        self.column_index = float(rest[-1])
        # columns sharing reference atoms share the whole physical block
        self.physical_key = (tuple(self.index), tuple(np.round(self.slope, 15)), tuple(np.round(self.intercept, 15)))

    def physical(self, descriptors):
        return descriptors[:, self.index] * self.slope + self.intercept

    def rows(self, descriptors, labels):
        n_rows = descriptors.shape[0]
        return np.column_stack(
            [
                self.physical(descriptors),
                np.broadcast_to(self.indicators, (n_rows, len(self.indicators))),
                np.broadcast_to(np.asarray(labels, dtype=float), (n_rows,)),
                np.full(n_rows, self.column_index),
            ]
        )
