"""Why does the model predict what it predicts? SHAP values in named element descriptors.

What is explained
-----------------
A *target* is one number the fitted surrogate gives for an element:

* a **column** target: the model's mean for one host/site/method/quantity column of the
  table, named ``quantity | host | site | method`` (``E_sol | ZnS | sub_Zn | gga``);
* a **site-choice** target: the difference of two such columns of one host, method and
  quantity, ``quantity | host | method | site_a - site_b``
  (``E_sol | ZnS | gga | int_tet_Zn - sub_Zn``); positive means site_b lies lower.
  For each host, method and quantity with two or more sites, every site is compared
  with one *reference site*: the site most often the lowest among the table's own
  computed values (counted over the elements with two or more computed sites there;
  a tie goes to the site first seen in the table).

Each target is written as one function of the element,

    target(element) = F(d) + offset(element),

where ``d`` is the element's vector of elemental descriptors as the model sees them
(``surrogate.descriptors_``, for example ``log10_polarisability``; plus any descriptor a
host-relative term is made from that the model does not list itself). The host-relative
terms of the encoder (size misfit, electronegativity, valence, ionisation energy and
electron affinity differences to the site's reference atoms) are recomputed from ``d``
for the target's host and site, so they are attributed to the descriptor they are made
of (size misfit to the covalent radius, and so on): the covalent radius of a
site-choice target carries the size misfits of both sites. A column learned at an
expensive level is the chain of its stages (value at the cheapest level plus each
correction); the chain is summed before it is explained. ``F`` is the model's mean for
an element it has never seen (no learned element offset).

``offset(element)`` is what the model learned about the element itself and no
descriptor explains (the Gaussian process's shared element term, the boosted trees'
shrunk element offset): the prediction with the element's own label minus the
prediction with an unseen label. It is reported as the pseudo-feature
:data:`OFFSET_FEATURE`; it is 0 for an element the table does not contain.

The explained number is the model's own learned function: where the table holds a
computed value at a cheaper level, ``fill`` uses that value below a correction, while
the explanation uses the model's estimate of it (the explanation is of the model,
not of the table). For a cell whose whole chain is predicted the two agree.

How the SHAP values are computed
--------------------------------
Interventional (background) Shapley values of ``F`` over the descriptors (Lundberg &
Lee 2017, "A Unified Approach to Interpreting Model Predictions"; Janzing, Minorics &
Bloebaum 2020 on the interventional form): the background is a sample of
:data:`BACKGROUND_SIZE` elements of the table (drawn with ``random_state``), and the
value of a set of descriptors is ``F`` averaged over the background with the other
descriptors taken from the background element. With 12 descriptors or fewer, every
subset is enumerated (``shap.explainers.Exact``: exact for that background); with more,
``shap.explainers.Permutation`` samples orderings. Both satisfy local accuracy:

    base_value + sum of descriptor SHAP values + offset = prediction,

with ``base_value`` the mean of ``F`` over the background.

For boosted trees, shap's exact tree explainer is used instead (interventional Tree
SHAP, Lundberg et al. 2020): the trees split encoded inputs, but for a fixed host/site
column every encoded input is an increasing or decreasing affine function of one
descriptor, so each tree is rewritten as a tree over the descriptors (thresholds mapped
back, children swapped where the slope is negative, splits on the constant column
indicators decided outright). A target, chain of stages or site difference included,
is then one sum of trees, and Tree SHAP gives its exact interventional Shapley values
per descriptor for the same background, the values the enumeration gives (checked in
the tests to 1e-6 eV), in a fraction of the time. Site-choice and chained targets are
explained as they are, one function each (Shapley values are linear in the model, so
they also equal the differences and sums of the columns' values).

For the Gaussian process the mean is evaluated directly from its kernel parts (the
descriptor part of the covariance is shared by every column whose host-relative terms
have the same reference atoms), checked at run time against the learner's own
``predict``; any other learner, or a kernel of another form, goes through ``predict``.

Importance is mean |SHAP| in eV over the table's own elements (added elements are
explained but do not change the importance).

Outputs
-------
:func:`write_explanation` writes ``targets.csv``, ``importance.csv`` (target, feature,
importance), ``shap_values.csv`` (target, element, feature, feature_value, shap) and
``base_values.csv`` (target, element, base_value, prediction). :func:`write_figures`
draws ``summary_<slug>.png`` per target and ``breakdown_<slug>_<Element>.png`` per
target and chosen element (``dopantgap explain`` chooses the ``--elements`` given, or
else the table's first three elements). Measured on ``models/demo`` (invented demo
table, 40 targets x 57 elements, two cores): explain 11 s, plus about 10 s for shap's
one-off compilation in each new process; the command, figures included, 46 s
(``benchmarks/bench_explain.py``).
"""

import re
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, Product, Sum, WhiteKernel

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.learners import BoostLearner, ColumnMeanLearner, GPLearner, OnColumns, ShiftPriorLearner
from dopantgap.symbols import atomic_number, normalise_symbol
from dopantgap.table import write_table

__all__ = [
    "BACKGROUND_SIZE",
    "EXPLANATION_FILES",
    "OFFSET_FEATURE",
    "Explanation",
    "descriptor_matrix",
    "explain_model",
    "explanation_features",
    "shapley_values",
    "tree_shapley_values",
    "target_slug",
    "target_slugs",
    "write_explanation",
    "write_figures",
]

#: Name of the pseudo-feature holding the element's learned offset.
OFFSET_FEATURE = "element's own offset (not from descriptors)"
#: Background elements drawn from the table (the base value is F averaged over them).
BACKGROUND_SIZE = 16
#: Files written by :func:`write_explanation`.
EXPLANATION_FILES = ("targets.csv", "importance.csv", "shap_values.csv", "base_values.csv")

# Up to this many features every subset is enumerated (2^12 coalitions per element).
_MAX_EXACT_FEATURES = 12
# Orderings sampled per element beyond that (antithetic pairs; common practice, no source).
_PERMUTATION_EVALS_PER_FEATURE = 40
# Rows of descriptor matrices evaluated at once (keeps kernel blocks in cache, and
# the covariance a learner's own predict forms small).
_CHUNK_ROWS = 1024
# Label of an element the model never saw: no atomic number is 0.
_UNSEEN_LABEL = 0.0
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


def _import_shap():
    # shap's colour maps call matplotlib methods that announce a deprecation on import
    with warnings.catch_warnings():
        warnings.filterwarnings(
            "ignore",
            message=r"The set_\w+ function will be deprecated",
            category=PendingDeprecationWarning,
        )
        import shap
    return shap


@dataclass
class Explanation:
    """SHAP explanation of a fitted surrogate.

    Attributes
    ----------
    targets : DataFrame
        target, kind ("column" or "site-choice"), quantity, host, method, site (column
        targets), site_a, site_b (site-choice targets: site_a minus site_b).
    importance : DataFrame
        target, feature, importance (mean |SHAP| in eV over the table's elements),
        sorted by target then importance, largest first.
    shap_values : DataFrame
        Long: target, element, feature, feature_value, shap (eV). The offset
        pseudo-feature has no feature value.
    base_values : DataFrame
        target, element, base_value, prediction (eV): base_value plus the element's
        SHAP values is its prediction.
    features : tuple of str
        Descriptor names in the order used, then :data:`OFFSET_FEATURE`.
    background : tuple of str
        The background elements.
    shap_method : str
        How the values were computed: ``"tree"`` (interventional Tree SHAP on the
        boosted trees rewritten over the descriptors), ``"exact enumeration"`` or
        ``"sampled orderings"`` (model-agnostic).
    """

    targets: pd.DataFrame
    importance: pd.DataFrame
    shap_values: pd.DataFrame
    base_values: pd.DataFrame
    features: tuple
    background: tuple
    shap_method: str = "exact enumeration"


# --------------------------------------------------------------------------- features


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


def descriptor_matrix(features, element_symbols):
    """Descriptor values of elements, one row each, as the encoder uses them.

    Parameters
    ----------
    features : sequence of str
        From :func:`explanation_features`; a ``log10_`` name is the logarithm of the
        descriptor (floored at 1e-3 as in ``features.CellEncoder``).
    element_symbols : sequence of str
        Canonical element symbols.

    Returns
    -------
    ndarray of shape (n_elements, n_features)
    """
    table = elements.descriptor_table(list(element_symbols))
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
        reference_table = elements.descriptor_table(list(reference))
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


# --------------------------------------------------------------------------- stages


class _Unsupported(Exception):
    """A kernel form the direct Gaussian-process evaluation does not know."""


def _flatten(kernel, kind):
    if isinstance(kernel, kind):
        return _flatten(kernel.k1, kind) + _flatten(kernel.k2, kind)
    return [kernel]


class _PhysicalFactor:
    """Cross-covariance of query rows with the training rows for one kernel factor.

    Stationary Matern (nu 0.5, 1.5, 2.5) and RBF factors are evaluated from squared
    distances formed by a matrix product, in place; other kernels by their own call.
    """

    def __init__(self, factor, train):
        self.columns = [int(column) for column in factor.columns]
        inner = factor.kernel
        self.factor = factor
        self.train = train
        self.kind = None
        if isinstance(inner, Matern) and float(inner.nu) in (0.5, 1.5, 2.5):
            self.kind = float(inner.nu)
        elif type(inner) is RBF:
            self.kind = "rbf"
        if self.kind is not None:
            self.length_scale = np.asarray(inner.length_scale, dtype=float)
            self.scaled_train = train[:, self.columns] / self.length_scale
            self.train_norms = np.einsum("ij,ij->i", self.scaled_train, self.scaled_train)

    def __call__(self, queries):
        if self.kind is None:
            # the factor takes full rows; only its own columns matter
            rows = np.zeros((queries.shape[0], self.train.shape[1]))
            rows[:, : queries.shape[1]] = queries
            return self.factor(rows, self.train)
        scaled = queries[:, self.columns] / self.length_scale
        squared = scaled @ self.scaled_train.T
        squared *= -2.0
        squared += np.einsum("ij,ij->i", scaled, scaled)[:, None]
        squared += self.train_norms[None, :]
        np.maximum(squared, 0.0, out=squared)
        if self.kind == "rbf":
            squared *= -0.5
            return np.exp(squared, out=squared)
        distance = np.sqrt(squared, out=squared)
        if self.kind == 0.5:
            distance *= -1.0
            return np.exp(distance, out=distance)
        distance *= np.sqrt(3.0) if self.kind == 1.5 else np.sqrt(5.0)
        decay = np.exp(-distance)
        if self.kind == 1.5:
            distance += 1.0
        else:
            polynomial = distance * distance
            polynomial /= 3.0
            polynomial += distance
            polynomial += 1.0
            distance = polynomial
        distance *= decay
        return distance


def _inner_learner(learner):
    """The learner that carries a stage's descriptors, and the constant added to it: a
    correction's shift prior around a learner predicts its pooled shift plus that learner."""
    inner = getattr(learner, "residual_learner_", None) if isinstance(learner, ShiftPriorLearner) else None
    if inner is None:
        return learner, 0.0
    return inner, float(learner.pooled_)


class _StageColumns:
    """Mean of one stage for several columns, for elements given by their descriptors."""

    def __init__(self, stage, columns, features, compositions):
        self.stage = stage
        self.columns = list(columns)
        self.n_features = len(features)
        self.encodings = [
            _ColumnEncoding(stage.encoder, features, host, site, compositions) for host, site in self.columns
        ]
        self.fast = None
        # a correction's shift prior around a learner adds a constant (its pooled shift)
        self.learner, self.offset = _inner_learner(stage.learner)
        if isinstance(self.learner, GPLearner):
            try:
                self.fast = self._prepare_fast()
            except _Unsupported:
                self.fast = None
        elif isinstance(self.learner, BoostLearner):
            # the mean only: the learner's predict also forms an n x n covariance
            self.fast = {"boost": True}

    # generic path: the learner's own predict on encoded rows
    def predict_rows(self, descriptors, labels):
        out = np.empty((descriptors.shape[0], len(self.columns)))
        for position, encoding in enumerate(self.encodings):
            for start in range(0, descriptors.shape[0], _CHUNK_ROWS):
                part = slice(start, start + _CHUNK_ROWS)
                label_part = labels if np.ndim(labels) == 0 else np.asarray(labels)[part]
                out[part, position] = self.stage.learner.predict(
                    encoding.rows(descriptors[part], label_part)
                )
        return out

    # direct Gaussian-process path
    def _prepare_fast(self):
        regressor = self.learner.regressor_
        n_physical = self.stage.encoder.n_physical_
        physical = set(range(n_physical))
        train = regressor.X_train_
        alpha = np.asarray(regressor.alpha_, dtype=float)
        if alpha.ndim != 1 or np.ndim(regressor._y_train_std) != 0:
            raise _Unsupported
        terms = []
        for term in _flatten(regressor.kernel_, Sum):
            factors = _flatten(term, Product)
            if any(isinstance(factor, WhiteKernel) for factor in factors):
                continue  # no covariance between a new point and a training point
            constant, physical_factors, column_factors = 1.0, [], []
            for factor in factors:
                if isinstance(factor, ConstantKernel):
                    constant *= float(factor.constant_value)
                elif isinstance(factor, OnColumns):
                    used = {int(column) for column in factor.columns}
                    if used <= physical:
                        physical_factors.append(_PhysicalFactor(factor, train))
                    elif not used & physical:
                        column_factors.append(factor)
                    else:
                        raise _Unsupported
                else:
                    raise _Unsupported
            weights = np.empty((len(train), len(self.columns)))
            for position, encoding in enumerate(self.encodings):
                # the physical block does not matter to factors on the other columns
                row = encoding.rows(np.zeros((1, self.n_features)), _UNSEEN_LABEL)
                value = np.full(len(train), constant)
                for factor in column_factors:
                    value = value * factor(row, train)[0]
                weights[:, position] = value * alpha
            if np.any(weights != 0.0):
                terms.append((physical_factors, weights))
        groups = {}
        for position, encoding in enumerate(self.encodings):
            groups.setdefault(encoding.physical_key, []).append(position)
        return {
            "terms": terms,
            "groups": [(self.encodings[members[0]], np.array(members)) for members in groups.values()],
            "mean": float(regressor._y_train_mean) + self.offset,
            "scale": float(regressor._y_train_std),
        }

    def _predict_boost(self, descriptors):
        learner = self.learner
        labels = {int(column) for column in learner.label_columns}
        out = np.empty((descriptors.shape[0], len(self.columns)))
        for position, encoding in enumerate(self.encodings):
            rows = encoding.rows(descriptors, _UNSEEN_LABEL)
            kept = [column for column in range(rows.shape[1]) if column not in labels]
            inputs = rows[:, kept] if kept else np.zeros((rows.shape[0], 1))
            # an unseen label has no offset: the members' mean is the prediction
            out[:, position] = np.mean([member.predict(inputs) for member in learner.members_], axis=0)
        return out + self.offset

    def _predict_fast(self, descriptors):
        fast = self.fast
        if "boost" in fast:
            return self._predict_boost(descriptors)
        out = np.zeros((descriptors.shape[0], len(self.columns)))
        for start in range(0, descriptors.shape[0], _CHUNK_ROWS):
            part = slice(start, start + _CHUNK_ROWS)
            for encoding, members in fast["groups"]:
                queries = encoding.physical(descriptors[part])
                total = np.zeros((queries.shape[0], len(members)))
                for physical_factors, weights in fast["terms"]:
                    if physical_factors:
                        block = physical_factors[0](queries)
                        for factor in physical_factors[1:]:
                            block *= factor(queries)
                        total += block @ weights[:, members]
                    else:
                        total += weights[:, members].sum(axis=0)
                out[part, members] = total
        return out * fast["scale"] + fast["mean"]

    def check_fast(self, descriptors):
        """Keep the direct path only if it reproduces the learner's predict."""
        if self.fast is None:
            return
        direct = self._predict_fast(descriptors)
        reference = self.predict_rows(descriptors, _UNSEEN_LABEL)
        if not np.allclose(direct, reference, rtol=1e-7, atol=1e-9):
            self.fast = None

    def predict_unseen(self, descriptors):
        """Mean for never-seen elements with these descriptors, one column per column."""
        if self.fast is not None:
            return self._predict_fast(descriptors)
        return self.predict_rows(descriptors, _UNSEEN_LABEL)


# --------------------------------------------------------------------------- targets


def _reference_site(rows, sites):
    """Site most often the lowest among the computed sites of elements with two or more."""
    counts = dict.fromkeys(sites, 0)
    for _element, part in rows.groupby("element", sort=False):
        if part["site"].nunique() < 2:
            continue
        lowest = part.loc[part["value"].idxmin(), "site"]
        counts[lowest] += 1
    return max(sites, key=lambda site: (counts[site], -sites.index(site)))


def _target_table(surrogate):
    """Every column target and site-choice target of the surrogate's table."""
    table = surrogate.table_
    records = []
    columns = table[["quantity", "host", "site", "method"]].drop_duplicates()
    for quantity, host, site, method in columns.itertuples(index=False, name=None):
        records.append(
            {
                "target": f"{quantity} | {host} | {site} | {method}",
                "kind": "column",
                "quantity": quantity,
                "host": host,
                "method": method,
                "site": site,
                "site_a": "",
                "site_b": "",
            }
        )
    groups = table[["quantity", "host", "method"]].drop_duplicates()
    for quantity, host, method in groups.itertuples(index=False, name=None):
        rows = table[(table["quantity"] == quantity) & (table["host"] == host) & (table["method"] == method)]
        sites = list(dict.fromkeys(rows["site"]))
        if len(sites) < 2:
            continue
        reference = _reference_site(rows, sites)
        for site in sites:
            if site == reference:
                continue
            records.append(
                {
                    "target": f"{quantity} | {host} | {method} | {site} - {reference}",
                    "kind": "site-choice",
                    "quantity": quantity,
                    "host": host,
                    "method": method,
                    "site": "",
                    "site_a": site,
                    "site_b": reference,
                }
            )
    return pd.DataFrame(
        records, columns=["target", "kind", "quantity", "host", "method", "site", "site_a", "site_b"]
    )


def _chain(surrogate, quantity, method, host, site):
    """Stage-column units whose sum is the model's value of a column."""
    methods = surrogate.quantity_levels_[quantity]
    position = methods.index(method)
    units = []
    while True:
        units.append((quantity, methods[position], host, site))
        stage = surrogate.stages_[(quantity, methods[position])]
        if stage.kind != "correction" or position == 0:
            return units
        position -= 1


class _TargetFunction:
    """All chosen targets as one vector function of the descriptors."""

    def __init__(self, surrogate, targets, features):
        coefficients = {}
        rows = []
        for target in targets.itertuples(index=False):
            if target.kind == "column":
                parts = [(1.0, target.site)]
            else:
                parts = [(1.0, target.site_a), (-1.0, target.site_b)]
            row = {}
            for sign, site in parts:
                for unit in _chain(surrogate, target.quantity, target.method, target.host, site):
                    coefficients.setdefault(unit, len(coefficients))
                    row[unit] = row.get(unit, 0.0) + sign
            rows.append(row)
        self.units = list(coefficients)
        self.matrix = np.zeros((len(rows), len(self.units)))
        for position, row in enumerate(rows):
            for unit, value in row.items():
                self.matrix[position, coefficients[unit]] = value
        by_stage = {}
        for position, (quantity, method, host, site) in enumerate(self.units):
            by_stage.setdefault((quantity, method), []).append((position, (host, site)))
        self.stages = []
        for key, members in by_stage.items():
            evaluator = _StageColumns(
                surrogate.stages_[key], [column for _, column in members], features, surrogate.compositions_
            )
            self.stages.append((np.array([position for position, _ in members]), evaluator))

    def check(self, descriptors):
        for _positions, evaluator in self.stages:
            evaluator.check_fast(descriptors)

    def units_unseen(self, descriptors):
        out = np.empty((descriptors.shape[0], len(self.units)))
        for positions, evaluator in self.stages:
            out[:, positions] = evaluator.predict_unseen(descriptors)
        return out

    def __call__(self, descriptors):
        descriptors = np.asarray(descriptors, dtype=float)
        # masked rows repeat where background elements share descriptor values
        unique, inverse = np.unique(descriptors, axis=0, return_inverse=True)
        return (self.units_unseen(unique) @ self.matrix.T)[inverse.ravel()]

    def offsets(self, descriptors, symbols):
        """Prediction with each element's own label minus that with an unseen label."""
        labels = np.array([atomic_number(symbol) for symbol in symbols], dtype=float)
        out = np.empty((descriptors.shape[0], len(self.units)))
        for positions, evaluator in self.stages:
            own = evaluator.predict_rows(descriptors, labels)
            unseen = evaluator.predict_rows(descriptors, _UNSEEN_LABEL)
            out[:, positions] = own - unseen
        return out @ self.matrix.T


# --------------------------------------------------------------------------- trees


def _descriptor_tree(predictor, encoding, tree_columns, weight):
    """One histogram-gradient-boosting tree rewritten as a tree over the descriptors.

    The tree splits encoded inputs; for a fixed host/site column each encoded input
    is ``slope * descriptor + intercept`` (``_ColumnEncoding``), so a split
    ``input <= t`` is the split ``descriptor <= (t - intercept) / slope`` when the slope
    is positive and ``descriptor >= ...`` (children swapped) when it is negative;
    a split on a column indicator, constant for the column, is decided outright.
    Returns shap's dictionary form of a tree, leaf values times ``weight``.
    """
    nodes = predictor.nodes
    n_physical = len(encoding.index)
    constants = np.concatenate([encoding.indicators, [_UNSEEN_LABEL, encoding.column_index]])
    out = {"left": [], "right": [], "feature": [], "threshold": [], "value": [], "weight": []}

    def add(node_id):
        # follow decided splits down to the next real one
        node = nodes[node_id]
        while not node["is_leaf"]:
            column = int(tree_columns[int(node["feature_idx"])])
            if column < n_physical:
                break
            goes_left = constants[column - n_physical] <= node["num_threshold"]
            node_id = int(node["left"] if goes_left else node["right"])
            node = nodes[node_id]
        position = len(out["left"])
        for key in out:
            out[key].append(0)
        out["value"][position] = float(node["value"]) * weight
        out["weight"][position] = float(max(node["count"], 1))
        if node["is_leaf"]:
            out["left"][position] = out["right"][position] = -1
            out["feature"][position] = -2
            out["threshold"][position] = 0.0
            return position
        column = int(tree_columns[int(node["feature_idx"])])
        slope, intercept = encoding.slope[column], encoding.intercept[column]
        cut = (float(node["num_threshold"]) - intercept) / slope
        low, high = int(node["left"]), int(node["right"])
        if slope < 0:
            # input <= t  <=>  descriptor >= cut: the lower side is the original right
            low, high = high, low
            cut = float(np.nextafter(cut, -np.inf))
        out["feature"][position] = int(encoding.index[column])
        out["threshold"][position] = cut
        out["left"][position] = add(low)
        out["right"][position] = add(high)
        return position

    add(0)
    left = np.array(out["left"], dtype=np.int32)
    return {
        "children_left": left,
        "children_right": np.array(out["right"], dtype=np.int32),
        "children_default": left.copy(),
        "features": np.array(out["feature"], dtype=np.int32),
        "thresholds": np.array(out["threshold"], dtype=np.float64),
        "values": np.array(out["value"], dtype=np.float64)[:, None],
        "node_sample_weight": np.array(out["weight"], dtype=np.float64),
    }


def _tree_ensembles(function, n_features):
    """Per target, the whole target as one sum of trees over the descriptors, or None.

    Possible when every stage of every target is boosted trees (or a column mean,
    constant for a column): the target's chain of stages and, for a site choice, the
    difference of two columns are sums of trees with signed weights.
    """
    for _positions, evaluator in function.stages:
        if not isinstance(evaluator.learner, (BoostLearner, ColumnMeanLearner, ShiftPriorLearner)):
            return None
    if not any(isinstance(e.learner, BoostLearner) for _p, e in function.stages):
        return None
    probe = np.zeros((1, n_features))
    trees_per_unit, offset_per_unit = {}, {}
    for positions, evaluator in function.stages:
        learner = evaluator.learner
        if isinstance(learner, (ColumnMeanLearner, ShiftPriorLearner)):
            # constant within a column (a shift prior without a learner)
            constant = evaluator.predict_rows(probe, _UNSEEN_LABEL)[0]
            for position, value in zip(positions, constant):
                trees_per_unit[position], offset_per_unit[position] = [], float(value)
            continue
        n_columns = evaluator.encodings[0].rows(probe, _UNSEEN_LABEL).shape[1]
        tree_columns = np.array(learner._tree_columns(n_columns))
        share = 1.0 / len(learner.members_)
        for position, encoding in zip(positions, evaluator.encodings):
            trees, offset = [], evaluator.offset
            for member in learner.members_:
                offset += share * float(np.ravel(member._baseline_prediction)[0])
                for iteration in member._predictors:
                    trees.append((iteration[0], encoding, tree_columns, share))
            trees_per_unit[position], offset_per_unit[position] = trees, offset
    ensembles = []
    for row in function.matrix:
        trees, offset = [], 0.0
        for position in np.flatnonzero(row):
            sign = float(row[position])
            offset += sign * offset_per_unit[position]
            trees += [
                _descriptor_tree(predictor, encoding, columns, sign * share)
                for predictor, encoding, columns, share in trees_per_unit[position]
            ]
        if not trees:
            # a constant target: one leaf, no split
            trees = [{
                "children_left": np.array([-1], dtype=np.int32),
                "children_right": np.array([-1], dtype=np.int32),
                "children_default": np.array([-1], dtype=np.int32),
                "features": np.array([-2], dtype=np.int32),
                "thresholds": np.zeros(1),
                "values": np.zeros((1, 1)),
                "node_sample_weight": np.ones(1),
            }]
        ensembles.append({"trees": trees, "base_offset": offset, "tree_output": "raw_value",
                          "input_dtype": np.float64, "internal_dtype": np.float64})
    return ensembles


def tree_shapley_values(ensembles, X, background, progress=None):
    """Interventional Tree SHAP values of tree ensembles over the descriptors.

    ``shap.TreeExplainer`` with ``feature_perturbation="interventional"``: exact
    interventional Shapley values for the background given (Lundberg et al. 2020,
    "From local explanations to global understanding with explainable AI for trees",
    Nature Machine Intelligence 2, 56-67), the same values ``shapley_values`` enumerates.

    Parameters
    ----------
    ensembles : list of dict
        One shap tree-ensemble dictionary per output (``_tree_ensembles``).
    X : ndarray of shape (n_samples, n_features)
    background : ndarray of shape (n_background, n_features)
    progress : object with ``update(n)`` or None
        Told once per row of ``X`` (after the last output).

    Returns
    -------
    values : ndarray of shape (n_samples, n_features, n_outputs)
    base_values : ndarray of shape (n_samples, n_outputs)
    """
    shap = _import_shap()
    X = np.asarray(X, dtype=float)
    background = np.asarray(background, dtype=float)
    values = np.empty((len(X), X.shape[1], len(ensembles)))
    base_values = np.empty((len(X), len(ensembles)))
    for output, ensemble in enumerate(ensembles):
        explainer = shap.TreeExplainer(
            ensemble, data=background, feature_perturbation="interventional", model_output="raw"
        )
        values[:, :, output] = np.asarray(explainer.shap_values(X, check_additivity=False), dtype=float)
        base_values[:, output] = float(np.ravel(explainer.expected_value)[0])
    if progress is not None:
        progress.update(len(X))
    return values, base_values


# --------------------------------------------------------------------------- Shapley


def shapley_values(model, X, background, random_state=0, progress=None):
    """Interventional Shapley values of a vector function, with a background sample.

    With 12 features or fewer every subset of features is enumerated
    (``shap.explainers.Exact``); with more, orderings are sampled
    (``shap.explainers.Permutation``). Features absent from a subset take the
    background's values; the base value is the model averaged over the background.

    Parameters
    ----------
    model : callable
        ``model(Z)`` with ``Z`` of shape (n_rows, n_features) returns an array of shape
        (n_rows,) or (n_rows, n_outputs).
    X : ndarray of shape (n_samples, n_features)
        Rows to explain.
    background : ndarray of shape (n_background, n_features)
    random_state : int, default=0
        Seed of the sampled orderings (unused when enumerating).
    progress : object with ``update(n)`` or None
        Told after each explained row.

    Returns
    -------
    values : ndarray of shape (n_samples, n_features, n_outputs)
    base_values : ndarray of shape (n_samples, n_outputs)
    """
    shap = _import_shap()
    X = np.asarray(X, dtype=float)
    background = np.asarray(background, dtype=float)

    def as_matrix(Z):
        result = np.asarray(model(np.asarray(Z, dtype=float)), dtype=float)
        return result.reshape(len(Z), -1)

    n_outputs = as_matrix(background[:1]).shape[1]
    masker = shap.maskers.Independent(background, max_samples=len(background))
    n_features = X.shape[1]
    if n_features <= _MAX_EXACT_FEATURES:
        explainer = shap.explainers.Exact(as_matrix, masker)
        options = {"max_evals": 2**n_features + 1}
    else:
        explainer = shap.explainers.Permutation(as_matrix, masker, seed=int(random_state))
        options = {"max_evals": 2 * _PERMUTATION_EVALS_PER_FEATURE * n_features + 1}
    values = np.empty((len(X), n_features, n_outputs))
    base_values = np.empty((len(X), n_outputs))
    for row in range(len(X)):
        result = explainer(X[row : row + 1], silent=True, **options)
        values[row] = np.asarray(result.values, dtype=float).reshape(n_features, n_outputs)
        base_values[row] = np.asarray(result.base_values, dtype=float).reshape(n_outputs)
        if progress is not None:
            progress.update(1)
    return values, base_values


# --------------------------------------------------------------------------- public


def _canonical(element_symbols):
    symbols = []
    for text in element_symbols or ():
        symbol = normalise_symbol(text)
        if symbol is None:
            raise DopantgapError(
                f"{text!r} is not an element symbol; give symbols such as Ti,V,Cr."
            )
        symbols.append(symbol)
    return symbols


def explain_model(surrogate, element_symbols=None, targets=None, random_state=0, progress=None):
    """SHAP values of a fitted surrogate's targets in named element descriptors.

    See the module docstring for what is explained and how.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    element_symbols : sequence of str or None, default=None
        Elements to explain besides the table's own (new elements are fine).
    targets : sequence of str or None, default=None
        Target names to explain (see ``Explanation.targets``); None: all.
    random_state : int, default=0
        Seed of the background sample.
    progress : object with ``update(n)`` or None, default=None
        Told once per explained element (total: the table's elements plus added ones).

    Returns
    -------
    Explanation
    """
    table = surrogate.table_
    table_symbols = list(dict.fromkeys(table["element"]))
    symbols = list(table_symbols)
    for symbol in _canonical(element_symbols):
        if symbol not in symbols:
            symbols.append(symbol)
    target_table = _target_table(surrogate)
    if targets is not None:
        wanted = list(dict.fromkeys(targets))
        unknown = [name for name in wanted if name not in set(target_table["target"])]
        if unknown:
            raise DopantgapError(
                f"unknown target {unknown[0]!r}; the model's targets are named like "
                f"{target_table['target'].iat[0]!r} (see targets.csv)"
            )
        target_table = target_table.set_index("target").loc[wanted].reset_index()
    features = explanation_features(surrogate)
    descriptors = descriptor_matrix(features, symbols)
    rng = np.random.default_rng(random_state)
    n_background = min(BACKGROUND_SIZE, len(table_symbols))
    chosen = np.sort(rng.choice(len(table_symbols), size=n_background, replace=False))
    background_symbols = [table_symbols[position] for position in chosen]
    background = descriptors[chosen]

    function = _TargetFunction(surrogate, target_table, features)
    function.check(background)
    ensembles = _tree_ensembles(function, len(features))
    if ensembles is None:
        values, base_values = shapley_values(function, descriptors, background, random_state, progress)
        method = "exact enumeration" if len(features) <= _MAX_EXACT_FEATURES else "sampled orderings"
    else:
        values, base_values = tree_shapley_values(ensembles, descriptors, background, progress)
        method = "tree"
    offsets = function.offsets(descriptors, symbols)
    predictions = function(descriptors) + offsets

    names = list(target_table["target"])
    n_elements, n_features, n_targets = values.shape
    all_features = features + [OFFSET_FEATURE]
    full = np.concatenate([values, offsets[:, None, :]], axis=1)  # element, feature, target
    feature_values = np.concatenate([descriptors, np.full((n_elements, 1), np.nan)], axis=1)
    shap_values = pd.DataFrame(
        {
            "target": np.repeat(names, n_elements * (n_features + 1)),
            "element": np.tile(np.repeat(symbols, n_features + 1), n_targets),
            "feature": np.tile(all_features, n_elements * n_targets),
            "feature_value": np.tile(feature_values.ravel(), n_targets),
            "shap": full.transpose(2, 0, 1).ravel(),
        }
    )
    base = pd.DataFrame(
        {
            "target": np.repeat(names, n_elements),
            "element": np.tile(symbols, n_targets),
            "base_value": base_values.T.ravel(),
            "prediction": predictions.T.ravel(),
        }
    )
    in_table = shap_values[shap_values["element"].isin(table_symbols)].copy()
    in_table["importance"] = in_table["shap"].abs()
    importance = (
        in_table.groupby(["target", "feature"], sort=False)["importance"].mean().reset_index()
    )
    importance["_order"] = importance["feature"].map({name: i for i, name in enumerate(all_features)})
    importance = (
        importance.sort_values(["target", "importance", "_order"], ascending=[True, False, True], kind="stable")
        .drop(columns="_order")
        .reset_index(drop=True)
    )
    return Explanation(
        targets=target_table.reset_index(drop=True),
        importance=importance,
        shap_values=shap_values,
        base_values=base,
        features=tuple(all_features),
        background=tuple(background_symbols),
        shap_method=method,
    )


def write_explanation(explanation, out_dir):
    """Write the explanation's tables as CSV files in ``out_dir`` (atomically).

    Parameters
    ----------
    explanation : Explanation
    out_dir : str or Path
        Folder, created if needed; receives :data:`EXPLANATION_FILES`.

    Returns
    -------
    list of Path
        The files written.
    """
    out_dir = Path(out_dir)
    frames = {
        "targets.csv": explanation.targets,
        "importance.csv": explanation.importance,
        "shap_values.csv": explanation.shap_values,
        "base_values.csv": explanation.base_values,
    }
    written = []
    for name in EXPLANATION_FILES:
        path = out_dir / name
        write_table(frames[name], path)
        written.append(path)
    return written


def target_slugs(targets):
    """Target name -> unique file-name form (a clash gets its position appended)."""
    slugs = {}
    for position, target in enumerate(targets):
        slug = target_slug(target)
        slugs[target] = slug if slug not in slugs.values() else f"{slug}_{position}"
    return slugs


def _draw_target(importance, shap_values, base_values, target, element_symbols, paths):
    from dopantgap.plots import breakdown_figure, importance_figure, save_png

    save_png(importance_figure(importance, shap_values, target), paths[0])
    for symbol, path in zip(element_symbols, paths[1:]):
        save_png(breakdown_figure(shap_values, base_values, target, symbol), path)


def write_figures(explanation, out_dir, element_symbols, progress=None):
    """Draw ``summary_<slug>.png`` per target and ``breakdown_<slug>_<Element>.png``.

    Parameters
    ----------
    explanation : Explanation
    out_dir : str or Path
    element_symbols : sequence of str
        Elements to draw a breakdown of, for every target (they must be explained).
    progress : object with ``update(n)`` or None
        Told once per target drawn.

    Returns
    -------
    list of Path
    """
    out_dir = Path(out_dir)
    symbols = _canonical(element_symbols)
    explained = set(explanation.base_values["element"])
    missing = [symbol for symbol in symbols if symbol not in explained]
    if missing:
        raise DopantgapError(f"{missing[0]} was not explained; pass it to explain_model first.")
    written = []
    for target, slug in target_slugs(explanation.targets["target"]).items():
        paths = [out_dir / f"summary_{slug}.png"] + [
            out_dir / f"breakdown_{slug}_{symbol}.png" for symbol in symbols
        ]
        written.extend(paths)
        # drawing in worker processes was measured slower: their start-up outweighs it
        _draw_target(
            explanation.importance[explanation.importance["target"] == target],
            explanation.shap_values[explanation.shap_values["target"] == target],
            explanation.base_values[explanation.base_values["target"] == target],
            target,
            symbols,
            paths,
        )
        if progress is not None:
            progress.update(1)
    return written


def target_slug(target):
    """File-name form of a target name: ``E_sol | ZnS | gga | int_hex - sub_Zn`` ->
    ``E_sol_ZnS_gga_int_hex_minus_sub_Zn``."""
    text = str(target).replace(" - ", " minus ")
    text = re.sub(r"[^A-Za-z0-9.+]+", "_", text).strip("_")
    return text or "target"
