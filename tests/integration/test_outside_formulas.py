"""The two main computations checked against published closed forms.

1. The correction between levels of theory (``Surrogate``: the expensive level learned
   as the cheap level plus a correction) against the co-kriging posterior of
   M. C. Kennedy and A. O'Hagan, "Predicting the output from a complex computer code
   when fast approximations are available", Biometrika 87(1), 1-13, 2000: the
   expensive level is the cheap level times rho plus an independent Gaussian-process
   correction (their eq. 2). With rho fixed at 1 and a nested design (every
   expensive cell also computed at the cheap level), the posterior of the expensive
   level is the cheap level's posterior plus the correction's posterior (their
   section 2.4, the nested-design simplification), so the staged result must equal the
   one joint Gaussian conditioning on both levels' cells. The joint conditioning here
   is the textbook formula (C. E. Rasmussen and C. K. I. Williams, "Gaussian
   Processes for Machine Learning", MIT Press 2006, eqs. 2.23-2.24) on scikit-learn
   kernels, computed apart from dopantgap.

2. ``sites.site_preference`` for two sites against the exact normal probability: for
   jointly normal energies E1, E2, P(E1 < E2) = Phi((m2 - m1) / sqrt(v1 + v2 - 2 c12)),
   with Phi the standard normal distribution function (M. Abramowitz and I. A. Stegun,
   "Handbook of Mathematical Functions", 1964, 26.2.2), here scipy.special.ndtr.

Every energy below is INVENTED (a formula of the atomic number, stated in the test).
"""

import numpy as np
import pandas as pd
import pytest
from scipy.special import ndtr
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel
from threadpoolctl import threadpool_limits

from dopantgap.sites import site_preference
from dopantgap.surrogate import Surrogate
from dopantgap.symbols import atomic_number

# the covariances of the cheap level and of the correction: fixed, never optimised
CHEAP_KERNEL = ConstantKernel(1.0, "fixed") * RBF(1.5, "fixed")
CORRECTION_KERNEL = ConstantKernel(0.09, "fixed") * RBF(2.5, "fixed")
# a tiny nugget keeps the solves stable; both sides add the same
JITTER = 1e-8

CHEAP_ELEMENTS = ("Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Ga", "Mo", "W")
EXPENSIVE_ELEMENTS = ("Ti", "Cr", "Fe", "Ni", "Zn", "Mo", "W")  # a subset: a nested design
NEW_ELEMENTS = ("Sc", "Nb", "Ag", "Ta")


def _cheap_value(symbol):
    z = atomic_number(symbol)
    return 1.0 + 0.6 * np.sin(z / 7.0)  # invented


def _expensive_value(symbol):
    z = atomic_number(symbol)
    return _cheap_value(symbol) + 0.35 + 0.15 * np.cos(z / 5.0)  # invented


def _cell(symbol, method):
    return {"element": symbol, "host": "MgO", "site": "sub_Mg", "method": method, "quantity": "E_sol"}


class _FixedProcess:
    """A scikit-learn Gaussian process with a fixed kernel on the encoder's physical
    (descriptor and host-relative) columns: the stage learner of this check."""

    def __init__(self, kernel, n_physical):
        self.kernel = kernel
        self.n_physical = n_physical
        self.fixed_kernel = kernel

    def fit(self, X, y):
        self.process_ = GaussianProcessRegressor(self.kernel, alpha=JITTER, optimizer=None, normalize_y=False)
        self.process_.fit(np.asarray(X)[:, : self.n_physical], y)
        return self

    def predict(self, X, return_std=False, return_cov=False):
        return self.process_.predict(np.asarray(X)[:, : self.n_physical], return_std=return_std,
                                     return_cov=return_cov)


@pytest.fixture(scope="module")
def staged():
    rows = [dict(_cell(s, "gga"), value=_cheap_value(s)) for s in CHEAP_ELEMENTS]
    rows += [dict(_cell(s, "hyb"), value=_expensive_value(s)) for s in EXPENSIVE_ELEMENTS]
    table = pd.DataFrame(rows)

    def fixed_learner(self, name, encoder, *args, kind="direct", **kwargs):
        kernel = CORRECTION_KERNEL if kind == "correction" else CHEAP_KERNEL
        return _FixedProcess(kernel, encoder.n_physical_)

    with pytest.MonkeyPatch.context() as patch, threadpool_limits(limits=1):
        patch.setattr(Surrogate, "_new_learner", fixed_learner)
        # n_jobs=1: every fold in this process, where the fixed learner is patched in
        model = Surrogate(learner="gp", levels=["gga", "hyb"], n_folds=3,
                          descriptors=["covalent_radius", "electronegativity_pauling", "period"],
                          random_state=0, n_jobs=1).fit(table)
    return model, table


def test_staged_correction_equals_joint_cokriging_with_rho_one(staged):
    model, table = staged
    cheap_stage, correction_stage = model.stages_[("E_sol", "gga")], model.stages_[("E_sol", "hyb")]
    assert correction_stage.kind == "correction"

    # what the model predicts at the expensive level: elements computed only at the
    # cheap level (an upgrade) and elements never computed
    asked = [s for s in CHEAP_ELEMENTS if s not in EXPENSIVE_ELEMENTS] + list(NEW_ELEMENTS)
    cells = pd.DataFrame([_cell(s, "hyb") for s in asked])
    core = model.table_[["element", "host", "site", "method", "quantity", "value"]]
    staged_mean, staged_cov = model._joint(model.stages_, model._known(core), "E_sol", "hyb", cells)

    # the joint prior of Kennedy & O'Hagan with rho = 1 over both levels' cells:
    # cov(cheap a, cheap b) = k_c(a, b); cov(expensive a, cheap b) = k_c(a, b);
    # cov(expensive a, expensive b) = k_c(a, b) + k_d(a, b)
    def inputs(stage, frame):
        return stage.encoder.transform(frame)[:, : stage.encoder.n_physical_]

    cheap_rows = table[table["method"] == "gga"].reset_index(drop=True)
    dear_rows = table[table["method"] == "hyb"].reset_index(drop=True)
    observed = pd.concat([cheap_rows, dear_rows], ignore_index=True)
    is_dear = np.r_[np.zeros(len(cheap_rows)), np.ones(len(dear_rows))]

    def joint_cov(first, first_dear, second, second_dear):
        shared = CHEAP_KERNEL(inputs(cheap_stage, first), inputs(cheap_stage, second))
        correction = CORRECTION_KERNEL(inputs(correction_stage, first), inputs(correction_stage, second))
        return shared + np.outer(first_dear, second_dear) * correction

    k_obs = joint_cov(observed, is_dear, observed, is_dear) + JITTER * np.eye(len(observed))
    k_cross = joint_cov(cells, np.ones(len(cells)), observed, is_dear)
    k_new = joint_cov(cells, np.ones(len(cells)), cells, np.ones(len(cells)))
    solved = np.linalg.solve(k_obs, np.c_[observed["value"].to_numpy(), k_cross.T])
    joint_mean = k_cross @ solved[:, 0]
    joint_cov_new = k_new - k_cross @ solved[:, 1:]

    np.testing.assert_allclose(staged_mean, joint_mean, atol=1e-6)
    np.testing.assert_allclose(staged_cov, joint_cov_new, atol=1e-6)
    # the check has teeth: the correction moved the expensive level away from the cheap one
    cheap_mean, _ = model._joint(model.stages_, model._known(core), "E_sol", "gga",
                                 cells.assign(method="gga"))
    assert np.max(np.abs(staged_mean - cheap_mean)) > 0.1


# ------------------------------------------------------------------ site preference
@pytest.fixture(scope="module")
def two_sites():
    rows = []
    for symbol in ("Fe", "Cu", "Ni", "Zn", "Co", "Mn", "Cr", "V", "Ti", "Ga"):
        z = atomic_number(symbol)
        substitutional = 1.0 + 0.3 * np.sin(z / 3.0)  # invented
        interstitial = 1.4 + 0.3 * np.cos(z / 4.0)  # invented
        rows.append({"element": symbol, "host": "C", "site": "sub_C", "method": "gga", "quantity": "E_sol",
                     "value": substitutional})
        if symbol != "Ga":  # Ga: one site computed, the other predicted
            rows.append({"element": symbol, "host": "C", "site": "int_tet", "method": "gga",
                         "quantity": "E_sol", "value": interstitial})
    with threadpool_limits(limits=1):
        return Surrogate(learner="gp", n_folds=3, random_state=0).fit(pd.DataFrame(rows))


def test_two_site_preference_matches_the_normal_formula(two_sites):
    model = two_sites
    symbols = ["Ga", "Sc", "Y", "Mo", "Ag"]
    n_samples = 20000
    preference = site_preference(model, element_symbols=symbols, n_samples=n_samples, random_state=3)
    checked = 0
    for symbol in symbols:
        cells = pd.DataFrame([{"element": symbol, "host": "C", "site": site, "method": "gga",
                               "quantity": "E_sol"} for site in ("sub_C", "int_tet")])
        mean, cov = model.predict_joint(cells)
        spread = np.sqrt(cov[0, 0] + cov[1, 1] - 2.0 * cov[0, 1])
        exact = float(ndtr((mean[1] - mean[0]) / spread))  # P(sub_C below int_tet)
        sampled = float(preference.set_index(["element", "site"]).at[(symbol, "sub_C"), "p_lowest"])
        # Monte Carlo error of a share of n draws: 5 standard errors, plus the float
        # resolution of the share (1/n)
        tolerance = 5.0 * np.sqrt(exact * (1.0 - exact) / n_samples) + 1.0 / n_samples
        assert abs(sampled - exact) <= tolerance, (symbol, sampled, exact)
        checked += 0.02 < exact < 0.98
    # the comparison covers undecided cases, where the formula is not 0 or 1
    assert checked >= 2
