"""Domain of applicability: how far an element lies from the elements a model was trained on.

A model of impurity energies learns from the elements present in its table. For a
new element it can only interpolate between chemically similar training elements;
for an element unlike any of them (a lanthanide when the table has none) its
estimate is an extrapolation, and its stated uncertainty may be far too small.
:class:`ElementDomain` measures this distance and flags the elements that lie
outside, so that such estimates can carry a warning.

The rule
--------
1. Each element is described by the same elemental descriptors a model sees
   (:data:`dopantgap.features.DEFAULT_DESCRIPTORS` unless chosen otherwise), read from
   :func:`dopantgap.elements.descriptor_table`. Descriptors that span orders of
   magnitude (``polarisability``) enter as base-10 logarithms, exactly as
   :class:`dopantgap.features.CellEncoder` does.
2. Each descriptor is standardised with the mean and the population standard
   deviation (``ddof=0``) over the *training elements* (each element counted once,
   however many cells it has). A descriptor that is constant over them gets scale 1,
   so it adds nothing for the training elements and counts in its own units elsewhere.
3. The distance of an element is the Euclidean distance to its nearest training
   element, divided by ``sqrt(n_descriptors)``. The division makes the number read as
   "typical number of standard deviations away per descriptor" (a root mean square
   over descriptors), so it does not grow merely because more descriptors are used.
   A training element has distance 0.
4. The threshold is calibrated on the training data itself: each training element's
   *leave-one-out* distance is its distance to the nearest *other* training element,
   and ``threshold_`` is the ``quantile`` quantile of these (``numpy.quantile`` with
   ``method="higher"``, so at least that share of training elements lie within it).
   An element is *outside* when its distance exceeds ``threshold_``: with the default
   ``quantile=0.95`` it is farther from every training element than 95 % of the
   training elements are from their nearest neighbour.

5. An element of a periodic-table block (s, p, d, f: ``block_index``) that no
   training element belongs to is outside whatever its distance: its valence shell
   fills an orbital type the model has never seen, a step no descriptor average
   shows (an f-block element in a table of main-group and transition elements
   comes out close to yttrium by distance alone).

Why this rule: it needs no choice of an absolute distance, adapts to how densely the
training elements cover descriptor space, and a training element (distance 0) is
never outside. The leave-one-out calibration asks "would a training element, had it
been left out, look this isolated?"; most would not, so an element that does is
genuinely far from what the model has seen (a nearest-neighbour distance rule of
this kind is common practice for domains of applicability, no source).

With fewer than three training elements the leave-one-out distances are one value
(two elements) or do not exist (one element): there is no spread to calibrate a
threshold from, so ``threshold_`` is infinite and nothing is flagged. Distances are
still reported.

Limits
------
The distance averages over descriptors, so an element that differs strongly in one
descriptor only is diluted by the others. With the default descriptors a lanthanide
differs from yttrium mainly in ``block_index`` and ``period``: by distance alone, of the
lanthanides only Nd is flagged against the invented demo elements without La, Ce and
Gd (Eu sits 0.57 from Y, below a threshold of 0.62); rule 5 flags them all. The flag
catches elements unlike every training element; it is no proof that an unflagged
element is chemically familiar to the model. ``range_excess`` reads the descriptors one
by one instead (how far an element lies beyond the reference elements' range along its
most extreme one); the interval calibration widens cells by it, the flag does not use it.

An element inside the domain is not a promise of an accurate estimate, and an
element outside is not necessarily wrong; estimates do not replace calculation,
experiment or local safety rules.
"""

from numbers import Real

import numpy as np
from sklearn.base import BaseEstimator
from sklearn.utils.validation import check_is_fitted

from dopantgap import elements
from dopantgap.errors import DopantgapError
# _LOGARITHMIC is shared with features.CellEncoder so that the domain measures distance
# in the space the model actually sees.
from dopantgap.features import _LOGARITHMIC, DEFAULT_DESCRIPTORS

__all__ = ["ElementDomain", "HostDomain", "LevelDomain"]

_LOG_FLOOR = 1e-3  # as in features.CellEncoder: keeps log10 finite for a zero value
# fewest elements whose leave-one-out distances set a threshold (common practice, no source)
_MIN_CALIBRATION_ELEMENTS = 3
_CONSTANT_SPREAD = 1e-12


def _symbol_list(element_symbols):
    """A list of symbols; a single string counts as one symbol, not as characters."""
    if isinstance(element_symbols, str):
        return [element_symbols]
    return list(element_symbols)


class ElementDomain(BaseEstimator):
    """Distance of elements from the training elements, and an outside flag.

    Parameters
    ----------
    descriptors : sequence of str, optional
        Names from :data:`dopantgap.elements.DESCRIPTOR_NAMES`; None means
        :data:`dopantgap.features.DEFAULT_DESCRIPTORS`.
    quantile : float, default 0.95
        Share of training elements whose leave-one-out nearest-neighbour distance lies
        within the threshold; in (0, 1].
    descriptor_values : DataFrame or None, default=None
        Full descriptor table the elements' numbers are read from (``values`` of
        ``elements.descriptor_table``; a model's ``descriptor_values_``); None: the
        installed mendeleev's.

    Attributes
    ----------
    descriptors_ : tuple of str
        The descriptors used.
    symbols_ : numpy.ndarray of str
        Sorted unique canonical symbols of the training elements.
    mean_ : numpy.ndarray of shape (n_descriptors,)
        Mean of each (log-transformed where applicable) descriptor over the training
        elements.
    scale_ : numpy.ndarray of shape (n_descriptors,)
        Population standard deviation of each descriptor over the training elements;
        1 where it is zero.
    points_ : numpy.ndarray of shape (n_training, n_descriptors)
        Standardised descriptors of the training elements, rows in ``symbols_`` order.
    loo_distances_ : numpy.ndarray of shape (n_training,)
        Each training element's distance to its nearest other training element
        (infinite when there is no other one).
    threshold_ : float
        The ``quantile`` quantile of ``loo_distances_`` (``method="higher"``);
        infinite with fewer than three training elements.

    Notes
    -----
    See the module docstring for the rule and why it was chosen. Distances are
    Euclidean in standardised descriptor space divided by ``sqrt(n_descriptors)``.

    Examples
    --------
    >>> domain = ElementDomain().fit(["Al", "Ga", "In", "N", "P", "As"])
    >>> bool(domain.outside(["Ga"])[0]), bool(domain.outside(["Eu"])[0])
    (False, True)
    """

    def __init__(self, descriptors=None, quantile=0.95, descriptor_values=None):
        self.descriptors = descriptors
        self.quantile = quantile
        self.descriptor_values = descriptor_values

    def _table(self, symbols):
        return elements.descriptor_table(symbols, values=self.descriptor_values)

    def _check_parameters(self):
        names = DEFAULT_DESCRIPTORS if self.descriptors is None else self.descriptors
        names = (names,) if isinstance(names, str) else tuple(names)
        if not names:
            raise DopantgapError(
                "ElementDomain: descriptors is empty; name at least one of "
                "dopantgap.elements.DESCRIPTOR_NAMES or pass None for the defaults"
            )
        unknown = [name for name in names if name not in elements.DESCRIPTOR_NAMES]
        if unknown:
            raise DopantgapError(
                f"ElementDomain: unknown descriptor {unknown[0]!r}; "
                f"use names from dopantgap.elements.DESCRIPTOR_NAMES"
            )
        if len(set(names)) != len(names):
            raise DopantgapError(
                "ElementDomain: descriptors lists a name twice; give each descriptor once"
            )
        quantile = self.quantile
        if isinstance(quantile, bool) or not isinstance(quantile, Real) or not (
            0.0 < float(quantile) <= 1.0
        ):
            raise DopantgapError(
                f"ElementDomain: quantile={quantile!r} is not in (0, 1]; use e.g. 0.95"
            )
        return names, float(quantile)

    def _raw_matrix(self, symbols, names):
        """Descriptor values (log10 where applicable) and canonical symbols."""
        table = self._table(symbols)
        columns = []
        for name in names:
            column = table[name].to_numpy(dtype=float, copy=True)
            if name in _LOGARITHMIC:
                column = np.log10(np.maximum(column, _LOG_FLOOR))
            columns.append(column)
        matrix = np.column_stack(columns) if columns else np.empty((len(table), 0))
        return matrix.reshape(len(table), len(names)), list(table.index)

    def _scaled_distances(self, points, reference):
        """Matrix of distances between rows, divided by sqrt(n_descriptors)."""
        differences = points[:, None, :] - reference[None, :, :]
        return np.sqrt(np.einsum("ijk,ijk->ij", differences, differences) / points.shape[1])

    def fit(self, element_symbols, y=None):
        """Learn the standardisation, the training points and the threshold.

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols of the training table's elements, in any letter case; duplicates
            are collapsed.
        y : None
            Ignored; present for scikit-learn compatibility.

        Returns
        -------
        ElementDomain
            The fitted estimator.

        Raises
        ------
        DopantgapError
            If the list is empty, a symbol is not an element, a descriptor name is
            unknown or ``quantile`` is outside (0, 1].
        """
        names, quantile = self._check_parameters()
        symbols = _symbol_list(element_symbols)
        if not symbols:
            raise DopantgapError(
                "ElementDomain.fit: no training elements given; pass the symbols of the "
                "table's elements"
            )
        # canonical spelling first, so that "ga" and "Ga" collapse into one element
        canonical = list(self._table(symbols).index)
        unique = np.array(sorted(set(canonical)), dtype=object)
        raw, _ = self._raw_matrix(list(unique), names)

        mean = raw.mean(axis=0)
        spread = raw.std(axis=0, ddof=0)
        scale = np.where(spread > _CONSTANT_SPREAD, spread, 1.0)
        points = (raw - mean) / scale

        if len(unique) > 1:
            pairwise = self._scaled_distances(points, points)
            np.fill_diagonal(pairwise, np.inf)
            loo = pairwise.min(axis=1)
        else:
            loo = np.array([np.inf])
        if len(unique) < _MIN_CALIBRATION_ELEMENTS:
            # one or two elements give no spread of neighbour distances to calibrate on
            threshold = np.inf
        else:
            threshold = float(np.quantile(loo, quantile, method="higher"))

        self.descriptors_ = names
        self.symbols_ = unique
        self.mean_ = mean
        self.scale_ = scale
        self.points_ = points
        self.loo_distances_ = loo
        self.threshold_ = threshold
        self.blocks_ = np.unique(self._table(list(unique))["block_index"].to_numpy(dtype=float))
        return self

    def _standardised(self, element_symbols):
        raw, _ = self._raw_matrix(_symbol_list(element_symbols), self.descriptors_)
        return (raw - self.mean_) / self.scale_

    def _nearest(self, element_symbols, reference=None):
        check_is_fitted(self, "points_")
        scaled = self._standardised(element_symbols)
        if scaled.shape[0] == 0:
            return np.empty(0, dtype=float), np.empty(0, dtype=int)
        points = self.points_ if reference is None else self._standardised(reference)
        if points.shape[0] == 0:
            return np.full(scaled.shape[0], np.inf), np.zeros(scaled.shape[0], dtype=int)
        distances = self._scaled_distances(scaled, points)
        # argmin takes the first of tied training elements, i.e. the first in symbols_
        index = distances.argmin(axis=1)
        return distances[np.arange(len(index)), index], index

    def distance(self, element_symbols, reference=None):
        """Distance of each element from its nearest training element.

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols in any letter case; order and duplicates are kept.
        reference : sequence of str or None, default=None
            Measure to these elements instead of the training elements (standardised
            as the training elements are; for example the elements computed at one
            level of theory). An empty reference gives infinite distances.

        Returns
        -------
        numpy.ndarray of float
            One value per symbol: Euclidean distance in standardised descriptor space
            divided by ``sqrt(n_descriptors)``; 0 for a training element.

        Raises
        ------
        sklearn.exceptions.NotFittedError
            Before :meth:`fit`.
        DopantgapError
            If a symbol is not an element.
        """
        return self._nearest(element_symbols, reference)[0]

    def outside(self, element_symbols, reference=None):
        """Whether each element lies outside the domain (``distance > threshold_`` or a
        block new to the training elements).

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols in any letter case; order and duplicates are kept.
        reference : sequence of str or None, default=None
            As in :meth:`distance`; the threshold stays the training elements' own.

        Returns
        -------
        numpy.ndarray of bool
            One flag per symbol; always False for a reference (by default training)
            element and when fitted on fewer than three elements.
        """
        far = self.distance(element_symbols, reference) > self.threshold_
        return far | self.new_block(element_symbols, reference)

    def range_excess(self, element_symbols, reference=None):
        """How far each element lies beyond the range of the training (or reference)
        elements along its most extreme descriptor.

        The distance averages over descriptors; this reads them one by one. An element
        inside the reference elements' [min, max] on every descriptor gets 0; one that
        lies beyond it on some descriptor gets the largest such overshoot, in the
        training elements' standard deviations (a 4d metal against the 3d metals only:
        its period alone, which no reference element varies).

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols in any letter case; order and duplicates are kept.
        reference : sequence of str or None, default=None
            As in :meth:`distance`. An empty reference gives infinite values.

        Returns
        -------
        numpy.ndarray of float
            One non-negative value per symbol; 0 for a reference element.
        """
        check_is_fitted(self, "points_")
        scaled = self._standardised(element_symbols)
        if scaled.shape[0] == 0:
            return np.empty(0, dtype=float)
        points = self.points_ if reference is None else self._standardised(reference)
        if points.shape[0] == 0:
            return np.full(scaled.shape[0], np.inf)
        below = points.min(axis=0) - scaled
        above = scaled - points.max(axis=0)
        return np.maximum(np.maximum(below, above).max(axis=1), 0.0)

    def new_block(self, element_symbols, reference=None):
        """Whether each element belongs to a block no training (or reference) element
        belongs to.

        Parameters
        ----------
        element_symbols : sequence of str
        reference : sequence of str or None, default=None

        Returns
        -------
        numpy.ndarray of bool
        """
        check_is_fitted(self, "points_")
        symbols = _symbol_list(element_symbols)
        if not symbols:
            return np.zeros(0, dtype=bool)
        blocks = self._table(symbols)["block_index"].to_numpy(dtype=float)
        known = self.blocks_
        if reference is not None:
            reference = _symbol_list(reference)
            known = self._table(reference)["block_index"].to_numpy(dtype=float) if reference else []
        return ~np.isin(blocks, known)

    def nearest(self, element_symbols, reference=None):
        """Symbol of the nearest training element for each element.

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols in any letter case; order and duplicates are kept.
        reference : sequence of str or None, default=None
            As in :meth:`distance` (must not be empty).

        Returns
        -------
        numpy.ndarray of object
            One canonical symbol per input; the element itself for a training
            element (unless another training element has identical descriptor
            values); on a tie the first in ``symbols_`` (or ``reference``) order.
        """
        index = self._nearest(element_symbols, reference)[1]
        if reference is None:
            return np.asarray(self.symbols_[index], dtype=object)
        canonical = list(self._table(_symbol_list(reference)).index)
        return np.asarray([canonical[position] for position in index], dtype=object)


class LevelDomain(BaseEstimator):
    """Distance of each cell's element from the elements computed at the cell's level.

    An expensive-level estimate rests on the few elements computed at that level: an
    element close to the table's elements can still be unlike every one of them (a
    halogen when only metals were computed with the hybrid functional). The distance of
    a cell (element, host, method, quantity) is measured, with :class:`ElementDomain`'s
    standardisation and threshold (fitted on all the table's elements), to the elements
    computed for that quantity at that method in that host, or in any host when that
    host has fewer than ``min_host_elements`` of them. The new-block rule applies to
    the same reference elements.

    Parameters
    ----------
    descriptors : sequence of str, optional
        As in :class:`ElementDomain`.
    quantile : float, default 0.95
        As in :class:`ElementDomain`.
    min_host_elements : int, default 10
        Fewest elements computed at a level in one host for that host's own set to
        serve as the reference; the same count as
        ``features.MIN_CELLS_FOR_OWN_INDICATOR``, below which a host's cells are
        placed through the other hosts (measured in tests/integration/test_new_host.py:
        with 3, a host's intervals widened from one computed cell to five, as its own
        few elements became the reference).
    descriptor_values : DataFrame or None, default=None
        As in :class:`ElementDomain`.

    Attributes
    ----------
    elements_ : ElementDomain
        Fitted on every element of the table: the standardisation and the threshold.
    computed_ : dict
        (quantity, method) and (quantity, method, host) -> sorted list of the elements
        computed there.

    Examples
    --------
    >>> import pandas as pd
    >>> rows = [(e, "MgO", "sub_Mg", m, "E_sol", 1.0) for e in ("Ca", "Sr", "Ba", "Zn", "Cd", "Cl")
    ...         for m in ("gga",)] + [(e, "MgO", "sub_Mg", "hyb", "E_sol", 1.2) for e in ("Ca", "Sr", "Ba", "Zn")]
    >>> table = pd.DataFrame(rows, columns=["element", "host", "site", "method", "quantity", "value"])
    >>> domain = LevelDomain().fit(table)
    >>> cells = table[["element", "host", "site", "quantity"]].assign(method="hyb").iloc[[0, 5]]
    >>> domain.outside(cells).tolist()
    [False, True]
    """

    def __init__(self, descriptors=None, quantile=0.95, min_host_elements=10, descriptor_values=None):
        self.descriptors = descriptors
        self.quantile = quantile
        self.min_host_elements = min_host_elements
        self.descriptor_values = descriptor_values

    def fit(self, table, y=None):
        """Learn the reference elements of every level (and host) of a long table.

        Parameters
        ----------
        table : DataFrame
            Columns element, host, method, quantity (others ignored).
        y : None
            Ignored.

        Returns
        -------
        LevelDomain
        """
        self.elements_ = ElementDomain(
            descriptors=self.descriptors, quantile=self.quantile, descriptor_values=self.descriptor_values
        ).fit(list(table["element"]))
        computed = {}
        for key, rows in table.groupby(["quantity", "method"], sort=False):
            computed[tuple(key)] = sorted(set(rows["element"]))
        for key, rows in table.groupby(["quantity", "method", "host"], sort=False):
            computed[tuple(key)] = sorted(set(rows["element"]))
        self.computed_ = computed
        return self

    def reference(self, host, method, quantity):
        """The elements a cell of this host, method and quantity is measured against."""
        check_is_fitted(self, "computed_")
        own = self.computed_.get((quantity, method, host), [])
        if len(own) >= self.min_host_elements:
            return own
        return self.computed_.get((quantity, method), [])

    def _per_reference(self, cells, measure):
        cells = cells.reset_index(drop=True)
        result = None
        for (host, method, quantity), rows in cells.groupby(["host", "method", "quantity"], sort=False):
            symbols = list(rows["element"])
            unique, inverse = np.unique(np.asarray(symbols, dtype=str), return_inverse=True)
            values = measure(list(unique), self.reference(host, method, quantity))[inverse]
            if result is None:
                result = np.empty(len(cells), dtype=values.dtype)
            result[cells.index.get_indexer(rows.index)] = values
        return result if result is not None else np.empty(0)

    def distance(self, cells):
        """Distance of each cell's element from its level's (and host's) elements.

        Parameters
        ----------
        cells : DataFrame
            Columns element, host, method, quantity.

        Returns
        -------
        numpy.ndarray of float
            As :meth:`ElementDomain.distance`; 0 where the element is computed at the
            level (in the host); infinite for a level with no computed element.
        """
        return self._per_reference(cells, self.elements_.distance)

    def range_excess(self, cells):
        """Overshoot of each cell's element beyond the range of its level's (and host's)
        elements, along its most extreme descriptor (:meth:`ElementDomain.range_excess`).

        Parameters
        ----------
        cells : DataFrame
            Columns element, host, method, quantity.

        Returns
        -------
        numpy.ndarray of float
        """
        return self._per_reference(cells, self.elements_.range_excess)

    def outside(self, cells):
        """Whether each cell's element lies outside its level's domain (distance over the
        table's threshold, or a block no reference element belongs to).

        Parameters
        ----------
        cells : DataFrame
            Columns element, host, method, quantity.

        Returns
        -------
        numpy.ndarray of bool
        """
        return self._per_reference(cells, self.elements_.outside).astype(bool)

    def nearest(self, cells):
        """Nearest reference element of each cell's element.

        Parameters
        ----------
        cells : DataFrame
            Columns element, host, method, quantity.

        Returns
        -------
        numpy.ndarray of object
            A symbol per cell (empty string for a level with no computed element).
        """

        def measure(symbols, reference):
            if not reference:
                return np.array([""] * len(symbols), dtype=object)
            return self.elements_.nearest(symbols, reference)

        return self._per_reference(cells, measure)


class HostDomain(BaseEstimator):
    """Distance of hosts from the training hosts, in host descriptors, and an outside flag.

    The rule is :class:`ElementDomain`'s, applied to host descriptor rows
    (``hosts.host_descriptor_table``): columns known for every training host and not
    constant over them are standardised over the training hosts; a host's distance is
    the Euclidean distance to the nearest training host divided by the square root of
    the column count; a host is outside when it exceeds the ``quantile`` quantile of the
    training hosts' leave-one-out distances (infinite threshold below three hosts).

    Parameters
    ----------
    quantile : float, default 0.95

    Attributes
    ----------
    hosts_ : list of str
    columns_ : list of str
    threshold_ : float

    Examples
    --------
    >>> from dopantgap.hosts import host_descriptor_table
    >>> known = host_descriptor_table({h: {h: 1.0} for h in ["Cu", "Ag", "Au", "Ni", "Pd", "Pt"]})
    >>> domain = HostDomain().fit(known)
    >>> new = host_descriptor_table({"Cs": {"Cs": 1.0}, "Rh": {"Rh": 1.0}})
    >>> [bool(flag) for flag in domain.outside(new)]
    [True, False]
    """

    def __init__(self, quantile=0.95):
        self.quantile = quantile

    def fit(self, host_values, y=None):
        """Learn the training hosts from their descriptor rows (a DataFrame indexed by host)."""
        self.hosts_ = [str(host) for host in host_values.index]
        columns = []
        for name in host_values.columns:
            column = host_values[name].to_numpy(dtype=float)
            if len(column) and not np.isnan(column).any() and np.ptp(column) > 1e-12:
                columns.append(name)
        self.columns_ = columns
        points = host_values[columns].to_numpy(dtype=float)
        self.mean_ = points.mean(axis=0) if len(points) else np.zeros(len(columns))
        spread = points.std(axis=0) if len(points) else np.ones(len(columns))
        self.scale_ = np.where(spread > 1e-12, spread, 1.0)
        self.points_ = (points - self.mean_) / self.scale_
        loo = np.full(len(points), np.inf)
        if len(points) > 1 and columns:
            pairwise = self._pairwise(self.points_, self.points_)
            np.fill_diagonal(pairwise, np.inf)
            loo = pairwise.min(axis=1)
        self.loo_distances_ = loo
        self.threshold_ = (
            float(np.quantile(loo, self.quantile, method="higher")) if len(points) >= 3 and columns else np.inf
        )
        return self

    def _pairwise(self, first, second):
        difference = first[:, None, :] - second[None, :, :]
        return np.sqrt(np.sum(difference**2, axis=2) / max(len(self.columns_), 1))

    def _nearest(self, host_values):
        if not self.columns_ or not len(self.points_):
            return np.zeros(len(host_values)), np.full(len(host_values), None, dtype=object)
        points = (host_values[self.columns_].to_numpy(dtype=float) - self.mean_) / self.scale_
        pairwise = self._pairwise(points, self.points_)
        # a host the file gives no value for in a column cannot be placed: infinitely far
        pairwise[np.isnan(pairwise)] = np.inf
        nearest = np.argmin(pairwise, axis=1)
        return pairwise[np.arange(len(points)), nearest], np.array(self.hosts_, dtype=object)[nearest]

    def ranked(self, host_values):
        """For each host row, the training hosts from nearest to farthest (list of lists)."""
        if not self.columns_ or not len(self.points_):
            return [list(self.hosts_) for _ in range(len(host_values))]
        points = (host_values[self.columns_].to_numpy(dtype=float) - self.mean_) / self.scale_
        pairwise = self._pairwise(points, self.points_)
        pairwise[np.isnan(pairwise)] = np.inf
        return [[self.hosts_[i] for i in np.argsort(row, kind="stable")] for row in pairwise]

    def distance(self, host_values):
        """Distance of each host row to its nearest training host (0 for a training host)."""
        return self._nearest(host_values)[0]

    def nearest(self, host_values):
        """The nearest training host of each host row."""
        return self._nearest(host_values)[1]

    def outside(self, host_values):
        """Whether each host row lies farther from every training host than the threshold."""
        # a host exactly as far as the farthest training host lies from its neighbour is
        # at the limit, not beyond it; rounding in the host file's numbers must not flip it
        return self.distance(host_values) > self.threshold_ * (1.0 + 1e-6)
