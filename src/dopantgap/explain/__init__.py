"""Why does the model predict what it predicts? SHAP values in named element descriptors.

The modules, in the order the data flows:

* :mod:`~dopantgap.explain.descriptors`: the descriptors the model sees, and a column's
  encoded rows rebuilt from them;
* :mod:`~dopantgap.explain.stages`: one fitted stage's mean for several columns, fast;
* :mod:`~dopantgap.explain.targets`: the column and site-choice targets as one function;
* :mod:`~dopantgap.explain.shapley`: model-agnostic Shapley values through shap;
* :mod:`~dopantgap.explain.trees`: boosted trees rewritten over the descriptors, Tree SHAP;
* :mod:`~dopantgap.explain.explanation`: :func:`explain_model` (what is explained and how);
* :mod:`~dopantgap.explain.writing`: the CSV files and figures (what is written).
"""

from dopantgap.explain.descriptors import descriptor_matrix, explanation_features
from dopantgap.explain.explanation import BACKGROUND_SIZE, OFFSET_FEATURE, Explanation, explain_model
from dopantgap.explain.shapley import shapley_values
from dopantgap.explain.trees import tree_shapley_values
from dopantgap.explain.writing import (
    EXPLANATION_FILES,
    target_slug,
    target_slugs,
    write_explanation,
    write_figures,
)

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
