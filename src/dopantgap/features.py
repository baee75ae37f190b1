"""Turn table cells into model inputs.

A cell is (element, host, site, method, quantity). Within one model (one quantity at
one level of theory) its input row is

1. the element's descriptors (``elements.descriptor_table``), standardised;
2. host-relative terms (size misfit, electronegativity and valence difference to
   the host atom(s) the impurity replaces or sits among), standardised;
3. one 0/1 indicator per host/site column the model was trained on;
4. two integer labels: the element's atomic number, which the learners turn into an
   offset shared by all the element's cells (what an element does everywhere that no
   descriptor explains), and the host/site column's index (for column-mean baselines).

The scaler is fitted on the training cells only, inside each cross-validation fold.
"""

import numpy as np
import pandas as pd

from dopantgap import elements
from dopantgap.symbols import atomic_number

__all__ = ["DEFAULT_DESCRIPTORS", "CellEncoder"]

#: The elemental descriptors a model sees unless the user chooses others: size,
#: electronegativity, shell filling and ionisation, without near-duplicates that
#: would only slow the optimiser.
DEFAULT_DESCRIPTORS = (
    "period",
    "group",
    "block_index",
    "valence_electrons",
    "covalent_radius",
    "electronegativity_pauling",
    "ionisation_energy_1",
    "electron_affinity",
    "polarisability",
)

# Descriptors spanning orders of magnitude enter as logarithms.
_LOGARITHMIC = {"polarisability"}


def _display_name(descriptor):
    return f"log10_{descriptor}" if descriptor in _LOGARITHMIC else descriptor


class CellEncoder:
    """Encode cells of one quantity and level as a numeric matrix.

    Parameters
    ----------
    descriptors : sequence of str
        Elemental descriptor names (see ``elements.DESCRIPTOR_NAMES``).
    compositions : dict
        Host label -> {element symbol: count}.
    descriptor_values : DataFrame or None, default=None
        Full descriptor table the elements' numbers are read from (``values`` of
        ``elements.descriptor_table``): a model's ``descriptor_values_``, so that it
        encodes cells with the numbers it was fitted with. None: the installed
        mendeleev's.

    Attributes
    ----------
    columns_ : list of tuple
        The (host, site) columns seen in training, in first-seen order.
    feature_names_ : list of str
        Names of the matrix columns, in order.
    indicator_columns_ : tuple of int
        Positions of the column indicators.
    label_columns_ : tuple of int
        Positions of the element label and the column label.
    n_physical_ : int
        Number of leading descriptor and host-relative columns.
    """

    def __init__(self, descriptors, compositions, descriptor_values=None):
        self.descriptors = tuple(descriptors)
        self.compositions = compositions
        self.descriptor_values = descriptor_values

    def _physical(self, cells):
        table = elements.descriptor_table(list(cells["element"]), values=self.descriptor_values)
        values = {}
        for name in self.descriptors:
            column = table[name].to_numpy(dtype=float)
            if name in _LOGARITHMIC:
                column = np.log10(np.maximum(column, 1e-3))
            values[_display_name(name)] = column
        relative = elements.host_relative_table(
            list(cells["element"]), list(cells["host"]), list(cells["site"]), self.compositions,
            values=self.descriptor_values,
        )
        for name in relative.columns:
            values[name] = relative[name].to_numpy(dtype=float)
        return pd.DataFrame(values)

    def fit(self, cells, columns=None):
        """Learn the column list and the scaling from training cells (a DataFrame).

        ``columns`` fixes the (host, site) column list instead of reading it from the
        cells, so that a cross-validation fold keeps the full model's input layout.
        """
        physical = self._physical(cells)
        self.physical_names_ = list(physical.columns)
        self.mean_ = physical.mean().to_numpy()
        spread = physical.std(ddof=0).to_numpy()
        # a descriptor constant over the training cells carries nothing; keep it finite
        self.scale_ = np.where(spread > 1e-12, spread, 1.0)
        if columns is None:
            columns = dict.fromkeys(zip(cells["host"], cells["site"]))
        self.columns_ = list(columns)
        self.n_physical_ = len(self.physical_names_)
        n_indicators = len(self.columns_) if len(self.columns_) > 1 else 0
        self.indicator_columns_ = tuple(range(self.n_physical_, self.n_physical_ + n_indicators))
        start = self.n_physical_ + n_indicators
        self.label_columns_ = (start, start + 1)
        self.feature_names_ = (
            self.physical_names_
            + [f"column[{host} | {site}]" for host, site in self.columns_][:n_indicators]
            + ["element_label", "column_label"]
        )
        return self

    def transform(self, cells):
        """Matrix of shape (n_cells, len(feature_names_)) for the cells (a DataFrame)."""
        physical = (self._physical(cells).to_numpy() - self.mean_) / self.scale_
        index = {column: position for position, column in enumerate(self.columns_)}
        column_index = np.array(
            [index.get(key, -1) for key in zip(cells["host"], cells["site"])], dtype=float
        )
        indicators = np.zeros((len(cells), len(self.indicator_columns_)))
        if len(self.indicator_columns_):
            rows = np.flatnonzero(column_index >= 0)
            indicators[rows, column_index[rows].astype(int)] = 1.0
        element_label = np.array(
            [atomic_number(symbol) for symbol in cells["element"]], dtype=float
        )
        return np.column_stack([physical, indicators, element_label, column_index])
