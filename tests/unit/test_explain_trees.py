"""Boosted trees rewritten over the descriptors route every element as the model does.

Outside reference: shap's own interventional Tree SHAP (``shap.TreeExplainer``), whose
base value plus SHAP values must equal the tree's output at the point (local accuracy,
Lundberg & Lee 2017, "A Unified Approach to Interpreting Model Predictions", property 1).
"""

import numpy as np
import pytest

from dopantgap.explain.trees import _descriptor_cut

shap = pytest.importorskip("shap")


def _stump(cut):
    """One split on descriptor 0 at ``cut``: 1 eV on the lower side, 2 eV above."""
    return {
        "trees": [{
            "children_left": np.array([1, -1, -1], dtype=np.int32),
            "children_right": np.array([2, -1, -1], dtype=np.int32),
            "children_default": np.array([1, -1, -1], dtype=np.int32),
            "features": np.array([0, -2, -2], dtype=np.int32),
            "thresholds": np.array([cut, 0.0, 0.0]),
            "values": np.array([[0.0], [1.0], [2.0]]),
            "node_sample_weight": np.array([2.0, 1.0, 1.0]),
        }],
        "base_offset": 0.0, "tree_output": "raw_value", "input_dtype": np.float64, "internal_dtype": np.float64,
    }


def _shap_output(cut, x):
    explainer = shap.TreeExplainer(
        _stump(cut), data=np.array([[100.0], [200.0]]), feature_perturbation="interventional", model_output="raw"
    )
    values = explainer.shap_values(np.array([[x]]), check_additivity=False)
    return float(np.ravel(explainer.expected_value)[0] + np.sum(values))


def test_a_cut_within_rounding_of_a_value_goes_the_other_way_in_shap():
    """Why the cut is placed: 144 lies above 143.99999999999997 in double precision, but
    shap's interventional code sends it to the lower side (single precision)."""
    assert 144.0 > 143.99999999999997
    assert _shap_output(143.99999999999997, 144.0) == 1.0


@pytest.mark.parametrize("slope, intercept", [(1.0, 0.0), (0.25, -36.0), (-0.25, 36.0)])
def test_placed_cut_routes_an_element_on_the_split_as_the_model_does(slope, intercept):
    """An element at 144 sitting on the model's threshold (a rounding error below its
    encoded value for a positive slope, equal to it for a negative one): the model sends
    it to the upper side of the descriptor; the placed cut does too, in shap and in
    double precision, and the other values stay on their sides."""
    values = np.array([140.0, 144.0, 148.0])
    encoded = values * slope + intercept
    threshold = float(np.nextafter(encoded[1], -np.inf)) if slope > 0 else float(encoded[1])
    model_lower = (encoded <= threshold) if slope > 0 else ~(encoded <= threshold)
    cut = _descriptor_cut(threshold, slope, intercept, values)
    assert cut is not None
    np.testing.assert_array_equal(values <= cut, model_lower)
    for value, lower in zip(values, model_lower):
        assert _shap_output(cut, value) == (1.0 if lower else 2.0)


def test_no_values_no_placed_cut():
    assert _descriptor_cut(0.5, 1.0, 0.0, np.array([])) is None
    assert _descriptor_cut(0.5, 1.0, 0.0, None) is None
