"""SHAP explanations: local accuracy, the linear closed form, a known driver, the CLI.

Every table here is INVENTED (dopantgap.world or a made-up function written below);
none of it is physics or data.
"""

import numpy as np
import pandas as pd
import pytest

from dopantgap import elements
from dopantgap.cli import main
from dopantgap.explain import (
    OFFSET_FEATURE,
    descriptor_matrix,
    explain_model,
    explanation_features,
    shapley_values,
    write_explanation,
)
from dopantgap.explain import explanation as explanation_module
from dopantgap.explain.descriptors import _ColumnEncoding
from dopantgap.store import load_model, save_model
from dopantgap.surrogate import Surrogate
from dopantgap.world import invent_world, observe

SMALL_ELEMENTS = ("Li", "B", "N", "Mg", "Al", "P", "Ti", "Fe", "Cu", "Ga", "As", "Sn", "Sb", "Ba", "Pb", "Zr")
SMALL_HOSTS = {"ZnS": ("sub_Zn", "int_tet_Zn", "int_hex")}


def _small_table(seed=2):
    """Invented world (dopantgap.world), one host, three sites, two levels."""
    world = invent_world(element_symbols=SMALL_ELEMENTS, hosts=SMALL_HOSTS, seed=seed)
    return observe(world, expensive_fraction=0.5, missing_fraction=0.1, seed=seed)


@pytest.fixture(scope="module")
def demo_model(demo_model_dir):
    surrogate, _manifest = load_model(demo_model_dir)
    return surrogate


@pytest.fixture(scope="module")
def boost_model():
    return Surrogate(learner="boost", n_folds=2, random_state=0).fit(_small_table())


def _sum_check(explanation):
    """Largest |base + sum of SHAP values - prediction| over targets and elements."""
    sums = explanation.shap_values.groupby(["target", "element"])["shap"].sum()
    base = explanation.base_values.set_index(["target", "element"])
    return float(np.max(np.abs(base["base_value"] + sums.loc[base.index] - base["prediction"])))


def _predicted(surrogate, element, target_row):
    cells = pd.DataFrame(
        [
            {"element": element, "host": target_row.host, "site": site, "method": target_row.method,
             "quantity": target_row.quantity}
            for site in ([target_row.site] if target_row.kind == "column" else [target_row.site_a, target_row.site_b])
        ]
    )
    values = surrogate.predict(cells)
    assert (values["status"] == "predicted").all()
    value = values["value"].to_numpy()
    return float(value[0]) if len(value) == 1 else float(value[0] - value[1])


def _check_against_predict(surrogate, explanation, element):
    base = explanation.base_values.set_index(["target", "element"])["prediction"]
    for row in explanation.targets.itertuples(index=False):
        assert base[(row.target, element)] == pytest.approx(_predicted(surrogate, element, row), abs=1e-8)


def test_encoded_rows_rebuilt_from_descriptors_match_the_encoder(demo_model):
    """The descriptor -> input-row map reproduces features.CellEncoder exactly."""
    stage = demo_model.stages_[("E_sol", "gga")]
    features = explanation_features(demo_model)
    symbols = ["Li", "Ti", "Sn", "Ba", "Nd"]
    descriptors = descriptor_matrix(features, symbols)
    for host, site in stage.encoder.columns_:
        cells = pd.DataFrame({"element": symbols, "host": host, "site": site})
        expected = stage.encoder.transform(cells)
        labels = expected[:, stage.encoder.label_columns_[0]]
        rebuilt = _ColumnEncoding(stage.encoder, features, host, site, demo_model.compositions_).rows(
            descriptors, labels
        )
        np.testing.assert_allclose(rebuilt, expected, rtol=1e-12, atol=1e-12)


def test_gp_local_accuracy_and_agreement_with_predict(demo_model):
    """Local accuracy (Lundberg & Lee 2017, 'A Unified Approach to Interpreting Model
    Predictions', property 1): base value + sum of SHAP values = prediction, for a column
    at the expensive level (a chain of two stages) and a site choice; the prediction is
    the surrogate's own for cells it predicts."""
    targets = ["E_sol | ZnS | int_tet_Zn | hyb", "E_sol | ZnS | gga | int_tet_Zn - sub_Zn", "E_bind | C | sub_C | gga"]
    explanation = explain_model(demo_model, element_symbols=["Os", "Nd"], targets=targets)
    assert list(explanation.targets["target"]) == targets
    assert _sum_check(explanation) < 1e-9
    for new_element in ("Os", "Nd"):  # never computed: every cell is predicted
        _check_against_predict(demo_model, explanation, new_element)
    offsets = explanation.shap_values[explanation.shap_values["feature"] == OFFSET_FEATURE]
    assert (offsets.loc[offsets["element"].isin(["Os", "Nd"]), "shap"] == 0.0).all()
    # a computed element: its learned offset is part of the prediction
    table = demo_model.table_
    column = (table["host"] == "C") & (table["site"] == "sub_C") & (table["quantity"] == "E_bind")
    missing = sorted(set(table["element"]) - set(table.loc[column & (table["method"] == "gga"), "element"]))
    assert missing, "the demo table has an element without E_bind | C | sub_C | gga"
    row = explanation.targets.iloc[2]
    prediction = explanation.base_values.set_index(["target", "element"])["prediction"]
    assert prediction[(row.target, missing[0])] == pytest.approx(_predicted(demo_model, missing[0], row), abs=1e-8)
    assert set(explanation.shap_values["feature"]) == set(explanation.features)
    assert "covalent_radius" in explanation.features and OFFSET_FEATURE in explanation.features


def test_boost_local_accuracy_and_agreement_with_predict(boost_model):
    """Local accuracy (Lundberg & Lee 2017, property 1) for the boosted trees, every target."""
    assert boost_model.learner_ == "boost"
    names = ["E_sol | ZnS | int_hex | hyb", "E_sol | ZnS | hyb | int_tet_Zn - sub_Zn"]
    # Os sits on a split of covalent radius (144 pm) to within rounding: shap compares in
    # single precision, and a cut placed in double precision once sent it the other way
    explanation = explain_model(boost_model, element_symbols=["Nb", "Os", "W"], targets=names)
    assert list(explanation.targets["kind"]) == ["column", "site-choice"]
    assert explanation.shap_method == "tree"
    # shap's tree code sums in its own order: ~1e-8 eV of rounding over ~1500 trees
    assert _sum_check(explanation) < 1e-6
    for element in ("Nb", "Os", "W"):
        _check_against_predict(boost_model, explanation, element)
    # descriptors matter to boosted trees too: not everything is in the offset
    descriptor_rows = explanation.shap_values[explanation.shap_values["feature"] != OFFSET_FEATURE]
    assert descriptor_rows["shap"].abs().max() > 0.05


def test_tree_explainer_agrees_with_exact_enumeration(boost_model, monkeypatch):
    """The boosted trees rewritten over the descriptors and explained by shap's
    interventional Tree SHAP (Lundberg et al. 2020, Nature Machine Intelligence 2,
    56-67, Algorithm "Interventional Tree SHAP") give the Shapley values that shap's
    exact enumeration (shap.explainers.Exact; Lundberg & Lee 2017, eq. 8) gives for the
    same model function and background."""
    names = ["E_sol | ZnS | int_tet_Zn | hyb", "E_sol | ZnS | gga | int_hex - sub_Zn", "E_bind | ZnS | sub_Zn | gga"]
    by_tree = explain_model(boost_model, element_symbols=["Nb"], targets=names)
    assert by_tree.shap_method == "tree"
    monkeypatch.setattr(explanation_module, "_tree_ensembles", lambda function, n_features, evaluated=None: None)
    by_enumeration = explain_model(boost_model, element_symbols=["Nb"], targets=names)
    assert by_enumeration.shap_method == "exact enumeration"
    assert by_tree.background == by_enumeration.background
    tree_values = by_tree.shap_values["shap"].to_numpy()
    np.testing.assert_allclose(tree_values, by_enumeration.shap_values["shap"].to_numpy(), atol=1e-6)
    np.testing.assert_allclose(
        by_tree.base_values["base_value"], by_enumeration.base_values["base_value"], atol=1e-6
    )
    assert np.abs(tree_values).max() > 0.05  # a comparison of zeros would prove nothing


def test_linear_function_matches_closed_form():
    """Linear SHAP with independent features (Lundberg & Lee 2017, section 4.2 and
    Corollary 1): phi_i = w_i (x_i - E[x_i]) with E over the background, and the base
    value is f(E[x]); checked for the exact enumeration and the sampled orderings."""
    rng = np.random.default_rng(4)
    for n_features in (6, 14):
        weights = rng.normal(size=(n_features, 2))
        intercept = np.array([0.3, -1.2])
        X = rng.normal(size=(5, n_features))
        background = rng.normal(size=(9, n_features))

        def linear(Z, weights=weights):
            return Z @ weights + intercept

        values, base = shapley_values(linear, X, background, random_state=0)
        expected = (X - background.mean(axis=0))[:, :, None] * weights[None, :, :]
        np.testing.assert_allclose(values, expected, atol=1e-10)
        np.testing.assert_allclose(base, np.tile(background.mean(axis=0) @ weights + intercept, (5, 1)), atol=1e-10)


def test_size_driven_site_choice_ranks_a_size_descriptor_first():
    """An INVENTED table in which the two sites differ only through the covalent radius
    (Cordero et al. 2008 radii from elements.py): the site choice's top feature is the
    covalent radius (which carries the size misfit here)."""
    symbols = ("Li", "Be", "B", "Na", "Mg", "Al", "P", "K", "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co",
               "Ni", "Cu", "Ga", "As", "Rb", "Sr", "Y", "Zr", "Sn", "Sb", "Cs", "Ba", "Pb", "Bi")
    radius = elements.descriptor_table(list(symbols))["covalent_radius"].to_numpy()
    zinc = float(elements.descriptor_table(["Zn"])["covalent_radius"].iat[0])
    rng = np.random.default_rng(0)
    misfit = (radius - zinc) / zinc
    substitutional = 1.0 + 6.0 * misfit**2
    interstitial = 0.8 + 3.0 * (radius / zinc) ** 2
    rows = []
    for site, energies in (("sub_Zn", substitutional), ("int_tet_Zn", interstitial)):
        for symbol, energy in zip(symbols, energies + rng.normal(0.0, 0.02, len(symbols))):
            rows.append({"element": symbol, "host": "ZnS", "site": site, "method": "gga", "quantity": "E_sol",
                         "value": float(energy)})
    surrogate = Surrogate(learner="gp", n_folds=2, random_state=0).fit(pd.DataFrame(rows))
    explanation = explain_model(surrogate)
    choice = explanation.targets[explanation.targets["kind"] == "site-choice"]
    assert len(choice) == 1
    ranked = explanation.importance[explanation.importance["target"] == choice["target"].iat[0]]
    assert ranked["feature"].iat[0] == "covalent_radius"
    assert ranked["importance"].iat[0] > 3.0 * ranked["importance"].iat[1]


def test_explanation_tables_layout(boost_model, tmp_path):
    explanation = explain_model(boost_model, targets=["E_sol | ZnS | int_hex | gga"])
    written = write_explanation(explanation, tmp_path, ["Ti"])
    assert [path.name for path in written] == ["targets.csv", "importance.csv", "shap_values.csv", "breakdowns.csv"]
    importance = pd.read_csv(tmp_path / "importance.csv")
    assert list(importance.columns) == ["target", "feature", "importance"]
    assert (np.diff(importance["importance"].to_numpy()) <= 0).all()
    shap_values = pd.read_csv(tmp_path / "shap_values.csv", keep_default_na=False)
    assert list(shap_values.columns) == ["target", "element", "feature", "feature_value", "unit", "shap"]
    breakdowns = pd.read_csv(tmp_path / "breakdowns.csv")
    assert list(breakdowns.columns) == ["target", "element", "base_value", "prediction", "broken_down"]
    assert set(breakdowns.loc[breakdowns["broken_down"], "element"]) == {"Ti"}
    again = explain_model(boost_model, targets=["E_sol | ZnS | int_hex | gga"])
    pd.testing.assert_frame_equal(again.shap_values, explanation.shap_values)


def test_cli_writes_tables_and_figures(tmp_path, capsys):
    table = _small_table()
    table = table[(table["method"] == "gga") & (table["quantity"] == "E_sol") & (table["site"] != "int_hex")]
    model_dir = tmp_path / "model"
    save_model(Surrogate(learner="boost", n_folds=2, random_state=0).fit(table), model_dir)
    out = tmp_path / "explained"
    assert main(["explain", str(model_dir), "--out", str(out), "--elements", "Ti,Nb", "--quiet"]) == 0
    assert capsys.readouterr().out == ""
    targets = pd.read_csv(out / "targets.csv", keep_default_na=False)
    assert list(targets.columns) == ["target", "group", "kind", "quantity", "host", "method", "site", "site_a",
                                     "site_b"]
    for row in targets.itertuples(index=False):
        assert row.quantity in row.target and row.host in row.target and row.method in row.target
        if row.kind == "column":
            assert row.target == f"{row.quantity} | {row.host} | {row.site} | {row.method}"
        else:
            assert row.target == f"{row.quantity} | {row.host} | {row.method} | {row.site_a} - {row.site_b}"
    assert "E_sol | ZnS | sub_Zn | gga" in set(targets["target"])
    shap_values = pd.read_csv(out / "shap_values.csv")
    assert {"Ti", "Nb"} <= set(shap_values["element"])
    # the scientific question first: the site choice, then the single columns
    assert list(targets["kind"]) == ["site-choice", "column", "column"]
    assert list(targets["group"]) == ["site choice | E_sol | ZnS | gga"] + ["column | E_sol | ZnS | gga"] * 2
    # one CSV per kind and one figure per target group, whatever the elements asked
    figures = sorted(path.name for path in out.glob("*.png"))
    assert figures == ["explain_column_E_sol_ZnS_gga.png", "explain_site_choice_E_sol_ZnS_gga.png"]
    assert sorted(path.name for path in out.glob("*.csv")) == [
        "breakdowns.csv", "importance.csv", "shap_values.csv", "targets.csv"]


def test_cli_bad_element_is_one_line(tmp_path, capsys, demo_model_dir):
    status = main(["explain", str(demo_model_dir), "--out", str(tmp_path / "x"), "--elements", "Ti,Qq"])
    captured = capsys.readouterr()
    assert status == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and "Qq" in lines[0] and "--elements" in lines[0]
    assert not (tmp_path / "x").exists()
