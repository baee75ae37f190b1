"""Turn table cells into model inputs.

A cell is (element, host, site, method, quantity). Within one model (one quantity at
one level of theory) its input row is

1. the element's descriptors (``elements.descriptor_table``), standardised;
2. host-relative terms (size misfit, electronegativity and valence difference to
   the host atom(s) the impurity replaces or sits among), standardised;
3. host descriptors (``hosts.host_descriptor_table``: composition-weighted element
   descriptors and host-file properties), standardised, when the training cells span
   at least three hosts: they let what one host teaches carry to a host with no or few
   rows (the host loop weighs this against the pair model, :class:`PairEncoder`, and
   the other-hosts rule);
4. one 0/1 indicator per host/site column the model was trained on. A cell of a column
   never trained on (a new host), or with host descriptors of a column trained on fewer
   than ``MIN_CELLS_FOR_OWN_INDICATOR`` cells, gets the mean indicator of the columns of
   the same site kind (the host file's ``site_kind``, else the site label), or none;
5. two integer labels: the element's atomic number, which the learners turn into an
   offset shared by all the element's cells (what an element does everywhere that no
   descriptor explains), and the host/site column's index (for column-mean baselines).

The scaler is fitted on the training cells only, inside each cross-validation fold.
"""

import copy

import numpy as np
import pandas as pd

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.symbols import atomic_number

__all__ = ["DEFAULT_DESCRIPTORS", "MIN_HOSTS_FOR_HOST_DESCRIPTORS", "CellEncoder", "PairEncoder", "site_kind"]

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

#: Fewest hosts among the training cells for host descriptors to enter (common practice,
#: no source: with two hosts a host descriptor is only a relabelled host indicator).
MIN_HOSTS_FOR_HOST_DESCRIPTORS = 3
#: With host descriptors, fewest training cells for a (host, site) column to get an
#: indicator of its own; a column with fewer is placed like a new host's (the mean
#: indicator of its site kind), so its few cells borrow strength from the other hosts
#: through the host descriptors instead of sitting alone on an axis of their own (common
#: practice, no source; measured in tests/integration/test_new_host.py: with its own
#: indicator, one computed cell made a host's intervals wider than none).
MIN_CELLS_FOR_OWN_INDICATOR = 10

# Descriptors spanning orders of magnitude enter as logarithms.
_LOGARITHMIC = {"polarisability"}


def _display_name(descriptor):
    return f"log10_{descriptor}" if descriptor in _LOGARITHMIC else descriptor


def site_kind(host, site, site_kinds=None):
    """The kind a (host, site) column shares with other hosts' columns.

    Parameters
    ----------
    host, site : str
    site_kinds : dict or None
        (host, site) -> kind, from the host file's ``site_kind`` column.

    Returns
    -------
    str
        The kind given in the host file, else the site label itself (so ``int_oct``
        in one host is the same kind as ``int_oct`` in another, and ``sub_Mg`` is
        like ``sub_Ca`` only where the host file says so).
    """
    return (site_kinds or {}).get((host, site), site)


def _host_columns(values, hosts):
    """Host descriptor columns worth a model input: known for every training host, not
    constant over them, and not a copy of an earlier column (an elemental host's min,
    mean and max coincide)."""
    rows = values.loc[list(hosts)]
    kept = []
    for name in rows.columns:
        column = rows[name].to_numpy(dtype=float)
        if np.isnan(column).any() or np.ptp(column) <= 1e-12:
            continue
        if any(np.allclose(column, rows[other].to_numpy(dtype=float)) for other in kept):
            continue
        kept.append(name)
    return kept


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
    host_values : DataFrame or None, default=None
        Host descriptors, one row per host label (``hosts.host_descriptor_table``); a
        host the cells name must have a row. None: no host descriptors.
    site_kinds : dict or None, default=None
        (host, site) -> site kind (:func:`site_kind`).

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
        Number of leading descriptor, host-relative and host descriptor columns.
    host_names_ : list of str
        The host descriptor columns among them (empty below
        ``MIN_HOSTS_FOR_HOST_DESCRIPTORS`` training hosts).
    """

    def __init__(self, descriptors, compositions, descriptor_values=None, host_values=None, site_kinds=None):
        self.descriptors = tuple(descriptors)
        self.compositions = compositions
        self.descriptor_values = descriptor_values
        self.host_values = host_values
        self.site_kinds = site_kinds

    def with_hosts(self, compositions, host_values, site_kinds):
        """A copy of this fitted encoder that also knows the hosts of ``compositions``
        (new hosts: their formulas, host descriptors and site kinds); the scaling and
        columns learned in training are kept."""
        fresh = copy.copy(self)
        fresh.compositions = compositions
        fresh.host_values = host_values
        fresh.site_kinds = site_kinds
        return fresh

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
        host_names = getattr(self, "host_names_", [])
        if host_names:
            unknown = sorted(set(cells["host"]) - set(self.host_values.index))
            if unknown:
                raise DopantgapError(
                    f"host(s) {', '.join(unknown)} have no host descriptors; give their formulas "
                    "(a host file with host,formula) so the model can place them"
                )
            rows = self.host_values.loc[list(cells["host"]), host_names]
            missing = rows.columns[rows.isna().any()].tolist()
            if missing:
                hosts = sorted(set(rows.index[rows.isna().any(axis=1)]))
                raise DopantgapError(
                    f"host(s) {', '.join(hosts)} lack {', '.join(missing)}, which the model was "
                    "fitted with; give them in the host file"
                )
            for name in host_names:
                values[name] = rows[name].to_numpy(dtype=float)
        return pd.DataFrame(values)

    def fit(self, cells, columns=None, indicator_keys=None, host_names=None):
        """Learn the column list and the scaling from training cells (a DataFrame).

        ``columns`` fixes the (host, site) column list instead of reading it from the
        cells, ``indicator_keys`` the columns with an indicator of their own and
        ``host_names`` the host descriptor inputs, so that a cross-validation fold or a
        refreshed model keeps a fitted model's input layout.
        """
        self.host_names_ = [] if host_names is None else list(host_names)
        training_hosts = list(dict.fromkeys(cells["host"]))
        counts = cells.groupby(["host", "site"]).size().to_dict()
        if host_names is None and self.host_values is not None and len(training_hosts) >= MIN_HOSTS_FOR_HOST_DESCRIPTORS:
            self.host_names_ = _host_columns(self.host_values, training_hosts)
        physical = self._physical(cells)
        self.physical_names_ = list(physical.columns)
        self.mean_ = physical.mean().to_numpy()
        spread = physical.std(ddof=0).to_numpy()
        # a descriptor constant over the training cells carries nothing; keep it finite
        self.scale_ = np.where(spread > 1e-12, spread, 1.0)
        if columns is None:
            columns = dict.fromkeys(zip(cells["host"], cells["site"]))
        self.columns_ = list(columns)
        if indicator_keys is None:
            indicator_keys = self.columns_
            if self.host_names_:
                indicator_keys = [key for key in self.columns_ if counts.get(key, 0) >= MIN_CELLS_FOR_OWN_INDICATOR]
        indicator_keys = list(indicator_keys) if len(indicator_keys) > 1 else []
        self.indicator_keys_ = indicator_keys
        self.n_physical_ = len(self.physical_names_)
        n_indicators = len(indicator_keys)
        self.indicator_columns_ = tuple(range(self.n_physical_, self.n_physical_ + n_indicators))
        start = self.n_physical_ + n_indicators
        self.label_columns_ = (start, start + 1)
        self.feature_names_ = (
            self.physical_names_
            + [f"column[{host} | {site}]" for host, site in indicator_keys]
            + ["element_label", "column_label"]
        )
        return self

    def transform(self, cells):
        """Matrix of shape (n_cells, len(feature_names_)) for the cells (a DataFrame)."""
        physical = (self._physical(cells).to_numpy() - self.mean_) / self.scale_
        index = {column: position for position, column in enumerate(self.columns_)}
        keys = list(zip(cells["host"], cells["site"]))
        column_index = np.array([index.get(key, -1) for key in keys], dtype=float)
        # model folders written before indicator_keys_ gave every column an indicator
        own_keys = getattr(self, "indicator_keys_", self.columns_ if len(self.indicator_columns_) else [])
        indicators = np.zeros((len(cells), len(own_keys)))
        if len(own_keys):
            own = {column: position for position, column in enumerate(own_keys)}
            position_of = np.array([own.get(key, -1) for key in keys])
            rows = np.flatnonzero(position_of >= 0)
            indicators[rows, position_of[rows]] = 1.0
            kinds = getattr(self, "site_kinds", None)
            own_kinds = [site_kind(host, site, kinds) for host, site in own_keys]
            alike_of = {}
            for row in np.flatnonzero(position_of < 0):
                kind = site_kind(*keys[row], kinds)
                if kind not in alike_of:
                    alike_of[kind] = [position for position, other in enumerate(own_kinds) if other == kind]
                if alike_of[kind]:
                    indicators[row, alike_of[kind]] = 1.0 / len(alike_of[kind])
        element_label = np.array(
            [atomic_number(symbol) for symbol in cells["element"]], dtype=float
        )
        return np.column_stack([physical, indicators, element_label, column_index])


class PairEncoder:
    """Encode cells as (impurity, host atoms) pairs for a model that must carry over to
    a host it never saw.

    Each cell's row is every elemental descriptor (``elements.DESCRIPTOR_NAMES``) of the
    impurity, the same descriptors of the host atoms it is compared with at its site
    (``elements.reference_atoms``: the atom a site names, else the host's atoms weighted
    by atom fraction), both standardised over the training cells, then the host file's
    properties when ``host_properties`` is given (numbers and category one-hots,
    standardised; only those known for every training host and not constant over them),
    and a 0/1 indicator per site kind (:func:`site_kind`). Impurity and host atoms get as
    many inputs each, so an isotropic kernel over them weighs the host as much as the
    impurity. With the few host inputs of a :class:`CellEncoder` instead, hosts left out
    of the real diffusion table (Wu, Mayeshiba & Morgan, Sci. Data 3, 160054, 2016) were predicted
    with RMSE 0.46 eV by the same isotropic kernel (measured once), worse than the
    impurity's mean over the other hosts (0.39 eV); the pair model predicts them with
    0.30 eV (``benchmarks/bench_new_host.py --ks 0``).

    Parameters
    ----------
    compositions : dict
        Host label -> {element symbol: count}.
    descriptor_values : DataFrame or None, default=None
        Full descriptor table the elements' numbers are read from; None: the installed
        mendeleev's.
    site_kinds : dict or None, default=None
        (host, site) -> site kind.
    host_properties : DataFrame or None, default=None
        Host-file properties, one row per host label (the property columns of
        ``hosts.host_descriptor_table``: ``hosts.host_property_columns``); None: none.

    Attributes
    ----------
    feature_names_ : list of str
        ``impurity_<descriptor>``, ``host_atoms_<descriptor>`` (descriptors constant over
        the training cells left out), the host properties kept (``property_names_``) and
        ``kind[<site kind>]``.
    property_names_ : list of str
        The host-property columns used (empty without ``host_properties``).
    """

    def __init__(self, compositions, descriptor_values=None, site_kinds=None, host_properties=None):
        self.compositions = compositions
        self.descriptor_values = descriptor_values
        self.site_kinds = site_kinds
        self.host_properties = host_properties

    def with_hosts(self, compositions, site_kinds, host_properties=None):
        """A copy of this fitted encoder that also knows the hosts of ``compositions``
        (and their host-file properties, when the encoder uses some)."""
        fresh = copy.copy(self)
        fresh.compositions = compositions
        fresh.site_kinds = site_kinds
        if host_properties is not None:
            fresh.host_properties = host_properties
        return fresh

    def _descriptors(self, cells):
        names = list(elements.DESCRIPTOR_NAMES)
        pairs = list(dict.fromkeys(zip(cells["host"], cells["site"])))
        weights = {}
        for host, site in pairs:
            if host not in self.compositions:
                raise DopantgapError(f"host {host!r} has no formula; give it in the host file (host,formula)")
            weights[(host, site)] = elements.reference_atoms(site, self.compositions[host])
        symbols = sorted(set(cells["element"]) | {symbol for found in weights.values() for symbol in found})
        table = elements.descriptor_table(symbols, values=self.descriptor_values)[names].astype(float)
        for name in _LOGARITHMIC:
            table[name] = np.log10(np.maximum(table[name].to_numpy(), 1e-3))
        impurity = table.loc[list(cells["element"])].to_numpy()
        reference = {
            key: sum(weight * table.loc[symbol].to_numpy() for symbol, weight in found.items())
            for key, found in weights.items()
        }
        host_atoms = np.array([reference[key] for key in zip(cells["host"], cells["site"])])
        found = [impurity, host_atoms.reshape(len(cells), len(names))]
        properties = getattr(self, "property_names_", [])
        if properties:
            unknown = sorted(set(cells["host"]) - set(self.host_properties.index))
            rows = self.host_properties.reindex(list(cells["host"]))[properties]
            lacking = sorted(set(unknown) | set(rows.index[rows.isna().any(axis=1)]))
            if lacking:
                raise DopantgapError(
                    f"host(s) {', '.join(lacking)} lack {', '.join(properties)} in the host file, "
                    "which the model was fitted with; give them there"
                )
            found.append(rows.to_numpy(dtype=float))
        return np.hstack(found)

    def fit(self, cells):
        """Learn the scaling and the site kinds from training cells (a DataFrame)."""
        self.property_names_ = []
        if self.host_properties is not None and len(self.host_properties.columns):
            training_hosts = [host for host in dict.fromkeys(cells["host"]) if host in self.host_properties.index]
            if len(training_hosts) == cells["host"].nunique():
                self.property_names_ = _host_columns(self.host_properties, training_hosts)
        values = self._descriptors(cells)
        spread = values.std(axis=0)
        self.kept_ = np.flatnonzero(spread > 1e-12)
        self.mean_ = values.mean(axis=0)[self.kept_]
        self.scale_ = spread[self.kept_]
        self.kinds_ = sorted({site_kind(host, site, self.site_kinds) for host, site in zip(cells["host"], cells["site"])})
        names = [f"impurity_{name}" for name in elements.DESCRIPTOR_NAMES]
        names += [f"host_atoms_{name}" for name in elements.DESCRIPTOR_NAMES]
        names += list(self.property_names_)
        self.feature_names_ = [names[position] for position in self.kept_] + [f"kind[{kind}]" for kind in self.kinds_]
        return self

    def transform(self, cells):
        """Matrix of shape (n_cells, len(feature_names_)) for the cells (a DataFrame)."""
        values = (self._descriptors(cells)[:, self.kept_] - self.mean_) / self.scale_
        kinds = [site_kind(host, site, self.site_kinds) for host, site in zip(cells["host"], cells["site"])]
        indicators = np.array([[float(kind == known) for known in self.kinds_] for kind in kinds]).reshape(
            len(cells), len(self.kinds_)
        )
        return np.column_stack([values, indicators])
