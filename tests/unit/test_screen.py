"""Screening: probabilities against scipy's Gaussian distributions, verdicts, cautions, parsing."""

import math

import numpy as np
import pandas as pd
import pytest
from scipy.stats import multivariate_normal, norm

from dopantgap.errors import DopantgapError, TableError
from dopantgap.hosts import SiteProperties, read_site_properties
from dopantgap.screening import (
    LowestSite,
    SiteGap,
    Window,
    parse_lowest_site,
    parse_site_gap,
    parse_window_condition,
    screen,
)
from dopantgap.screening.conditions import resolve
from dopantgap.screening.screen import binding_convention
from dopantgap.store import load_model

INF = math.inf


@pytest.fixture(scope="module")
def demo_model(demo_model_dir):
    surrogate, _manifest = load_model(demo_model_dir)
    return surrogate


# ------------------------------------------------------------------ parsing
def test_window_text_with_open_sides():
    assert parse_window_condition("E_bind:-inf:-0.3") == Window("E_bind", -INF, -0.3)
    assert parse_window_condition("E_sol@sub_Zn:0.5:inf") == Window("E_sol", 0.5, INF, site="sub_Zn")
    assert parse_lowest_site("sub_Zn") == LowestSite("sub_Zn")
    assert parse_lowest_site("E_sol@sub_Zn") == LowestSite("sub_Zn", quantity="E_sol")
    assert parse_site_gap("sub_Zn:int_hex:0.5") == SiteGap("sub_Zn", "int_hex", 0.5)


@pytest.mark.parametrize(
    "parser, text, fragment",
    [
        (parse_window_condition, "E_bind:-inf:inf", "at least one bound"),
        (parse_window_condition, "E_bind:0.2:-0.3", "LOW must be below HIGH"),
        (parse_window_condition, "E_bind:low:-0.3", "not a number"),
        (parse_window_condition, "E_bind-0.3", "QUANTITY"),
        (parse_site_gap, "sub_Zn:sub_Zn:0.5", "same site"),
        (parse_site_gap, "sub_Zn:int_hex:-1", "GAP"),
        (parse_lowest_site, "sub_Zn:int", "SITE"),
    ],
)
def test_bad_condition_text_is_refused_with_an_example(parser, text, fragment):
    with pytest.raises(DopantgapError, match=fragment) as caught:
        parser(text)
    assert "e.g." in str(caught.value)


def test_window_on_a_quantity_with_several_sites_asks_for_one():
    with pytest.raises(DopantgapError, match="name one"):
        resolve(Window("E_sol", -INF, 0.0), "ZnS", {"E_sol": ["sub_Zn", "int_hex"]})
    tied, why = resolve(Window("E_sol", -INF, 0.0, site="bond_centre"), "ZnS", {"E_sol": ["sub_Zn", "int_hex"]})
    assert tied is None and "bond_centre" in why


# -------------------------------------------- the probability arithmetic itself
def test_and_of_correlated_conditions_matches_multivariate_normal_cdf():
    # P(x1 <= 0.2 and x2 - x3 <= -0.1) for a correlated Gaussian, against scipy's
    # multivariate_normal.cdf (Genz 1992 integration) of the 2-d linear map
    mean = np.array([0.1, 0.3, 0.5])
    cov = np.array([[0.04, 0.018, 0.01], [0.018, 0.09, 0.03], [0.01, 0.03, 0.06]])
    sites = {"E": ["a", "b", "c"]}
    window, _ = resolve(Window("E", -INF, 0.2, site="a"), "H", sites)
    gap, _ = resolve(SiteGap("b", "c", 0.1, quantity="E"), "H", sites)
    index = {("E", "a"): 0, ("E", "b"): 1, ("E", "c"): 2}
    draws = np.random.default_rng(3).multivariate_normal(mean, cov, size=400_000)
    held = window.holds(draws, index) & gap.holds(draws, index)
    linear = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, -1.0]])
    expected = multivariate_normal(linear @ mean, linear @ cov @ linear.T).cdf([0.2, -0.1])
    assert held.mean() == pytest.approx(expected, abs=0.004)


# ------------------------------------------------------------- on the demo model
def test_single_window_matches_normal_cdf_of_the_filled_cell(demo_model):
    # a never-computed element: its E_bind cell is a Gaussian with the filled value and std
    cell = pd.DataFrame([{"element": "Ce", "host": "ZnS", "site": "sub_Zn", "method": "gga", "quantity": "E_bind"}])
    filled = demo_model.predict(cell).iloc[0]
    high = float(filled["value"]) + 0.4 * float(filled["std"])
    frame = screen(demo_model, [Window("E_bind", -INF, high)], element_symbols=["Ce"], hosts=["ZnS"], methods=["gga"])
    got = frame.set_index("element").at["Ce", "probability"]
    # scipy.stats.norm.cdf of the standardised bound; 20000 draws: sampling error <= 0.0035
    assert got == pytest.approx(norm.cdf(0.4), abs=0.012)


def test_two_correlated_sites_match_multivariate_normal_cdf(demo_model):
    cells = pd.DataFrame(
        [{"element": "Ce", "host": "ZnS", "site": site, "method": "gga", "quantity": "E_sol"} for site in ("sub_Zn", "int_hex")]
    )
    mean, cov = demo_model.predict_joint(cells)
    assert abs(cov[0, 1]) > 0.2 * math.sqrt(cov[0, 0] * cov[1, 1])  # the sites really are correlated
    bounds = mean + 0.3 * np.sqrt(np.diag(cov))
    frame = screen(
        demo_model,
        [Window("E_sol", -INF, bounds[0], site="sub_Zn"), Window("E_sol", -INF, bounds[1], site="int_hex")],
        element_symbols=["Ce"], hosts=["ZnS"], methods=["gga"],
    )
    got = frame.set_index("element").at["Ce", "probability"]
    expected = multivariate_normal(mean, cov).cdf(bounds)
    independent = norm.cdf(0.3) ** 2
    assert got == pytest.approx(expected, abs=0.012)
    assert abs(expected - independent) > 0.03  # the test can tell kept correlation from none


def test_computed_cells_give_probability_exactly_zero_or_one(demo_model):
    table = demo_model.table_
    row = table[(table["quantity"] == "E_bind") & (table["host"] == "ZnS") & (table["method"] == "gga")].iloc[0]
    value = float(row["value"])
    inside = screen(demo_model, [Window("E_bind", value - 1e-9, value + 1e-9)], hosts=["ZnS"], methods=["gga"])
    outside = screen(demo_model, [Window("E_bind", value + 1e-6, INF)], hosts=["ZnS"], methods=["gga"])
    assert inside.set_index("element").at[row["element"], "probability"] == 1.0
    assert outside.set_index("element").at[row["element"], "probability"] == 0.0
    assert inside.set_index("element").at[row["element"], "E_bind@sub_Zn status"] == "computed"


def test_verdicts_follow_the_confidence_and_rows_are_ranked(demo_model):
    frame = screen(demo_model, [Window("E_bind", -INF, -1.0), LowestSite("sub_Zn")], confidence=0.8)
    assert set(frame["host"]) == {"ZnS"}  # C has no sub_Zn site: skipped, and said so
    assert any("C at" in note and "not screened" in note for note in frame.attrs["notes"])
    yes, no = frame["verdict"] == "yes", frame["verdict"] == "no"
    assert (frame.loc[yes, "probability"] >= 0.8).all()
    assert (frame.loc[no, "probability"] <= 0.2).all()
    assert frame.loc[~yes & ~no, "probability"].between(0.2, 0.8).all()
    for _key, part in frame.groupby(["host", "method"]):
        assert part["probability"].is_monotonic_decreasing
        assert list(part["rank"]) == list(range(1, len(part) + 1))
    # the AND is never more likely than either condition
    each = frame[["P: E_bind <= -1", "P: sub_Zn lowest"]].min(axis=1)
    assert (frame["probability"] <= each + 1e-12).all()


def test_undecided_rows_name_one_of_their_own_missing_cells(demo_model):
    frame = screen(demo_model, [Window("E_bind", -INF, -1.0)], hosts=["ZnS"])
    undecided = frame[frame["verdict"] == "undecided"]
    assert len(undecided)
    table = demo_model.table_
    computed = set(zip(table["element"], table["host"], table["site"], table["method"], table["quantity"]))
    for row in undecided.itertuples(index=False):
        host, site, method, quantity = row.decisive_cell.split("/")
        assert host == row.host and quantity == "E_bind"
        assert (row.element, host, site, method, quantity) not in computed
        assert row.decisive_gain_bits > 0
    assert (frame.loc[frame["verdict"] != "undecided", "decisive_cell"] == "").all()


def test_cautions_for_toxic_and_outside_elements(demo_model):
    frame = screen(demo_model, [Window("E_bind", -INF, -1.0)], element_symbols=["Pu"], hosts=["ZnS"], methods=["hyb"])
    rows = frame.set_index("element")
    assert "radioactive" in rows.at["Pu", "caution"]
    assert "toxic" in rows.at["Cd", "caution"]
    assert rows.at["Pu", "outside_domain"] and rows.at["Pu", "domain_note"]


def test_temperature_adds_populations_and_trapping_with_bands(demo_model):
    properties = SiteProperties(multiplicity={("ZnS", "int_hex"): 2.0}, coordination={("ZnS", "sub_Zn"): 12})
    frame = screen(
        demo_model, [LowestSite("sub_Zn")], temperature=900, concentration=1e-3,
        site_properties=properties, hosts=["ZnS"], methods=["gga"],
    )
    populations = frame[[column for column in frame.columns if column.startswith("pop ") and column.count(" ") == 1]]
    assert populations.shape[1] == 5
    assert (populations.sum(axis=1) <= 1.0 + 1e-9).all()  # medians of shares that sum to 1
    assert (frame["bound_vacancies lo"] <= frame["bound_vacancies"]).all()
    assert (frame["bound_vacancies"] <= frame["bound_vacancies hi"]).all()
    notes = " ".join(frame.attrs["notes"])
    assert "negative = bound" in notes and "Z = 12" in notes
    assert "1 per formula unit assumed" in notes and "ZnS int_hex" not in notes.split("assumed")[0].split("given for")[1]


def test_trapping_without_a_coordination_is_skipped_and_said(demo_model):
    frame = screen(demo_model, [LowestSite("sub_Zn")], temperature=900, hosts=["ZnS"], methods=["gga"])
    assert "bound_vacancies" not in frame.columns
    assert any("--coordination" in note for note in frame.attrs["notes"])


def test_binding_sign_the_table_contradicts_is_refused():
    table = pd.DataFrame({"quantity": ["E_b"] * 10, "value": [0.3, 0.5, 0.2, 0.1, 0.4, 0.6, 0.2, 0.3, -0.05, 0.1]})
    with pytest.raises(DopantgapError, match="--binding-positive"):
        binding_convention(table, "E_b", None)
    sign, note = binding_convention(table, "E_b", "positive")
    assert sign == "positive" and "positive = bound" in note
    sign, note = binding_convention(table, "E_b", "negative")  # stated against the table: kept, with a caution
    assert sign == "negative" and "Caution" in note
    mixed = table.assign(value=[0.3, -0.5, 0.2, -0.1, 0.4, -0.6, 0.2, -0.3, -0.05, 0.1])
    assert binding_convention(mixed, "E_b", None)[0] == "negative"


@pytest.mark.parametrize(
    "kwargs, fragment",
    [
        ({"conditions": []}, "at least one condition"),
        ({"conditions": [Window("E_nope", -INF, 0.0)]}, "not a quantity"),
        ({"conditions": [LowestSite("sub_Zn")], "confidence": 0.4}, "--confidence"),
        ({"conditions": [LowestSite("sub_Zn")], "hosts": ["MgO"]}, "not a host"),
        ({"conditions": [LowestSite("sub_Zn")], "methods": ["pbe0"]}, "not a method"),
        ({"conditions": [LowestSite("sub_Zn")], "temperature": -3}, "kelvin"),
        ({"conditions": [LowestSite("split_vac")], "hosts": ["ZnS"], "methods": ["gga"]}, "ZnS at gga"),
    ],
)
def test_bad_screen_requests_are_refused_in_one_line(demo_model, kwargs, fragment):
    with pytest.raises(DopantgapError, match=fragment):
        screen(demo_model, **kwargs)


# -------------------------------------------------------- site properties file
def test_site_properties_file(tmp_path):
    path = tmp_path / "hosts.csv"
    path.write_text("host,formula,site,multiplicity,coordination\nZnS,ZnS,sub_Zn,1,12\nZnS,ZnS,int_hex,2,\nC,C,,,\n")
    properties = read_site_properties(path)
    assert properties.multiplicities("ZnS", ["sub_Zn", "int_hex", "sub_S"]) == ([1.0, 2.0, 1.0], ["sub_S"])
    assert properties.coordination_of("ZnS", "sub_Zn") == 12
    assert properties.coordination_of("ZnS", "int_hex") is None
    plain = tmp_path / "plain.csv"
    plain.write_text("host,formula\ndiamond,C\n")  # a host file that only maps labels: no site property
    assert read_site_properties(plain).multiplicities("diamond", ["sub_C"]) == ([1.0], ["sub_C"])


@pytest.mark.parametrize(
    "text, fragment, line",
    [
        ("host,site,multiplicity\nZnS,sub_Zn,zero\n", "multiplicity 'zero'", 2),
        ("host,site,coordination\nZnS,sub_Zn,4.5\n", "whole number", 2),
        ("host,site,multiplicity\nZnS,sub_Zn,1\nZnS,sub_Zn,2\n", "given twice", 3),
        ("site,multiplicity\nsub_Zn,1\n", "'host'", 1),
        ("host,coordination\nZnS,12\n", "'site'", 1),
    ],
)
def test_bad_site_properties_name_file_and_line(tmp_path, text, fragment, line):
    path = tmp_path / "hosts.csv"
    path.write_text(text)
    with pytest.raises(TableError, match=fragment) as caught:
        read_site_properties(path)
    assert f"hosts.csv:{line}:" in str(caught.value)


def test_a_yes_never_rests_on_an_extrapolation(demo_model):
    # every element meets this window with P = 1; Pu (f block, never tabulated) is outside
    # what the model has seen, so its yes is held back and the row says why
    frame = screen(demo_model, [Window("E_bind", -INF, 100.0)], element_symbols=["Pu"], hosts=["ZnS"], methods=["gga"])
    rows = frame.set_index("element")
    assert rows.at["Pu", "probability"] == pytest.approx(1.0)
    assert rows.at["Pu", "verdict"] == "undecided"
    assert "outside what the model has seen" in rows.at["Pu", "verdict_note"]
    assert rows.at["Pu", "decisive_cell"] == "ZnS/sub_Zn/gga/E_bind"
    inside = frame[~frame["outside_domain"]]
    assert (inside["verdict"] == "yes").all() and (inside["verdict_note"] == "").all()
