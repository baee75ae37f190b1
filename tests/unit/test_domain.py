"""Tests of dopantgap.domain: distance from the training elements and the outside flag.

Training elements come from the invented demo world (dopantgap.world.DEMO_ELEMENTS,
invented data) or from small hand-picked lists; descriptor values are read from
dopantgap.elements.descriptor_table so that the hand calculations use the same numbers.
"""

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.exceptions import NotFittedError
from sklearn.neighbors import NearestNeighbors

from dopantgap.domain import ElementDomain, HostDomain
from dopantgap.elements import descriptor_table
from dopantgap.errors import DopantgapError
from dopantgap.features import DEFAULT_DESCRIPTORS
from dopantgap.world import DEMO_ELEMENTS

LANTHANIDES_IN_DEMO = ("La", "Ce", "Gd")
TRAINING = [symbol for symbol in DEMO_ELEMENTS if symbol not in LANTHANIDES_IN_DEMO]
SMALL = ["Al", "Ga", "In", "N"]
TWO_DESCRIPTORS = ("covalent_radius", "electronegativity_pauling")


@pytest.fixture(scope="module")
def demo_domain():
    return ElementDomain().fit(TRAINING)


def _standardised_by_hand(training, queries, names):
    """Mean/population-std standardisation written out with numpy only."""
    train = descriptor_table(training)[list(names)].to_numpy(dtype=float, copy=True)
    query = descriptor_table(queries)[list(names)].to_numpy(dtype=float, copy=True)
    mean = train.sum(axis=0) / len(train)
    std = np.sqrt(((train - mean) ** 2).sum(axis=0) / len(train))
    return (train - mean) / std, (query - mean) / std, mean, std


# --- the demo elements without lanthanides -------------------------------------------------


def test_lanthanide_nd_far_from_demo_training_is_outside(demo_domain):
    assert not set(LANTHANIDES_IN_DEMO) & set(demo_domain.symbols_)
    assert demo_domain.outside(["Nd"]).tolist() == [True]
    assert demo_domain.distance(["Nd"])[0] > demo_domain.threshold_ > 0


def test_every_lanthanide_is_outside_a_table_without_f_elements(demo_domain):
    """Eu is close to Y by distance alone (0.57 < threshold 0.62): the new-block rule
    flags it; f-block membership as in IUPAC, Nomenclature of Inorganic Chemistry,
    Recommendations 2005 (IR-3.5: Ce-Lu are the f-block lanthanoids)."""
    lanthanides = ["Pr", "Nd", "Sm", "Eu", "Tb", "Dy", "Ho", "Er", "Tm", "Yb"]
    assert demo_domain.distance(["Eu"])[0] < demo_domain.threshold_
    assert demo_domain.new_block(lanthanides).all()
    assert demo_domain.outside(lanthanides).all()
    # a d-block element the table lacks is not new-block
    assert not demo_domain.new_block(["Nb", "Ga"]).any()


def test_training_element_has_distance_zero_and_is_inside(demo_domain):
    symbols = ["Ga", "Zn", "Cs", "F"]
    assert demo_domain.distance(symbols).tolist() == [0.0, 0.0, 0.0, 0.0]
    assert demo_domain.outside(symbols).tolist() == [False] * 4
    assert demo_domain.nearest(symbols).tolist() == symbols
    # every training element, not only a few
    assert not demo_domain.outside(list(demo_domain.symbols_)).any()


def test_close_neighbour_is_inside():
    domain = ElementDomain().fit(["Al", "In", "N", "P", "As", "Zn", "Cd", "S", "Se", "Mg"])
    distance = domain.distance(["Ga"])[0]
    assert 0 < distance <= domain.threshold_
    assert domain.outside(["Ga"]).tolist() == [False]
    assert domain.nearest(["Ga"])[0] in {"Al", "In"}


def test_ga_is_inside_the_demo_training_domain_after_removal(demo_domain):
    without_ga = ElementDomain().fit([symbol for symbol in TRAINING if symbol != "Ga"])
    assert without_ga.distance(["Ga"])[0] > 0
    assert without_ga.outside(["Ga"]).tolist() == [False]


# --- calibration of the threshold ----------------------------------------------------------


@pytest.mark.parametrize("quantile", [0.5, 0.8, 0.95, 1.0])
def test_threshold_covers_the_documented_share_of_training_elements(quantile):
    domain = ElementDomain(quantile=quantile).fit(TRAINING)
    loo = domain.loo_distances_
    assert loo.shape == (len(domain.symbols_),)
    assert np.all(np.isfinite(loo)) and np.all(loo >= 0)
    assert np.mean(loo <= domain.threshold_) >= quantile
    # the documented choice: numpy.quantile with method="higher", i.e. one of the values
    assert domain.threshold_ == np.quantile(loo, quantile, method="higher")
    assert domain.threshold_ in loo


def test_tighter_quantile_gives_lower_threshold_and_flags_more():
    loose = ElementDomain(quantile=1.0).fit(TRAINING)
    tight = ElementDomain(quantile=0.5).fit(TRAINING)
    assert tight.threshold_ < loose.threshold_
    assert loose.threshold_ == loose.loo_distances_.max()
    queries = ["Nd", "Eu", "Pr", "Sm", "H", "Xe", "U", "Si", "Ge"]
    assert tight.outside(queries).sum() > loose.outside(queries).sum()
    # everything the loose domain flags, the tight one flags too
    assert np.all(tight.outside(queries) | ~loose.outside(queries))


# --- hand calculation and reference library ------------------------------------------------


def test_distance_matches_hand_computed_standardisation():
    queries = ["B", "Tl", "Ga", "Eu"]
    domain = ElementDomain(descriptors=TWO_DESCRIPTORS).fit(SMALL)
    train, query, mean, std = _standardised_by_hand(sorted(SMALL), queries, TWO_DESCRIPTORS)

    np.testing.assert_allclose(domain.mean_, mean, rtol=1e-12)
    np.testing.assert_allclose(domain.scale_, std, rtol=1e-12)
    np.testing.assert_allclose(domain.points_, train, rtol=1e-12, atol=1e-12)

    expected = np.array([
        min(np.sqrt(np.sum((row - point) ** 2) / 2.0) for point in train) for row in query
    ])
    np.testing.assert_allclose(domain.distance(queries), expected, rtol=1e-12, atol=1e-15)
    expected_nearest = [sorted(SMALL)[int(np.argmin(((row - train) ** 2).sum(axis=1)))]
                        for row in query]
    assert domain.nearest(queries).tolist() == expected_nearest
    assert domain.distance(["Ga"])[0] == 0.0

    pairwise = np.sqrt(((train[:, None, :] - train[None, :, :]) ** 2).sum(axis=2) / 2.0)
    np.fill_diagonal(pairwise, np.inf)
    np.testing.assert_allclose(domain.loo_distances_, pairwise.min(axis=1), rtol=1e-12)


def test_hand_computed_single_descriptor_value():
    # one descriptor, three elements: distance is |z_query - z_nearest| (sqrt(1) = 1)
    table = descriptor_table(["Al", "Ga", "In", "Tl"])["covalent_radius"]
    radii = table.loc[["Al", "Ga", "In"]].to_numpy(dtype=float)
    std = radii.std()
    expected = abs(float(table["Tl"]) - radii.max()) / std
    domain = ElementDomain(descriptors=("covalent_radius",)).fit(["In", "Al", "Ga"])
    np.testing.assert_allclose(domain.distance(["Tl"]), [expected], rtol=1e-12)


@pytest.mark.parametrize(
    ("training", "names"),
    [(SMALL + ["P", "As"], TWO_DESCRIPTORS), (TRAINING, DEFAULT_DESCRIPTORS)],
)
def test_nearest_neighbours_agree_with_scikit_learn(training, names):
    # Reference: scikit-learn NearestNeighbors (Pedregosa et al., "Scikit-learn: Machine
    # Learning in Python", JMLR 12, 2825-2830, 2011), Euclidean metric on the same
    # standardised matrix; our distances are those divided by sqrt(n_descriptors).
    domain = ElementDomain(descriptors=names).fit(training)
    root = np.sqrt(len(names))
    reference = NearestNeighbors(n_neighbors=2).fit(domain.points_)
    distances, _ = reference.kneighbors(domain.points_)
    np.testing.assert_allclose(domain.loo_distances_, distances[:, 1] / root, rtol=1e-9)

    queries = ["Nd", "Eu", "H", "Xe", "U", "Si", "Ge", "Ga"]
    raw = descriptor_table(queries)[list(names)].to_numpy(dtype=float, copy=True)
    if "polarisability" in names:
        column = list(names).index("polarisability")
        raw[:, column] = np.log10(np.maximum(raw[:, column], 1e-3))
    scaled = (raw - domain.mean_) / domain.scale_
    distances, indices = reference.kneighbors(scaled, n_neighbors=1)
    np.testing.assert_allclose(
        domain.distance(queries), distances[:, 0] / root, rtol=1e-9, atol=1e-12
    )
    assert domain.nearest(queries).tolist() == domain.symbols_[indices[:, 0]].tolist()


def test_polarisability_enters_as_log10_like_the_features():
    training = ["Li", "Cs", "F", "Fe"]
    domain = ElementDomain(descriptors=("polarisability",)).fit(training)
    values = descriptor_table(sorted(training))["polarisability"].to_numpy(dtype=float)
    np.testing.assert_allclose(domain.mean_, [np.log10(values).mean()], rtol=1e-12)
    np.testing.assert_allclose(domain.scale_, [np.log10(values).std()], rtol=1e-12)


def test_constant_descriptor_gets_scale_one():
    # Al, P, S and Cl all lie in period 3
    domain = ElementDomain(descriptors=("period", "covalent_radius")).fit(["Al", "P", "S", "Cl"])
    assert domain.scale_[0] == 1.0
    assert domain.mean_[0] == 3.0
    np.testing.assert_array_equal(domain.points_[:, 0], 0.0)
    # Ga (period 4) is one period away: contributes 1 in its own units
    radius = descriptor_table(["Ga"])["covalent_radius"].iloc[0]
    z_radius = (radius - domain.mean_[1]) / domain.scale_[1]
    expected = min(np.sqrt((1.0 + (z_radius - point) ** 2) / 2.0) for point in domain.points_[:, 1])
    np.testing.assert_allclose(domain.distance(["Ga"]), [expected], rtol=1e-12)


# --- input handling ------------------------------------------------------------------------


def test_duplicates_and_letter_case_are_collapsed_in_fit_and_kept_in_queries():
    domain = ElementDomain().fit(["ga", "Ga", "AL", "n", "N", "In"])
    assert domain.symbols_.tolist() == ["Al", "Ga", "In", "N"]
    assert domain.points_.shape == (4, len(DEFAULT_DESCRIPTORS))
    plain = ElementDomain().fit(["Al", "Ga", "In", "N"])
    np.testing.assert_array_equal(domain.mean_, plain.mean_)
    distances = domain.distance(["Eu", "ga", "Eu", "B"])
    assert distances.shape == (4,)
    assert distances[0] == distances[2] > 0
    assert distances[1] == 0.0
    assert domain.nearest(["ga", "B"]).dtype == object
    assert domain.nearest(["ga"]).tolist() == ["Ga"]


def test_same_input_gives_same_output():
    queries = ["Nd", "Eu", "Ga", "Xe"]
    first = ElementDomain().fit(TRAINING)
    second = ElementDomain().fit(list(reversed(TRAINING)))
    np.testing.assert_array_equal(first.distance(queries), second.distance(queries))
    np.testing.assert_array_equal(first.outside(queries), second.outside(queries))
    assert first.nearest(queries).tolist() == second.nearest(queries).tolist()
    assert first.threshold_ == second.threshold_


def test_empty_query_gives_empty_arrays(demo_domain):
    assert demo_domain.distance([]).shape == (0,)
    assert demo_domain.outside([]).dtype == bool
    assert demo_domain.nearest([]).shape == (0,)


def test_fewer_than_three_training_elements_flag_only_new_blocks():
    pair = ElementDomain().fit(["Ga", "N"])
    assert pair.threshold_ == np.inf
    queries = ["Eu", "Xe", "H", "U", "Ga"]
    distances = pair.distance(queries)
    assert np.all(np.isfinite(distances)) and np.all(distances[:-1] > 0)
    # no distance threshold to calibrate: only the block rule flags (Eu, U: f; H: s)
    assert pair.outside(queries).tolist() == [True, False, True, True, False]
    assert pair.loo_distances_[0] == pair.loo_distances_[1] > 0

    single = ElementDomain().fit(["Ga", "ga"])
    assert single.threshold_ == np.inf
    assert single.loo_distances_.tolist() == [np.inf]
    assert single.outside(queries).tolist() == [True, False, True, True, False]
    assert single.nearest(["Eu"]).tolist() == ["Ga"]


def test_empty_fit_raises_one_line_error():
    with pytest.raises(DopantgapError, match="no training elements") as caught:
        ElementDomain().fit([])
    assert "\n" not in str(caught.value)


def test_unknown_symbol_raises_dopantgap_error(demo_domain):
    with pytest.raises(DopantgapError, match="'Xx'"):
        ElementDomain().fit(["Ga", "Xx", "N"])
    with pytest.raises(DopantgapError, match="'Qq'"):
        demo_domain.distance(["Ga", "Qq"])


@pytest.mark.parametrize(
    ("parameters", "message"),
    [
        ({"descriptors": ("covalent_radius", "shoe_size")}, "shoe_size"),
        ({"descriptors": ()}, "empty"),
        ({"descriptors": ("period", "period")}, "twice"),
        ({"quantile": 0.0}, "quantile"),
        ({"quantile": 1.5}, "quantile"),
        ({"quantile": "high"}, "quantile"),
    ],
)
def test_bad_parameters_raise_dopantgap_error(parameters, message):
    with pytest.raises(DopantgapError, match=message):
        ElementDomain(**parameters).fit(SMALL)


@pytest.mark.parametrize("method", ["distance", "outside", "nearest"])
def test_unfitted_domain_raises_not_fitted_error(method):
    with pytest.raises(NotFittedError):
        getattr(ElementDomain(), method)(["Ga"])


def test_clone_and_get_params_round_trip(demo_domain):
    domain = ElementDomain(descriptors=TWO_DESCRIPTORS, quantile=0.8)
    assert domain.get_params() == {"descriptors": TWO_DESCRIPTORS, "quantile": 0.8, "descriptor_values": None}
    copy = clone(domain)
    assert copy is not domain
    assert copy.get_params() == domain.get_params()
    rebuilt = ElementDomain(**domain.get_params())
    assert rebuilt.get_params() == domain.get_params()

    fitted_copy = clone(demo_domain)
    assert not hasattr(fitted_copy, "threshold_")
    assert fitted_copy.get_params() == {"descriptors": None, "quantile": 0.95, "descriptor_values": None}
    refitted = fitted_copy.fit(TRAINING)
    assert refitted.threshold_ == demo_domain.threshold_
    assert refitted.descriptors_ == tuple(DEFAULT_DESCRIPTORS)


# ------------------------------------------------------------------ per level and host
def _level_table():
    """Invented cells: twelve metals and two halogens at the cheap level, only the metals
    at the expensive one (values do not matter to the domain)."""
    import pandas as pd

    metals = ("Na", "K", "Mg", "Ca", "Sr", "Al", "Ti", "V", "Cr", "Fe", "Ni", "Zn")
    rows = [(e, "ZnS", "sub_Zn", "gga", "E_sol", 1.0) for e in metals + ("F", "Cl")]
    rows += [(e, "ZnS", "sub_Zn", "hyb", "E_sol", 1.2) for e in metals]
    return pd.DataFrame(rows, columns=["element", "host", "site", "method", "quantity", "value"])


def test_level_domain_flags_a_halogen_at_a_level_computed_only_for_metals():
    """The expensive level covers only metals: a halogen's expensive cells lie outside
    (farther from every expensive-level element than the table's threshold), its cheap
    cells inside, and a metal's expensive cell inside (distance 0)."""
    from dopantgap.domain import LevelDomain

    table = _level_table()
    domain = LevelDomain().fit(table)
    cells = table[["element", "host", "site", "quantity"]].drop_duplicates().reset_index(drop=True)
    expensive = cells.assign(method="hyb")
    cheap = cells.assign(method="gga")
    outside_expensive = dict(zip(expensive["element"], domain.outside(expensive)))
    assert outside_expensive["F"] and outside_expensive["Cl"]
    assert not any(outside_expensive[e] for e in ("Na", "Fe", "Zn"))
    assert not domain.outside(cheap).any()
    distance = dict(zip(expensive["element"], domain.distance(expensive)))
    assert distance["Fe"] == 0.0 and distance["F"] > domain.elements_.threshold_
    # the distance is ElementDomain's, measured to the expensive level's elements
    reference = sorted(set(table.loc[table["method"] == "hyb", "element"]))
    assert distance["F"] == pytest.approx(domain.elements_.distance(["F"], reference)[0])
    assert set(domain.nearest(expensive[expensive["element"] == "F"])) <= set(reference)


def test_level_domain_uses_the_host_set_only_when_it_has_enough_elements():
    import pandas as pd

    from dopantgap.domain import LevelDomain

    table = _level_table()
    extra = pd.DataFrame([("Fe", "MgO", "sub_Mg", "hyb", "E_sol", 1.0), ("Ni", "MgO", "sub_Mg", "hyb", "E_sol", 1.0)],
                         columns=table.columns)
    domain = LevelDomain(min_host_elements=3).fit(pd.concat([table, extra], ignore_index=True))
    # MgO has two elements at hyb: the level's elements over all hosts serve instead
    assert domain.reference("MgO", "hyb", "E_sol") == domain.computed_[("E_sol", "hyb")]
    assert domain.reference("ZnS", "hyb", "E_sol") == domain.computed_[("E_sol", "hyb", "ZnS")]
    # a level never computed: infinite distance, outside
    missing = pd.DataFrame({"element": ["Fe"], "host": ["ZnS"], "site": ["sub_Zn"], "method": ["hse"],
                            "quantity": ["E_sol"]})
    assert np.isinf(domain.distance(missing)[0]) and domain.outside(missing)[0]


def test_a_host_exactly_at_the_host_domain_limit_is_inside():
    # three hosts one unit apart: each lies 1 from its nearest neighbour, so the limit is
    # 1; a new host 1 beyond the last is at the limit (inside), even with rounding noise
    # in its numbers, and a host clearly farther is outside
    known = pd.DataFrame({"host_x": [0.0, 1.0, 2.0]}, index=pd.Index(["A", "B", "C"], name="host"))
    domain = HostDomain().fit(known)
    new = pd.DataFrame({"host_x": [3.0, 3.0 + 1e-9, 3.1]}, index=pd.Index(["D", "E", "F"], name="host"))
    assert domain.outside(new).tolist() == [False, False, True]


def test_range_excess_reads_the_most_extreme_descriptor_by_hand():
    """A 4d metal against the 3d metals alone: along period (constant over the 3d metals)
    Rh overshoots by one period, over the population std of the training elements'
    periods; the distance, an average over descriptors, dilutes that. Periods from
    mendeleev's bundled data (3d metals period 4, Rh period 5: the IUPAC periodic table)."""
    three_d = ["Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn"]
    training = three_d + ["Rh", "Y", "Ba", "Al"]
    names = ("period", "covalent_radius")
    table = descriptor_table(training)[list(names)].astype(float)
    assert set(table.loc[three_d, "period"]) == {4.0} and table.at["Rh", "period"] == 5.0
    std = table.to_numpy().std(axis=0)
    reference = table.loc[three_d].to_numpy()
    rh = table.loc["Rh"].to_numpy()
    by_hand = max(0.0, float(np.max(np.maximum(reference.min(axis=0) - rh, rh - reference.max(axis=0)) / std)))
    domain = ElementDomain(descriptors=names).fit(training)
    excess = domain.range_excess(["Rh", "Fe", "Zn"], reference=three_d)
    np.testing.assert_allclose(excess, [by_hand, 0.0, 0.0], rtol=1e-12, atol=1e-15)
    assert by_hand == pytest.approx(1.0 / std[0])  # the period is the extreme descriptor
    # inside the range on every descriptor: 0, though not a reference element
    assert domain.range_excess(["Mn"], reference=["Sc", "Zn"])[0] == 0.0
    assert np.isinf(domain.range_excess(["Rh"], reference=[])[0])
    assert domain.range_excess([], reference=three_d).shape == (0,)


def test_level_domain_range_excess_is_the_element_domains_against_the_level():
    from dopantgap.domain import LevelDomain

    table = _level_table()
    domain = LevelDomain().fit(table)
    cells = table[["element", "host", "site", "quantity"]].drop_duplicates().reset_index(drop=True)
    expensive = cells.assign(method="hyb")
    reference = sorted(set(table.loc[table["method"] == "hyb", "element"]))
    excess = dict(zip(expensive["element"], domain.range_excess(expensive)))
    assert excess["Fe"] == 0.0
    assert excess["F"] == pytest.approx(domain.elements_.range_excess(["F"], reference)[0]) and excess["F"] > 0
    assert not domain.range_excess(cells.assign(method="gga")).any()
