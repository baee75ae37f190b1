"""Why does the model predict what it predicts? SHAP values in named element descriptors.

The modules, in the order the data flows:

* :mod:`~dopantgap.explain.descriptors`: the descriptors the model sees, and a column's
  encoded rows rebuilt from them;
* :mod:`~dopantgap.explain.stages`: one fitted stage's mean for several columns, fast;
* :mod:`~dopantgap.explain.targets`: the column and site-choice targets as one function;
* :mod:`~dopantgap.explain.shapley`: model-agnostic Shapley values through shap;
* :mod:`~dopantgap.explain.trees`: boosted trees rewritten over the descriptors, Tree SHAP;
* :mod:`~dopantgap.explain.explanation`: :func:`explain_model` (what is explained and how);
* :mod:`~dopantgap.explain.writing`: one CSV file per kind of table and one figure per
  target group (what is written).
"""

from dopantgap.explain.descriptors import descriptor_matrix, explanation_features, feature_units
from dopantgap.explain.explanation import BACKGROUND_SIZE, OFFSET_FEATURE, Explanation, explain_model
from dopantgap.explain.shapley import shapley_values
from dopantgap.explain.targets import GROUP_KINDS
from dopantgap.explain.trees import tree_shapley_values
from dopantgap.explain.writing import (
    EXPLANATION_FILES,
    group_slugs,
    target_slug,
    target_slugs,
    write_explanation,
    write_figures,
)

__all__ = [
    "BACKGROUND_SIZE",
    "EXPLANATION_FILES",
    "GROUP_KINDS",
    "OFFSET_FEATURE",
    "Explanation",
    "descriptor_matrix",
    "explain_model",
    "explanation_features",
    "feature_units",
    "group_slugs",
    "shapley_values",
    "target_slug",
    "target_slugs",
    "tree_shapley_values",
    "write_explanation",
    "write_figures",
]
