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
element is chemically familiar to the model.

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

__all__ = ["ElementDomain"]

_LOG_FLOOR = 1e-3  # as in features.CellEncoder: keeps log10 finite for a zero value
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

    def __init__(self, descriptors=None, quantile=0.95):
        self.descriptors = descriptors
        self.quantile = quantile

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
        table = elements.descriptor_table(symbols)
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
        canonical = list(elements.descriptor_table(symbols).index)
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
        self.blocks_ = np.unique(elements.descriptor_table(list(unique))["block_index"].to_numpy(dtype=float))
        return self

    def _nearest(self, element_symbols):
        check_is_fitted(self, "points_")
        raw, _ = self._raw_matrix(_symbol_list(element_symbols), self.descriptors_)
        if raw.shape[0] == 0:
            return np.empty(0, dtype=float), np.empty(0, dtype=int)
        scaled = (raw - self.mean_) / self.scale_
        distances = self._scaled_distances(scaled, self.points_)
        # argmin takes the first of tied training elements, i.e. the first in symbols_
        index = distances.argmin(axis=1)
        return distances[np.arange(len(index)), index], index

    def distance(self, element_symbols):
        """Distance of each element from its nearest training element.

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols in any letter case; order and duplicates are kept.

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
        return self._nearest(element_symbols)[0]

    def outside(self, element_symbols):
        """Whether each element lies outside the domain (``distance > threshold_`` or a
        block new to the training elements).

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols in any letter case; order and duplicates are kept.

        Returns
        -------
        numpy.ndarray of bool
            One flag per symbol; always False for a training element and when fitted
            on fewer than three elements.
        """
        far = self.distance(element_symbols) > self.threshold_
        return far | self.new_block(element_symbols)

    def new_block(self, element_symbols):
        """Whether each element belongs to a block no training element belongs to.

        Parameters
        ----------
        element_symbols : sequence of str

        Returns
        -------
        numpy.ndarray of bool
        """
        check_is_fitted(self, "points_")
        symbols = _symbol_list(element_symbols)
        if not symbols:
            return np.zeros(0, dtype=bool)
        blocks = elements.descriptor_table(symbols)["block_index"].to_numpy(dtype=float)
        return ~np.isin(blocks, self.blocks_)

    def nearest(self, element_symbols):
        """Symbol of the nearest training element for each element.

        Parameters
        ----------
        element_symbols : sequence of str
            Symbols in any letter case; order and duplicates are kept.

        Returns
        -------
        numpy.ndarray of object
            One canonical symbol per input; the element itself for a training
            element (unless another training element has identical descriptor
            values); on a tie the first in ``symbols_`` order.
        """
        index = self._nearest(element_symbols)[1]
        return np.asarray(self.symbols_[index], dtype=object)
