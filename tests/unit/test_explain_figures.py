"""Explanation figures and labels: units from the descriptor definitions, one figure per
target group with a breakdown of every element asked for, titles inside the canvas.

The SHAP tables here are made up (small invented numbers); only the descriptor values
come from the package's element data.
"""

import numpy as np
import pandas as pd
import pytest

from dopantgap import elements
from dopantgap.explain import OFFSET_FEATURE, descriptor_matrix, feature_units
from dopantgap.plots import breakdown_figure, group_figure
from dopantgap.plots.explanations import _feature_label

FEATURES = ["covalent_radius", "log10_polarisability", "period", OFFSET_FEATURE]
TARGETS = pd.DataFrame({
    "target": ["E_sol | ZnS | gga | int_hex - sub_Zn", "E_sol | ZnS | gga | sub_S - sub_Zn"],
    "group": ["site choice | E_sol | ZnS | gga"] * 2,
})
ELEMENTS = ("Zn", "Ti", "Fe")


def _tables():
    """Made-up SHAP values over the real descriptor values of three elements."""
    rng = np.random.default_rng(0)
    values = descriptor_matrix(FEATURES[:-1], ELEMENTS)
    units = feature_units(FEATURES)
    rows = []
    for target in TARGETS["target"]:
        for position, element in enumerate(ELEMENTS):
            for column, feature in enumerate(FEATURES):
                value = values[position, column] if column < values.shape[1] else np.nan
                rows.append({"target": target, "element": element, "feature": feature, "feature_value": value,
                             "unit": units[column], "shap": float(rng.normal(0.0, 0.3))})
    shap_values = pd.DataFrame(rows)
    importance = (shap_values.assign(importance=shap_values["shap"].abs())
                  .groupby(["target", "feature"], as_index=False)["importance"].mean())
    sums = shap_values.groupby(["target", "element"], as_index=False)["shap"].sum()
    base_values = sums.assign(base_value=1.0, prediction=1.0 + sums["shap"]).drop(columns="shap")
    return importance, shap_values, base_values


def test_units_come_from_the_descriptor_definitions():
    units = {descriptor.name: descriptor.unit for descriptor in elements.DESCRIPTORS}
    assert feature_units(FEATURES) == [units["covalent_radius"], f"log10({units['polarisability']})", "", ""]
    assert feature_units(["covalent_radius"]) == ["pm"]


def test_descriptor_values_are_labelled_with_their_units():
    """Zn's covalent radius 122 pm: Cordero et al. 2008, "Covalent radii revisited",
    Dalton Trans., Table 2 (value from memory); its polarisability as the descriptor, not
    its logarithm."""
    radius, log_polarisability = descriptor_matrix(["covalent_radius", "log10_polarisability"], ["Zn"])[0]
    assert _feature_label("covalent_radius", radius, "pm") == "covalent radius = 122 pm"
    polarisability = elements.descriptor_table(["Zn"]).loc["Zn", "polarisability"]
    assert _feature_label("log10_polarisability", log_polarisability, "log10(bohr^3)") == (
        f"polarisability = {polarisability:.3g} bohr^3")
    assert _feature_label(OFFSET_FEATURE, np.nan, "") == OFFSET_FEATURE


def _texts_inside(figure):
    """Titles, figure texts and descriptor labels that reach past the canvas (x tick
    labels are left out: matplotlib keeps unused ones outside the view)."""
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    width, height = figure.canvas.get_width_height()
    texts = list(figure.texts) + [text for sub in figure.subfigs for text in sub.texts]
    for axes in figure.get_axes():
        texts += [axes.title, *axes.get_yticklabels(), *axes.texts]
    outside = []
    for text in texts:
        if not text.get_visible() or not text.get_text():
            continue
        box = text.get_window_extent(renderer)
        if box.x0 < -1 or box.x1 > width + 1 or box.y0 < -1 or box.y1 > height + 1:
            outside.append(text.get_text())
    return outside


def test_breakdown_titles_and_labels_are_not_clipped():
    importance, shap_values, base_values = _tables()
    figure = breakdown_figure(shap_values, base_values, TARGETS["target"].iat[0], "Ti")
    assert _texts_inside(figure) == []
    labels = [label.get_text() for label in figure.axes[0].get_yticklabels()]
    assert any(label.startswith("covalent radius = ") and label.endswith(" pm") for label in labels)


@pytest.mark.parametrize("asked", [(), ("Ti",), ELEMENTS])
def test_group_figure_breaks_down_every_element_asked(asked):
    importance, shap_values, base_values = _tables()
    figure = group_figure(TARGETS, importance, shap_values, base_values, asked)
    # one importance panel, then one panel per element and target
    drawn = [axes for axes in figure.get_axes() if axes.axison]
    assert len(drawn) == 1 + len(asked) * len(TARGETS)
    titles = [text.get_text() for sub in figure.subfigs for text in sub.texts]
    for symbol in asked:
        assert f"{symbol}: from the base value to the prediction" in titles
    assert _texts_inside(figure) == []
