"""Element descriptors as the model sees them, and one column's encoded rows built from them."""

import numpy as np

from dopantgap import elements
from dopantgap.errors import DopantgapError

__all__ = ["descriptor_matrix", "explanation_features"]

# Host-relative term -> descriptor it is made of (see elements.host_relative_table).
_HOST_RELATIVE_SOURCES = {
    "size_misfit": "covalent_radius",
    "electronegativity_difference": "electronegativity_pauling",
    "valence_difference": "valence_electrons",
    "ionisation_energy_difference": "ionisation_energy_1",
    "electron_affinity_difference": "electron_affinity",
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


class _ColumnEncoding:
    """Encoded input rows of one stage for one (host, site) column, built from descriptors.

    Every physical input of the encoder is an affine function of one descriptor for a
    fixed column (a descriptor itself, or a host-relative term of it), so the standardised
    block is ``D[:, index] * slope + intercept``.
    """

    def __init__(self, encoder, features, host, site, compositions):
        if host not in compositions:
            raise DopantgapError(f"host {host!r} has no composition in the model")
        site_key = site if isinstance(site, str) else None
        reference = elements.reference_atoms(site_key, compositions[host])
        reference_table = elements.descriptor_table(list(reference), values=encoder.descriptor_values)
        weights = np.array(list(reference.values()), dtype=float)
        index, slope, intercept = [], [], []
        for position, name in enumerate(encoder.physical_names_):
            if name in _HOST_RELATIVE_SOURCES:
                source = _HOST_RELATIVE_SOURCES[name]
                reference_value = float(weights @ reference_table[source].to_numpy(dtype=float))
                if name == "size_misfit":
                    a, b = 1.0 / reference_value, -1.0
                else:
                    a, b = 1.0, -reference_value
                feature = source
            else:
                feature, a, b = name, 1.0, 0.0
            if feature not in features:
                raise DopantgapError(
                    f"explain cannot rebuild the model input {name!r} from the descriptors "
                    f"{', '.join(features)}; refit the model with this dopantgap version"
                )
            index.append(features.index(feature))
            slope.append(a / encoder.scale_[position])
            intercept.append((b - encoder.mean_[position]) / encoder.scale_[position])
        self.index = np.array(index, dtype=int)
        self.slope = np.array(slope)
        self.intercept = np.array(intercept)
        columns = {column: position for position, column in enumerate(encoder.columns_)}
        self.column_index = float(columns.get((host, site), -1))
        n_indicators = len(encoder.indicator_columns_)
        self.indicators = np.zeros(n_indicators)
        if n_indicators and self.column_index >= 0:
            self.indicators[int(self.column_index)] = 1.0
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
