"""Boosted trees rewritten over the descriptors, and their interventional Tree SHAP values."""

import numpy as np

from dopantgap.explain.shapley import _import_shap
from dopantgap.explain.stages import _UNSEEN_LABEL
from dopantgap.learners import BoostLearner, ColumnMeanLearner, ShiftPriorLearner

__all__ = ["tree_shapley_values"]


def _float32_at_least(value):
    """The smallest float32 number not below ``value``, as a float."""
    found = np.float32(value)
    if float(found) < value:
        found = np.nextafter(found, np.float32(np.inf))
    return float(found)


def _float32_below(value):
    """The largest float32 number strictly below ``value``, as a float."""
    found = np.float32(value)
    if float(found) >= value:
        found = np.nextafter(found, np.float32(-np.inf))
    return float(found)


def _descriptor_cut(threshold, slope, intercept, values):
    """The descriptor cut c that sends ``values`` the way the model sends them.

    The model sends a descriptor value v to the lower side when ``v * slope +
    intercept <= threshold`` goes that way, computed as the encoder computes it. The
    cut is a float32 number: shap's interventional code compares in single precision,
    and a cut within rounding of a value (an element sitting on a split: 144 pm against
    143.99999999999997) went the other way there, so the SHAP values of that element
    no longer summed to its prediction. ``c`` separates ``values`` identically in
    double and single precision; None where no float32 number does (or no values).
    """
    if values is None or len(values) == 0:
        return None
    model_left = values * slope + intercept <= threshold
    lower = values[model_left] if slope > 0 else values[~model_left]
    upper = values[~model_left] if slope > 0 else values[model_left]
    if len(lower) and len(upper) and lower.max() >= upper.min():
        return None  # not monotone in the values (rounding at a tie between two values)
    if len(upper) == 0:
        return _float32_at_least(max(lower.max(), float(np.float32(lower.max()))))
    ceiling = min(upper.min(), float(np.float32(upper.min())))
    if len(lower) == 0:
        return _float32_below(ceiling)
    cut = _float32_at_least(max(lower.max(), float(np.float32(lower.max()))))
    return cut if cut < ceiling else None


def _descriptor_tree(predictor, encoding, tree_columns, weight, known_values=None):
    """One histogram-gradient-boosting tree rewritten as a tree over the descriptors.

    The tree splits encoded inputs; for a fixed host/site column each encoded input
    is ``slope * descriptor + intercept`` (``_ColumnEncoding``), so a split
    ``input <= t`` is the split ``descriptor <= (t - intercept) / slope`` when the slope
    is positive and ``descriptor >= ...`` (children swapped) when it is negative;
    a split on a column indicator, constant for the column, is decided outright.
    ``known_values`` (descriptor index -> the values the tree will be evaluated at)
    places each cut so that those values go exactly where the model sends them
    (``_descriptor_cut``). Returns shap's dictionary form of a tree, leaf values times
    ``weight``.
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
        descriptor = int(encoding.index[column])
        placed = _descriptor_cut(
            float(node["num_threshold"]), slope, intercept, (known_values or {}).get(descriptor)
        )
        cut = cut if placed is None else placed
        out["feature"][position] = descriptor
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


def _tree_ensembles(function, n_features, evaluated=None):
    """Per target, the whole target as one sum of trees over the descriptors, or None.

    Possible when every stage of every target is boosted trees (or a column mean,
    constant for a column): the target's chain of stages and, for a site choice, the
    difference of two columns are sums of trees with signed weights. ``evaluated``
    (rows of descriptors: the elements explained and the background) are the points
    the trees must route exactly as the model does (``_descriptor_cut``).
    """
    known_values = None
    if evaluated is not None:
        evaluated = np.asarray(evaluated, dtype=float)
        known_values = {
            column: np.unique(evaluated[np.isfinite(evaluated[:, column]), column])
            for column in range(evaluated.shape[1])
        }
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
                # scikit-learn keeps the fitted trees in private attributes; measured worth
                # it (benchmarks/bench_explain_paths.py). If a release renames them, the
                # public path (shap's enumeration through predict) takes over, and
                # test_tree_explainer_agrees_with_exact_enumeration fails to say so.
                baseline = getattr(member, "_baseline_prediction", None)
                predictors = getattr(member, "_predictors", None)
                if baseline is None or predictors is None:
                    return None
                offset += share * float(np.ravel(baseline)[0])
                for iteration in predictors:
                    if not hasattr(iteration[0], "nodes"):
                        return None
                    trees.append((iteration[0], encoding, tree_columns, share))
            trees_per_unit[position], offset_per_unit[position] = trees, offset
    ensembles = []
    for row in function.matrix:
        trees, offset = [], 0.0
        for position in np.flatnonzero(row):
            sign = float(row[position])
            offset += sign * offset_per_unit[position]
            trees += [
                _descriptor_tree(predictor, encoding, columns, sign * share, known_values)
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
