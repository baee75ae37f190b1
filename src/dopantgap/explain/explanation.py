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

Targets come in question order: site choices first (which site an impurity takes),
then columns of a binding quantity (named like ``E_bind``), then the other columns;
each belongs to a *group*, the targets of one kind, quantity, host and level
(``site choice | E_sol | ZnS | gga``), and ``write_figures`` draws one figure per group.

Each target is written as one function of the element,

    target(element) = F(d) + offset(element),

where ``d`` is the element's vector of elemental descriptors as the model sees them
(``surrogate.descriptors_``, for example ``log10_polarisability``; plus any descriptor a
host-relative term is made from that the model does not list itself). The host-relative
terms of the encoder (size misfit, electronegativity, valence, ionisation energy and
electron affinity differences to the site's reference atoms) follow from ``d`` for the
target's host and site by the encoder's own map, read from the encoder itself (probe
elements encoded by ``CellEncoder.transform``; nothing of it is re-implemented here),
so they are attributed to the descriptor they are made of (size misfit to the
covalent radius, and so on; the pairing comes from the terms' definitions,
``elements.HOST_RELATIVE_DESCRIPTORS``): the covalent radius of a
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
"""

from dataclasses import dataclass

import numpy as np
import pandas as pd

from dopantgap.errors import DopantgapError
from dopantgap.explain.descriptors import descriptor_matrix, explanation_features, feature_units
from dopantgap.explain.shapley import _MAX_EXACT_FEATURES, shapley_values
from dopantgap.explain.targets import _target_table, _TargetFunction
from dopantgap.explain.trees import _tree_ensembles, tree_shapley_values
from dopantgap.reproducible import seed_integer
from dopantgap.symbols import normalise_symbol

__all__ = ["BACKGROUND_SIZE", "OFFSET_FEATURE", "Explanation", "explain_model"]

#: Name of the pseudo-feature holding the element's learned offset.
OFFSET_FEATURE = "element's own offset (not from descriptors)"
#: Background elements drawn from the table (the base value is F averaged over them).
BACKGROUND_SIZE = 16


@dataclass
class Explanation:
    """SHAP explanation of a fitted surrogate.

    Attributes
    ----------
    targets : DataFrame
        target, group (targets of one kind, quantity, host and level, e.g.
        ``site choice | E_sol | ZnS | gga``), kind ("column" or "site-choice"), quantity, host, method, site (column
        targets), site_a, site_b (site-choice targets: site_a minus site_b).
    importance : DataFrame
        target, feature, importance (mean |SHAP| in eV over the table's elements),
        sorted by target then importance, largest first.
    shap_values : DataFrame
        Long: target, element, feature, feature_value, unit (of the feature value,
        from the descriptor definitions), shap (eV). The offset pseudo-feature has no
        feature value.
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
    random_state : None, int, RandomState or Generator, default=0
        Seed of the background sample and of sampled orderings
        (``reproducible.seed_integer``, checked before any work).
    progress : object with ``update(n)`` or None, default=None
        Told once per explained element (total: the table's elements plus added ones).

    Returns
    -------
    Explanation
    """
    random_state = seed_integer(random_state)
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
    descriptors = descriptor_matrix(features, symbols, values=surrogate.descriptor_values_)
    rng = np.random.default_rng(random_state)
    n_background = min(BACKGROUND_SIZE, len(table_symbols))
    chosen = np.sort(rng.choice(len(table_symbols), size=n_background, replace=False))
    background_symbols = [table_symbols[position] for position in chosen]
    background = descriptors[chosen]

    function = _TargetFunction(surrogate, target_table, features)
    function.check(background)
    ensembles = _tree_ensembles(function, len(features), evaluated=descriptors)
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
            "unit": np.tile(feature_units(all_features), n_elements * n_targets),
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
