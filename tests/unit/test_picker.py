"""Tests of the picker of next calculations (dopantgap.picker).

Outside references used here:
- Rasmussen & Williams 2006, "Gaussian Processes for Machine Learning", eq. 2.24 and
  Algorithm 2.1 (posterior covariance of a GP), as computed by scikit-learn's
  GaussianProcessRegressor refitted with one more point;
- Shannon entropy as computed by scipy.stats.entropy (base 2);
- bivariate normal orthant probabilities by scipy.stats.multivariate_normal.cdf (Genz's
  algorithm) for the probability that a site is lowest;
- expectations over a Gaussian by adaptive quadrature (scipy.integrate.quad).

Hand-built Gaussian cases use a stand-in surrogate whose stages return a covariance
written out in the test, so every expected pick can be worked out by hand.
"""

import copy
import functools

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats
from sklearn.base import clone
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, WhiteKernel
from threadpoolctl import threadpool_limits

from dopantgap.calibration import ScenarioCalibration
from dopantgap.learners import BoostLearner, ShiftPriorLearner
from dopantgap.errors import DopantgapError
import dopantgap.picker as picker_module
from dopantgap.picker import (
    PICK_COLUMNS,
    USEFUL_BENEFIT,
    binary_entropy,
    condition_on,
    expected_site_entropy,
    expected_window_entropy,
    joint_groups_text,
    parse_cost,
    parse_window,
    pick_next,
    robust_picks_text,
    site_entropy,
    site_probabilities,
    summed_std_reduction,
    summed_variance_reduction,
    window_probability,
)
from dopantgap.joint import cell_grid, joint_groups, missing_joint, missing_joints
from dopantgap.store import load_model
from dopantgap.surrogate import Surrogate, _Stage
from dopantgap.surrogate.plausible import plausible_surrogates, uncertain_stages
from dopantgap.table import KEY_COLUMNS



# ------------------------------------------------------------ a stand-in surrogate
class _UnitEncoder:
    """Encodes a cell as the index of its (element, host, site) in a fixed list."""

    def __init__(self, units):
        self.index = {unit: position for position, unit in enumerate(units)}

    def transform(self, cells):
        keys = zip(cells["element"], cells["host"], cells["site"])
        return np.array([[self.index[key]] for key in keys], dtype=float)


class _FixedGaussian:
    """A 'learner' whose predictive mean and covariance are written out by hand."""

    def __init__(self, mean, cov):
        self.mean = np.asarray(mean, dtype=float)
        self.cov = np.asarray(cov, dtype=float)

    def predict(self, X, return_cov=False):
        rows = X[:, 0].astype(int)
        return self.mean[rows], self.cov[np.ix_(rows, rows)]


ANCHOR = "Zn"  # the one tabulated element: it defines the grid's columns


def hand_surrogate(sites, elements, stages, quantity="E"):
    """A surrogate of one quantity in host ZnS whose only computed cells are the anchor's.

    ``stages`` lists (method, kind, mean, cov) over the units: the anchor's sites
    first, then each element's sites in order (element-major).
    """
    units = [(ANCHOR, "ZnS", site) for site in sites]
    units += [(element, "ZnS", site) for element in elements for site in sites]
    rows = [
        {"element": ANCHOR, "host": "ZnS", "site": site, "method": method, "quantity": quantity, "value": 0.0}
        for method, *_ in stages
        for site in sites
    ]
    model = Surrogate()
    model.table_ = pd.DataFrame(rows)
    model.levels_ = [method for method, *_ in stages]
    model.quantity_levels_ = {quantity: list(model.levels_)}
    encoder = _UnitEncoder(units)
    model.stages_ = {
        (quantity, method): _Stage(quantity, method, kind, encoder, _FixedGaussian(mean, cov))
        for method, kind, mean, cov in stages
    }
    model.calibration_ = ScenarioCalibration({})  # no residuals: every scale is 1
    return model


def padded(values, n_anchor):
    """Prepend the anchor's units (computed: their entries are never used)."""
    values = np.asarray(values, dtype=float)
    if values.ndim == 1:
        return np.concatenate([np.zeros(n_anchor), values])
    size = n_anchor + len(values)
    full = np.eye(size)
    full[n_anchor:, n_anchor:] = values
    return full


@pytest.fixture(scope="module")
def demo(demo_model_dir):
    surrogate, _manifest = load_model(demo_model_dir)
    return surrogate


def computed_keys(surrogate):
    return set(surrogate.table_[list(KEY_COLUMNS)].itertuples(index=False, name=None))


# ------------------------------------------------------------------ option parsing
def test_parse_cost_reads_pairs():
    assert parse_cost("gga=1, hyb=30") == {"gga": 1.0, "hyb": 30.0}
    assert parse_cost(None) == {}


@pytest.mark.parametrize("text", ["gga", "gga=", "gga=-1", "gga=0", "gga=abc", "=3", "gga=1,gga=2", "gga=inf"])
def test_parse_cost_errors_are_one_line(text):
    with pytest.raises(DopantgapError) as caught:
        parse_cost(text)
    message = str(caught.value)
    assert "--cost" in message and "\n" not in message


def test_parse_window_reads_negative_bounds():
    assert parse_window("E_bind:-1.2:-0.4") == ("E_bind", -1.2, -0.4)


@pytest.mark.parametrize("text", ["E_bind", "E_bind:1", ":0:1", "E_bind:a:1", "E_bind:1:0", "E:0:1:2"])
def test_parse_window_errors_are_one_line(text):
    with pytest.raises(DopantgapError) as caught:
        parse_window(text)
    message = str(caught.value)
    assert "--window" in message and "\n" not in message


# ------------------------------------------------------------- outside references
def test_rank_one_update_matches_sklearn_gp_refit():
    """Rasmussen & Williams 2006, eq. 2.24 / Algorithm 2.1 via scikit-learn: the covariance
    after adding a point at its predicted mean (same kernel, no re-optimisation)."""
    rng = np.random.default_rng(4)
    X = np.sort(rng.uniform(0, 5, 7)).reshape(-1, 1)
    y = np.sin(X[:, 0]) + 0.1 * rng.standard_normal(7)
    kernel = ConstantKernel(1.0) * RBF(1.0) + WhiteKernel(0.05)
    first = GaussianProcessRegressor(kernel=kernel, normalize_y=False, random_state=0).fit(X, y)
    tests = np.linspace(-0.5, 5.5, 9).reshape(-1, 1)
    mean, cov = first.predict(tests, return_cov=True)
    for added in (0, 4, 8):
        grown_X = np.vstack([X, tests[added : added + 1]])
        grown_y = np.append(y, mean[added])
        refit = GaussianProcessRegressor(kernel=first.kernel_, optimizer=None, normalize_y=False).fit(grown_X, grown_y)
        new_mean, new_cov = refit.predict(tests, return_cov=True)
        # the observed point itself keeps the fitted white noise of a new calculation
        # in sklearn's prediction, while condition_on zeroes it (the cell is known);
        # compare the other points
        others = np.arange(len(tests)) != added
        ours = condition_on(cov, added)
        np.testing.assert_allclose(ours[np.ix_(others, others)], new_cov[np.ix_(others, others)], atol=1e-9)
        np.testing.assert_allclose(new_mean, mean, atol=1e-9)  # the mean does not move
        # summed reduction over the other points, plus the point's own variance
        reduction = summed_variance_reduction(cov)[added]
        drop = np.trace(cov) - np.trace(new_cov[np.ix_(others, others)])
        assert reduction == pytest.approx(drop, rel=1e-6)  # sklearn adds alpha=1e-10 to the diagonal
        # the table goal's benefit: the summed std, the point's own std falling to zero
        std_drop = np.sum(np.sqrt(np.diag(cov))) - np.sum(np.sqrt(np.diag(new_cov)[others]))
        assert summed_std_reduction(cov)[added] == pytest.approx(std_drop, rel=1e-6)
        assert summed_std_reduction(cov, targets=others)[added] == pytest.approx(
            std_drop - np.sqrt(cov[added, added]), rel=1e-6
        )


def test_site_entropy_matches_scipy():
    """scipy.stats.entropy with base 2."""
    for p in ([0.5, 0.5], [0.46, 0.41, 0.13], [1.0, 0.0, 0.0], [0.2, 0.2, 0.2, 0.4]):
        assert site_entropy(p) == pytest.approx(stats.entropy(p, base=2), abs=1e-12)
    assert binary_entropy(0.5) == pytest.approx(1.0)
    assert binary_entropy(0.1) == pytest.approx(stats.entropy([0.1, 0.9], base=2))


def test_site_probabilities_match_orthant_probabilities():
    """P(site 0 lowest) = P(X1 - X0 > 0, X2 - X0 > 0): scipy.stats.multivariate_normal.cdf."""
    mean = np.array([1.0, 1.1, 1.3])
    cov = np.array([[0.04, 0.02, 0.01], [0.02, 0.05, 0.015], [0.01, 0.015, 0.06]])
    normals = np.random.default_rng(0).standard_normal((40000, 3))
    ours = site_probabilities(mean, cov, normals)
    for site in range(3):
        others = [index for index in range(3) if index != site]
        difference = np.zeros((2, 3))
        difference[:, site] = 1.0
        difference[[0, 1], others] = -1.0  # rows: X_site - X_other < 0
        reference = stats.multivariate_normal(
            mean=difference @ mean, cov=difference @ cov @ difference.T
        ).cdf(np.zeros(2))
        assert ours[site] == pytest.approx(reference, abs=0.01)
    # two sites: exact
    two = site_probabilities(mean[:2], cov[:2, :2])
    gap_sd = np.sqrt(cov[0, 0] + cov[1, 1] - 2 * cov[0, 1])
    assert two[0] == pytest.approx(stats.norm.cdf((mean[1] - mean[0]) / gap_sd), abs=1e-12)


def test_expected_entropies_match_quadrature():
    """The Gauss-Hermite expectations against scipy.integrate.quad over the candidate's result."""
    mean = np.array([1.0, 1.05])
    cov = np.array([[0.04, 0.01], [0.01, 0.03]])
    column = np.array([cov[0, 0], cov[1, 0], cov[0, 0]])  # candidate = site 0

    def posterior_site_entropy(y):
        shift = cov[:, 0] * (y - mean[0]) / cov[0, 0]
        posterior = cov - np.outer(cov[:, 0], cov[:, 0]) / cov[0, 0]
        return site_entropy(site_probabilities(mean + shift, posterior))

    density = stats.norm(mean[0], np.sqrt(cov[0, 0])).pdf
    reference, _ = integrate.quad(lambda y: density(y) * posterior_site_entropy(y), -np.inf, np.inf)
    assert expected_site_entropy(mean, cov, column) == pytest.approx(reference, abs=2e-3)

    low, high = 0.9, 1.2

    def posterior_window_entropy(y):
        shift = cov[1, 0] * (y - mean[0]) / cov[0, 0]
        spread = np.sqrt(cov[1, 1] - cov[1, 0] ** 2 / cov[0, 0])
        return binary_entropy(window_probability(mean[1] + shift, spread, low, high))

    reference, _ = integrate.quad(lambda y: density(y) * posterior_window_entropy(y), -np.inf, np.inf)
    current, expected = expected_window_entropy(mean, cov, low, high, candidates=[0], targets=[1])
    assert expected[0] == pytest.approx(reference, abs=2e-3)
    assert current == pytest.approx(float(binary_entropy(window_probability(1.05, np.sqrt(0.03), low, high))))
    assert expected[0] <= current


# ---------------------------------------------------------- hand-built Gaussian cases
def test_batch_spreads_over_elements_unlike_top_k():
    """One element's four sites are highly correlated: its first calculation settles them."""
    sites = ["s1", "s2", "s3", "s4"]
    elements = ["Ti", "V", "Cr", "Mn"]
    block = np.zeros((16, 16))
    block[:4, :4] = 0.95 + 0.05 * np.eye(4)  # Ti: variance 1, correlation 0.95
    for first in (4, 8, 12):  # the others: variance 0.5, correlation 0.6 within an element
        block[first : first + 4, first : first + 4] = 0.3 + 0.2 * np.eye(4)
    model = hand_surrogate(sites, elements, [("gga", "direct", padded(np.zeros(16), 4), padded(block, 4))])
    batch = pick_next(model, count=4, element_symbols=elements)
    single = summed_std_reduction(block)
    top_k = [elements[index // 4] for index in np.argsort(-single, kind="stable")[:4]]
    assert top_k == ["Ti"] * 4
    assert list(batch["element"]).count("Ti") == 1
    assert len(set(batch["element"])) == 4
    assert list(batch["rank"]) == [1, 2, 3, 4]
    # its own std (1 eV) and three stds of 1 falling to sqrt(1 - 0.95^2) (R&W 2006, eq. 2.24)
    assert batch["benefit"].iat[0] == pytest.approx(1 + 3 * (1 - np.sqrt(1 - 0.95**2)))


def _versions(monkeypatch, models):
    """Make pick_next average over the hand-built ``models`` (its plausible versions)."""
    monkeypatch.setattr(picker_module, "plausible_surrogates", lambda *args, **kwargs: list(models))


def test_benefit_averaged_over_coinciding_kernels_is_the_single_kernel_benefit(monkeypatch):
    """Rasmussen & Williams 2006, eq. 2.24: observing cell i lowers cell j's variance by
    C[j, i]^2 / C[i, i], so the summed std by sum_j sqrt(C[j, j]) - sqrt(C[j, j] -
    C[j, i]^2 / C[i, i]); averaged over kernels that coincide it is the same number,
    pick after pick."""
    sites = ["s1", "s2"]
    elements = ["Ti", "V", "Cr"]
    rng = np.random.default_rng(11)
    factor = rng.normal(size=(6, 6))
    cov = factor @ factor.T / 6 + 0.05 * np.eye(6)
    stages = [("gga", "direct", padded(np.zeros(6), 2), padded(cov, 2))]
    single = pick_next(hand_surrogate(sites, elements, stages), count=4, element_symbols=elements, kernels=1)
    _versions(monkeypatch, [hand_surrogate(sites, elements, stages) for _ in range(3)])
    averaged = pick_next(hand_surrogate(sites, elements, stages), count=4, element_symbols=elements)
    variances = np.diag(cov)
    by_hand = np.sum(np.sqrt(variances)[:, None] - np.sqrt(variances[:, None] - cov**2 / variances[None, :]), axis=0)
    assert averaged["benefit"].iat[0] == pytest.approx(by_hand.max(), rel=1e-12)
    pd.testing.assert_frame_equal(
        averaged[["element", "site", "benefit", "std", "value"]], single[["element", "site", "benefit", "std", "value"]]
    )
    assert averaged.attrs["kernels"] == 3 and single.attrs["kernels"] == 1
    assert robust_picks_text(single) == "" and "averaged over 3 plausible versions" in robust_picks_text(averaged)
    assert list(averaged["reason"]) == list(single["reason"])


def test_batch_spreads_across_columns_when_the_kernels_disagree(monkeypatch):
    """Column s1 dominates the uncertainty (std 2 eV per cell against 0.55) and is
    uncorrelated with s2 and s3. One plausible kernel holds its four cells independent,
    the other nearly identical. Trusting the first alone, the batch spends all four picks
    on s1 (2 eV each, against 1.21 eV for a first pick of s2); averaged over both, its
    second pick is worth about (2 + 0.36) / 2 and the batch moves to the other columns
    (first pick of s2: sqrt(0.3) + 3 (sqrt(0.3) - sqrt(0.3 - 0.24^2 / 0.3)) under both
    kernels; Rasmussen & Williams 2006, eq. 2.24)."""
    sites = ["s1", "s2", "s3"]
    elements = ["Ti", "V", "Cr", "Mn"]

    def covariance(s1_correlation):
        cov = np.zeros((12, 12))
        for site, (variance, correlation) in enumerate([(4.0, s1_correlation), (0.3, 0.8), (0.3, 0.8)]):
            cells = [site + 3 * element for element in range(4)]  # element-major, 3 sites each
            block = variance * (correlation + (1 - correlation) * np.eye(4))
            cov[np.ix_(cells, cells)] = block
        return cov

    def model(s1_correlation):
        stages = [("gga", "direct", padded(np.zeros(12), 3), padded(covariance(s1_correlation), 3))]
        return hand_surrogate(sites, elements, stages)

    trusting = pick_next(model(0.0), count=4, element_symbols=elements, kernels=1)
    assert list(trusting["site"]) == ["s1"] * 4
    _versions(monkeypatch, [model(0.0), model(0.99)])
    robust = pick_next(model(0.0), count=4, element_symbols=elements)
    assert set(robust["site"]) == {"s1", "s2", "s3"}
    assert list(robust["site"]).count("s1") == 2
    # unsure of its covariance, the batch also takes each column once before any twice
    assert robust.attrs["spread_columns"] and not trusting.attrs["spread_columns"]
    assert list(robust["site"])[:3] == ["s1", "s2", "s3"]
    # the first pick is worth the mean of its two benefits: 2 and 2 + 3 * 2 (1 - sqrt(1 - 0.99^2))
    assert robust["benefit"].iat[0] == pytest.approx((2.0 + 2.0 + 6.0 * (1 - np.sqrt(1 - 0.99**2))) / 2)
    assert robust["benefit"].iat[1] == pytest.approx(np.sqrt(0.3) + 3 * (np.sqrt(0.3) - np.sqrt(0.3 - 0.24**2 / 0.3)))
    # rows are the fitted (first) kernel's: its std, not an average
    np.testing.assert_allclose(robust.loc[robust["site"] == "s1", "std"], 2.0)


def test_site_goal_picks_the_undecided_element():
    sites = ["s1", "s2"]
    means = [1.0, 1.0, 1.0, 2.0]  # Ti: a tie; V: s1 far below s2
    model = hand_surrogate(sites, ["Ti", "V"], [("gga", "direct", padded(means, 2), padded(0.05 * np.eye(4), 2))])
    picks = pick_next(model, count=1, goal="site", element_symbols=["Ti", "V"])
    assert picks["element"].iat[0] == "Ti"
    assert "P(s1)=0.50" in picks["reason"].iat[0]
    # after computing one of two independent, equally spread tied sites, P(s1 lowest) =
    # Phi(standard normal) is uniform on (0, 1), and the mean binary entropy of a uniform p
    # is 1 / (2 ln 2) bits (integral of H(p) dp over 0..1, worked out by hand)
    assert picks["benefit"].iat[0] == pytest.approx(1.0 - 1.0 / (2.0 * np.log(2.0)), abs=0.01)


def test_site_goal_three_sites_by_monte_carlo():
    sites = ["s1", "s2", "s3"]
    means = [1.0, 1.05, 0.98, 0.0, 2.0, 3.0]  # Ti undecided among three, V decided
    model = hand_surrogate(sites, ["Ti", "V"], [("gga", "direct", padded(means, 3), padded(0.04 * np.eye(6), 3))])
    picks = pick_next(model, count=2, goal="site", element_symbols=["Ti", "V"], random_state=3)
    assert list(picks["element"]) == ["Ti", "Ti"]
    again = pick_next(model, count=2, goal="site", element_symbols=["Ti", "V"], random_state=3)
    pd.testing.assert_frame_equal(picks, again)  # same seed, same output


def test_site_goal_lists_only_questions_it_can_move_and_words_follow_the_probability():
    # Ti: s1 below s2 by 0.277 eV with variance 0.05 each, so P(s1 lowest) =
    # Phi(0.277 / sqrt(0.1)) = 0.81 (scipy.stats.norm.cdf): a leaning, not "nearly
    # decided"; V: 20 std apart, decided, so computing its cells teaches nothing
    sites = ["s1", "s2"]
    means = [1.0, 1.277, 0.0, 2.0 + 20 * np.sqrt(0.1)]
    assert stats.norm.cdf(0.277 / np.sqrt(0.1)) == pytest.approx(0.81, abs=0.005)
    model = hand_surrogate(sites, ["Ti", "V"], [("gga", "direct", padded(means, 2), padded(0.05 * np.eye(4), 2))])
    picks = pick_next(model, count=4, goal="site", element_symbols=["Ti", "V"])
    assert set(picks["element"]) == {"Ti"} and len(picks) <= 2
    assert (picks["benefit"] >= USEFUL_BENEFIT["bits"]).all()
    assert "leaning to s1" in picks["reason"].iat[0] and "nearly decided" not in picks["reason"].iat[0]
    assert "--" not in "".join(picks["reason"])


def test_table_goal_reason_quotes_the_rows_std():
    # two correlated cells: after the first pick the second's std drops, and its reason
    # says so beside the row's own std (the one before any pick)
    sites = ["s1"]
    cov = np.array([[0.49, 0.3], [0.3, 0.49]])
    model = hand_surrogate(sites, ["Ti", "V"], [("gga", "direct", padded(np.zeros(2), 1), padded(cov, 1))])
    picks = pick_next(model, count=2, element_symbols=["Ti", "V"])
    for row in picks.itertuples(index=False):
        assert f"own std {row.std:.2f} eV" in row.reason
    left = np.sqrt(0.49 - 0.3**2 / 0.49)  # R&W 2006 eq. 2.24 with one point observed
    assert f"{left:.2f} eV given the picks above" in picks["reason"].iat[1]


def test_window_goal_prefers_the_straddling_element():
    sites = ["s1"]
    means = [1.0, 0.5, 3.0]  # Ti on the upper edge, V inside, Cr far outside
    model = hand_surrogate(sites, ["Ti", "V", "Cr"], [("gga", "direct", padded(means, 1), padded(0.04 * np.eye(3), 1))])
    picks = pick_next(model, count=3, goal="window", window=("E", 0.0, 1.0), element_symbols=["Ti", "V", "Cr"])
    assert picks["benefit"].iat[0] == pytest.approx(1.0, abs=1e-6)  # H(0.5) = 1 bit, settled
    # Cr, 10 std above the window, would teach nothing: it is left out, not listed last
    assert list(picks["element"]) == ["Ti", "V"]
    assert picks.attrs["candidates"] == 3


def test_cost_turns_the_choice_to_the_cheap_level():
    sites = ["s1"]
    stages = [
        ("gga", "direct", padded(np.zeros(2), 1), padded(1.0 * np.eye(2), 1)),
        ("hyb", "direct", padded(np.zeros(2), 1), padded(1.2 * np.eye(2), 1)),
    ]
    model = hand_surrogate(sites, ["Ti", "V"], stages)
    equal = pick_next(model, count=2, element_symbols=["Ti", "V"])
    assert list(equal["method"]) == ["hyb", "hyb"]
    dear = pick_next(model, count=2, cost={"gga": 1, "hyb": 30}, element_symbols=["Ti", "V"])
    assert list(dear["method"]) == ["gga", "gga"]
    assert dear["benefit_per_cost"].iat[0] == pytest.approx(1.0)
    assert pick_next(model, count=1, method="hyb", cost="gga=1,hyb=30", element_symbols=["Ti"])["cost"].iat[0] == 30
    # more picks asked than cells missing: every missing cell once, then no more
    every = pick_next(model, count=10, cost={"hyb": np.float64(2.0)}, element_symbols=["Ti", "V"])
    assert len(every) == 4 and list(every["rank"]) == [1, 2, 3, 4]


def test_chain_covariance_across_levels():
    """value(hyb) = value(gga) + correction: Cov(gga, hyb) = Cov(gga, gga) where gga is
    missing, and the correction alone where gga is computed."""
    sites = ["s1", "s2"]
    gga = np.array([[0.3, 0.1, 0.0, 0.0], [0.1, 0.4, 0.0, 0.0], [0.0, 0.0, 0.5, 0.2], [0.0, 0.0, 0.2, 0.6]])
    correction = 0.05 * np.eye(4) + 0.01
    model = hand_surrogate(
        sites, ["Ti", "V"],
        [("gga", "direct", padded(np.arange(4.0), 2), padded(gga, 2)),
         ("hyb", "correction", padded(np.full(4, 0.2), 2), padded(correction, 2))],
    )
    # V's gga at s1 computed as 7.0
    model.table_ = pd.concat(
        [model.table_, pd.DataFrame([{"element": "V", "host": "ZnS", "site": "s1", "method": "gga", "quantity": "E", "value": 7.0}])],
        ignore_index=True,
    )
    grid = pd.DataFrame(
        [{"element": e, "host": "ZnS", "site": s, "method": m, "quantity": "E"}
         for e in (ANCHOR, "Ti", "V") for m in ("gga", "hyb") for s in sites]
    )
    known = model._known(model.table_)
    block = missing_joint(model, grid, "E", ["gga", "hyb"], known)
    keys = list(zip(block.cells["element"], block.cells["site"], block.cells["method"]))
    assert ("V", "s1", "gga") not in keys and len(keys) == 7
    at = {key: position for position, key in enumerate(keys)}
    unit = {("Ti", "s1"): 0, ("Ti", "s2"): 1, ("V", "s1"): 2, ("V", "s2"): 3}

    def expected(a, b):
        (ea, sa, ma), (eb, sb, mb) = a, b
        i, j = unit[(ea, sa)], unit[(eb, sb)]
        gga_open = {k: k != ("V", "s1") for k in unit}
        value = 0.0
        if (ma == "hyb") and (mb == "hyb"):
            value += correction[i, j]
        # the gga stage enters a cell at gga, or at hyb where its gga is missing
        if gga_open[(ea, sa)] and gga_open[(eb, sb)]:
            value += gga[i, j]
        return value

    for a in keys:
        for b in keys:
            assert block.cov[at[a], at[b]] == pytest.approx(expected(a, b)), (a, b)
    assert block.mean[at[("V", "s1", "hyb")]] == pytest.approx(7.2)
    assert block.mean[at[("Ti", "s2", "hyb")]] == pytest.approx(1.2)


def test_bad_arguments_raise_one_line_errors():
    model = hand_surrogate(["s1"], ["Ti"], [("gga", "direct", np.zeros(2), np.eye(2))])
    cases = [
        dict(goal="best"), dict(method="hyb"), dict(cost={"hyb": 2}), dict(count=0),
        dict(goal="window"), dict(goal="window", window=("F", 0, 1)), dict(window="E:0:1"),
        dict(goal="site"), dict(element_symbols=["Xx"]),
    ]
    for kwargs in cases:
        with pytest.raises(DopantgapError) as caught:
            pick_next(model, **{"element_symbols": ["Ti"], **kwargs})
        assert "\n" not in str(caught.value), kwargs


# ------------------------------------------------------------------ on the demo model
@pytest.mark.parametrize(
    "kwargs",
    [
        dict(),
        dict(method="hyb", cost="gga=1,hyb=30"),
        dict(goal="site"),
        dict(goal="site", method="gga"),
        dict(goal="window", window="E_bind:-1.2:-0.4", element_symbols=["Hg"]),
    ],
)
def test_demo_picks_are_missing_unique_and_ranked(demo, kwargs):
    picks = pick_next(demo, count=8, **kwargs)
    assert list(picks.columns) == list(PICK_COLUMNS)
    assert 1 <= len(picks) <= 8 and list(picks["rank"]) == list(range(1, len(picks) + 1))
    # no pick is listed that teaches nothing noticeable
    assert (picks["benefit"] >= USEFUL_BENEFIT[picks["benefit_unit"].iat[0]]).all()
    keys = list(picks[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    assert len(set(keys)) == len(keys)
    assert not set(keys) & computed_keys(demo)
    assert (picks["benefit"] >= 0).all() and (picks["reason"].str.len() > 10).all()
    # value and std are the surrogate's own calibrated prediction of the cell
    predicted = demo.predict(picks[list(KEY_COLUMNS)])
    np.testing.assert_allclose(picks["value"], predicted["value"], rtol=1e-9)
    np.testing.assert_allclose(picks["std"], predicted["std"], rtol=1e-7)
    if "method" in kwargs:
        assert (picks["method"] == kwargs["method"]).all()


def test_demo_cost_prefers_cheap_cells(demo):
    equal = pick_next(demo, count=6)
    dear = pick_next(demo, count=6, cost={"gga": 1, "hyb": 30})
    assert (dear["method"] == "gga").all()
    assert (equal["method"] == "hyb").sum() > 0


def test_demo_predicted_reduction_matches_a_refit_with_the_pick(demo):
    """A pick's summed std reduction against the demo model relearned with that cell
    added at its predicted mean, every stage's kernel fixed (Rasmussen & Williams 2006,
    eq. 2.24 holds for fixed hyperparameters).

    ``Surrogate.refreshed`` keeps the kernels but re-standardises the features on the grown
    table and scikit-learn's normalize_y rescales each GP by its targets' spread; both move
    the covariance by more than the conditioning does on a 22-row stage. The relearned
    stages here keep the old encoder and target scale, which isolates the conditioning;
    the per-cell difficulty of the calibration is switched off in both models, since a
    computed cell also changes its element's difficulty features (its count of computed
    cells, its distance to the level's elements), which is not conditioning.
    """
    demo = copy.copy(demo)
    demo.calibration_ = copy.copy(demo.calibration_)
    demo.calibration_.difficulty_ = {}
    # one kernel: eq. 2.24 describes the fitted model's own covariance
    picks = pick_next(demo, count=6, method="hyb", kernels=1)
    computed = computed_keys(demo)
    chosen = None
    for position, pick in picks.iterrows():
        earlier = set(picks["quantity"].iloc[:position])
        below = (pick["element"], pick["host"], pick["site"], "gga", pick["quantity"])
        # blocks are independent: the first pick of a quantity is scored unconditioned;
        # with its cheap level computed, the correction stage learns from it
        if pick["quantity"] not in earlier and below in computed:
            chosen = pick
            break
    assert chosen is not None
    quantity = chosen["quantity"]
    rows = demo.table_[(demo.table_["quantity"] == quantity) & (demo.table_["method"] == "hyb")]
    grid = pd.DataFrame(
        [{"element": e, "host": h, "site": s, "method": "hyb", "quantity": quantity}
         for e in dict.fromkeys(demo.table_["element"])
         for h, s in rows[["host", "site"]].drop_duplicates().itertuples(index=False)]
    )
    before = demo.predict(grid)
    added = pd.DataFrame([{**{k: chosen[k] for k in KEY_COLUMNS}, "value": chosen["value"]}])
    grown = pd.concat(
        [demo.table_[["element", "host", "site", "method", "quantity", "value"]], added], ignore_index=True
    )
    fresh = demo.refreshed(grown)

    def process(learner):
        # a correction is a shift prior around the Gaussian process
        return getattr(learner, "residual_learner_", learner)

    for key, stage in fresh.stages_.items():
        old = demo.stages_[key]
        if not hasattr(process(old.learner), "regressor_"):
            continue
        cells, target, _kind = fresh._stage_rows(grown, key[0], fresh.quantity_levels_[key[0]].index(key[1]))
        stage.encoder = old.encoder
        stage.learner = clone(stage.learner).fit(old.encoder.transform(cells), target)
        process(stage.learner).regressor_._y_train_std = process(old.learner).regressor_._y_train_std
    after = fresh.predict(grid)
    drop = float(np.sum(before["std"]) - np.sum(after["std"]))
    assert drop == pytest.approx(chosen["benefit"], rel=1e-6)


def test_plausible_versions_retune_only_the_stages_learned_from_few_elements(demo):
    """The demo's expensive level covers a few elements: its stages get re-tuned kernels,
    conditioned on all of their rows; the cheap level's stages are shared untouched."""
    def process(learner):
        return getattr(learner, "residual_learner_", learner)

    keys = uncertain_stages(demo)
    assert keys and {method for _quantity, method in keys} == {"hyb"}
    versions = plausible_surrogates(demo, n_versions=3, random_state=0)
    assert len(versions) == 3 and versions[0] is demo
    for version in versions[1:]:
        assert version.table_ is demo.table_ and version.calibration_ is demo.calibration_
        for key, stage in demo.stages_.items():
            if key not in keys:
                assert version.stages_[key] is stage
                continue
            fitted, retuned = process(stage.learner).regressor_, process(version.stages_[key].learner).regressor_
            assert not np.allclose(fitted.kernel_.theta, retuned.kernel_.theta)
            np.testing.assert_array_equal(retuned.X_train_, fitted.X_train_)
    again = plausible_surrogates(demo, n_versions=3, random_state=0)
    for first, second in zip(versions[1:], again[1:]):
        for key in keys:
            np.testing.assert_array_equal(
                process(first.stages_[key].learner).kernel_.theta, process(second.stages_[key].learner).kernel_.theta
            )
    assert plausible_surrogates(demo, n_versions=1) == [demo]
    with pytest.raises(DopantgapError, match="kernels must be a whole number"):
        pick_next(demo, kernels=0)


def test_a_correction_kept_at_its_shifts_gets_versions_with_the_learner_on_top(demo):
    """Kept at the column shifts alone, a correction holds an element's cells independent,
    and a batch can spend itself on one element's columns; its versions put the Gaussian
    process on top of the shifts, as a refit does once more elements are computed."""
    key = uncertain_stages(demo)[0]
    stage = demo.stages_[key]
    cells, target, _kind = demo._stage_rows(demo.table_, key[0], demo.quantity_levels_[key[0]].index(key[1]))
    X = stage.encoder.transform(cells)
    shifts_only = copy.copy(demo)
    shifts_only.stages_ = dict(demo.stages_)
    shifts_only.stages_[key] = copy.copy(stage)
    shifts_only.stages_[key].learner = ShiftPriorLearner(label_column=stage.learner.label_column).fit(X, target)
    assert key in uncertain_stages(shifts_only)
    versions = plausible_surrogates(shifts_only, n_versions=3, random_state=1)
    for version in versions[1:]:
        learner = version.stages_[key].learner
        assert isinstance(learner, ShiftPriorLearner) and learner.residual_learner_ is not None
        assert len(learner.residual_learner_.regressor_.X_train_) == len(cells)
        # the shifts themselves are the fitted model's: the same rows, the same rule
        assert learner.shifts_ == shifts_only.stages_[key].learner.shifts_


def test_boosted_learner_is_served():
    """The boosted learner's covariance (members' spread + residual + shared offsets)
    goes through every goal; a stand-in encoder keeps the fit tiny."""
    sites = ["s1", "s2", "s3"]
    elements = ["Ti", "V", "Cr", "Mn", "Fe"]
    n_units = 3 * (1 + len(elements))
    rng = np.random.default_rng(5)
    units = np.arange(n_units, dtype=float)
    X = np.column_stack([units, units // 3])  # unit index, then an element label
    learner = BoostLearner(n_members=3, max_iter=15, min_samples_leaf=2, label_columns=(1,), random_state=0)
    with threadpool_limits(limits=1):
        learner.fit(np.repeat(X, 2, axis=0), np.repeat(np.sin(units) + 0.1 * units // 3, 2) + 0.05 * rng.standard_normal(2 * n_units))
    _mean, cov = learner.predict(X, return_cov=True)
    assert cov.shape == (n_units, n_units) and np.all(np.diag(cov) > 0)

    class _TwoColumns(_UnitEncoder):
        def transform(self, cells):
            index = super().transform(cells)
            return np.column_stack([index, index // 3])

    model = hand_surrogate(sites, elements, [("gga", "direct", np.zeros(n_units), np.eye(n_units))])
    model.stages_[("E", "gga")] = _Stage("E", "gga", "direct", _TwoColumns(
        [(ANCHOR, "ZnS", site) for site in sites] + [(e, "ZnS", site) for e in elements for site in sites]
    ), learner)
    for goal, window in (("table", None), ("site", None), ("window", "E:0:0.5")):
        picks = pick_next(model, count=4, goal=goal, window=window, element_symbols=elements)
        assert len(picks) == 4 and list(picks["rank"]) == [1, 2, 3, 4]
        keys = set(picks[list(KEY_COLUMNS)].itertuples(index=False, name=None))
        assert len(keys) == 4 and all(key[0] != ANCHOR for key in keys)
        assert (picks["benefit"] >= 0).all() and picks["benefit"].iat[0] > 0


# ------------------------------------------------------------ tables too large for one joint
def _demo_known(demo):
    return demo._known(demo.table_[["element", "host", "site", "method", "quantity", "value"]])


def test_groups_of_hosts_hold_every_missing_cell_once_and_at_most_the_cap(demo):
    grid = cell_grid(demo, ["Hg"])
    known = _demo_known(demo)
    whole = missing_joints(demo, grid, list(demo.levels_), ["E_sol"])
    n_missing = sum(len(block.cells) for block in whole)
    assert len(whole) == 1 and whole[0].n_groups == 1 and n_missing > 100
    cap = n_missing // 5
    groups = joint_groups(demo, grid, "E_sol", list(demo.levels_), known, max_cells=cap)
    assert len(groups) >= 5
    split = missing_joints(demo, grid, list(demo.levels_), ["E_sol"], max_cells=cap)
    sizes = [len(block.cells) for block in split]
    assert max(sizes) <= cap and all(block.n_groups == len(split) for block in split)
    # memory grows linearly with the missing cells: the covariances held sum to at most
    # cap x cells entries, against cells squared for one joint
    assert sum(size**2 for size in sizes) <= cap * n_missing < n_missing**2
    keys = [key for block in split for key in block.cells[list(KEY_COLUMNS)].itertuples(index=False, name=None)]
    assert len(keys) == len(set(keys)) == n_missing
    assert set(keys) == set(whole[0].cells[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    # a host too large for one group is cut by site, and a site is kept whole when it fits
    columns = [set(zip(block.cells["host"], block.cells["site"])) for block in split]
    for column, count in whole[0].cells.groupby(["host", "site"]).size().items():
        if count <= cap:
            assert len([held for held in columns if column in held]) == 1
    # hosts are kept whole when each fits in a group
    per_host = whole[0].cells.groupby("host").size()
    by_host = missing_joints(demo, grid, list(demo.levels_), ["E_sol"], max_cells=int(per_host.max()))
    assert sorted(tuple(set(block.cells["host"])) for block in by_host) == [(host,) for host in sorted(per_host.index)]


def test_a_group_is_the_exact_joint_restricted_to_its_cells(demo):
    """Cutting the missing cells into groups drops only the covariance between groups:
    each group's mean and covariance are the one-joint numbers over its cells (a Gaussian
    process's predictive covariance over a subset of points is the subset of the
    predictive covariance; Rasmussen & Williams 2006, eq. 2.24)."""
    grid = cell_grid(demo, ["Hg"])
    (whole,) = missing_joints(demo, grid, list(demo.levels_), ["E_bind"])
    split = missing_joints(demo, grid, list(demo.levels_), ["E_bind"], max_cells=len(whole.cells) // 3)
    assert len(split) >= 3
    position = {key: i for i, key in enumerate(whole.cells[list(KEY_COLUMNS)].itertuples(index=False, name=None))}
    for block in split:
        index = [position[key] for key in block.cells[list(KEY_COLUMNS)].itertuples(index=False, name=None)]
        np.testing.assert_allclose(block.mean, whole.mean[index], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(block.cov, whole.cov[np.ix_(index, index)], rtol=1e-7, atol=1e-10)


@pytest.mark.parametrize("goal", ["table", "site"])
def test_picks_from_groups_of_hosts_say_so_and_stay_honest(demo, monkeypatch, goal):
    grid = cell_grid(demo)
    n_missing = sum(len(block.cells) for block in missing_joints(demo, grid, list(demo.levels_), ["E_sol"]))
    cap = n_missing // 4

    monkeypatch.setattr(picker_module, "missing_joints", functools.partial(missing_joints, max_cells=cap))
    picks = pick_next(demo, count=6, goal=goal, kernels=1)
    assert 1 <= len(picks) <= 6
    assert set(picks.attrs["joint_groups"]) >= {"E_sol"}
    assert picks.attrs["joint_groups"]["E_sol"] >= 4
    text = joint_groups_text(picks)
    assert "E_sol in" in text and "its own group only" in text
    keys = list(picks[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    assert len(set(keys)) == len(keys) and not set(keys) & computed_keys(demo)
    predicted = demo.predict(picks[list(KEY_COLUMNS)])
    np.testing.assert_allclose(picks["std"], predicted["std"], rtol=1e-7)
    # below the cap nothing is said
    monkeypatch.undo()
    assert joint_groups_text(pick_next(demo, count=2, goal=goal, kernels=1)) == ""


# ------------------------------------------------------------------ progress
class _Counter:
    """A progress object that keeps what it is told."""

    def __init__(self):
        self.total, self.done, self.told_before_work = None, 0, None

    def expect(self, total):
        if self.told_before_work is None:
            self.told_before_work = self.done == 0
        self.total = total

    def update(self, n=1):
        self.done += n


@pytest.mark.parametrize("kernels", [1, 3])
def test_next_counts_its_steps_first_and_ends_at_the_total(demo, kernels):
    counter = _Counter()
    picks = pick_next(demo, count=4, kernels=kernels, progress=counter)
    assert counter.told_before_work and counter.done == counter.total
    quantities = demo.table_["quantity"].nunique()
    retuned = picks.attrs["kernels"] - 1
    assert counter.total == retuned + picks.attrs["kernels"] * quantities + 4


def test_site_preference_counts_its_groups_first(demo):
    from dopantgap.sites import site_preference

    counter = _Counter()
    preference = site_preference(demo, progress=counter)
    groups = preference[["quantity", "host", "method"]].drop_duplicates()
    assert counter.told_before_work and counter.done == counter.total == len(groups) > 1


def test_versions_share_the_joint_of_the_stages_they_share(demo, monkeypatch):
    """A cache shared by the plausible versions gives each version the same joints as
    without it, and computes a stage's joint once for the versions that share it."""
    from dopantgap import joint as joint_module

    versions = plausible_surrogates(demo, n_versions=3, random_state=0)
    grid = cell_grid(demo, ["Hg"])
    methods = list(demo.levels_)
    alone = [missing_joints(version, grid, methods, ["E_sol"]) for version in versions]
    calls = []
    original = joint_module.stage_joint

    def counting(surrogate, stage, cells):
        calls.append(id(stage))
        return original(surrogate, stage, cells)

    monkeypatch.setattr(joint_module, "stage_joint", counting)
    cache = joint_module.shared_stage_cache(versions)
    shared = [missing_joints(version, grid, methods, ["E_sol"], stage_cache=cache) for version in versions]
    for left_blocks, right_blocks in zip(alone, shared):
        for left, right in zip(left_blocks, right_blocks):
            np.testing.assert_array_equal(left.mean, right.mean)
            np.testing.assert_array_equal(left.cov, right.cov)
    held = [id(version.stages_[key]) for version in versions for key in version.stages_ if key[0] == "E_sol"]
    shared = {stage for stage in held if held.count(stage) > 1}
    assert shared and set(cache) >= shared  # only shared stages are kept
    assert all(calls.count(stage) == 1 for stage in shared)  # made once for every version
    assert len(calls) == len(set(held)) < len(held)
