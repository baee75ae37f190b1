"""Boltzmann populations and Lomer's trapping relation against closed forms."""

import math

import numpy as np
import pytest
from scipy import constants
from scipy.special import softmax

from dopantgap.errors import DopantgapError
from dopantgap.thermo import (
    BOLTZMANN_EV,
    bound_vacancy_fraction,
    lomer_vacancy_ratio,
    site_populations,
)


def test_boltzmann_constant_is_codata():
    # CODATA 2018 (exact in the 2019 SI): k = 1.380649e-23 J/K, e = 1.602176634e-19 C,
    # through scipy.constants (Virtanen et al., SciPy 1.0, Nature Methods 2020)
    assert BOLTZMANN_EV == pytest.approx(constants.k / constants.e, rel=1e-12)
    assert BOLTZMANN_EV == pytest.approx(8.617333262e-5, rel=1e-9)  # value from memory


def test_populations_match_softmax_with_log_multiplicities():
    # canonical distribution p_s = g_s exp(-E_s/kT) / Z, computed here with
    # scipy.special.softmax of -E/kT + log g (Landau & Lifshitz, Statistical Physics, §31)
    energies = np.array([[0.0, 0.12, 0.4], [0.3, -0.1, 0.0]])
    multiplicities = np.array([1.0, 2.0, 6.0])
    temperature = 900.0
    expected = softmax(-energies / (constants.k / constants.e * temperature) + np.log(multiplicities), axis=-1)
    got = site_populations(energies, temperature, multiplicities)
    # rtol: older scipy releases give k/e and the tabulated eV/K value a few 1e-11 apart
    np.testing.assert_allclose(got, expected, rtol=1e-9)
    np.testing.assert_allclose(got.sum(axis=-1), 1.0)


def test_two_site_population_by_hand():
    # p1 = 1 / (1 + (g2/g1) exp(-(E2 - E1)/kT)); E2 - E1 = 0.1 eV, g2/g1 = 3, T = 600 K:
    # kT = 0.0517040 eV, exp(-1.934083) = 0.144556, p1 = 1 / (1 + 0.433669) = 0.697511 (by hand)
    got = site_populations([0.0, 0.1], 600.0, [1.0, 3.0])
    assert got[0] == pytest.approx(0.697511, abs=2e-6)


def test_equal_sites_share_by_multiplicity_alone():
    got = site_populations([0.2, 0.2, 0.2], 300.0, [1.0, 1.0, 2.0])
    np.testing.assert_allclose(got, [0.25, 0.25, 0.5])


def test_lomer_worked_case():
    # Lomer 1958, vacancy-solute binding (form from memory): c_v/c_v0 = 1 - Zx + Zx exp(E_b/kT).
    # Hand: Z = 12, x = 0.01, E_b = 0.3 eV, T = 900 K -> kT = 0.077556 eV,
    # exp(0.3/kT) = 47.855, ratio = 0.88 + 0.12 * 47.855 = 6.6226, bound share = 5.7426 / 6.6226 = 0.8671
    assert float(lomer_vacancy_ratio(0.3, 0.01, 12, 900.0)) == pytest.approx(6.6226, rel=1e-4)
    assert float(bound_vacancy_fraction(0.3, 0.01, 12, 900.0)) == pytest.approx(0.8671, abs=1e-4)


def test_lomer_limits():
    # no binding: the bound share is just the share of sites next to a dopant, Z x
    assert float(bound_vacancy_fraction(0.0, 1e-3, 12, 900.0)) == pytest.approx(12e-3 / 1.0, rel=1e-12)
    # no binding and no dopant: nothing bound
    assert float(bound_vacancy_fraction(0.0, 1e-9, 12, 900.0)) < 1e-7
    assert float(bound_vacancy_fraction(0.5, 0.0, 12, 900.0)) == 0.0
    # strong binding at a high concentration: almost every vacancy bound
    assert float(bound_vacancy_fraction(1.5, 0.05, 12, 600.0)) > 0.999999
    # repulsion pushes vacancies away: fewer than Z x bound
    assert float(bound_vacancy_fraction(-0.3, 1e-3, 12, 900.0)) < 12e-3
    # no overflow for very strong binding at low temperature
    assert float(bound_vacancy_fraction(20.0, 1e-3, 12, 50.0)) == pytest.approx(1.0)
    assert math.isclose(float(lomer_vacancy_ratio(0.0, 1e-3, 12, 900.0)), 1.0)


def test_bound_share_rises_with_binding_and_falls_with_temperature():
    binding = np.linspace(-0.5, 1.0, 31)
    shares = bound_vacancy_fraction(binding, 1e-3, 8, 800.0)
    assert np.all(np.diff(shares) > 0)
    assert bound_vacancy_fraction(0.4, 1e-3, 8, 1200.0) < bound_vacancy_fraction(0.4, 1e-3, 8, 600.0)


@pytest.mark.parametrize(
    "call, fragment",
    [
        (lambda: bound_vacancy_fraction(0.3, 0.1, 12, 900.0), "dilute"),
        (lambda: bound_vacancy_fraction(0.3, -1e-3, 12, 900.0), "site fraction"),
        (lambda: bound_vacancy_fraction(0.3, 1e-3, 0, 900.0), "coordination"),
        (lambda: bound_vacancy_fraction(0.3, 1e-3, "twelve", 900.0), "must be numbers"),
        (lambda: site_populations([0.0, 0.1], -5.0), "kelvin"),
        (lambda: site_populations([0.0, 0.1], 900.0, [1.0, 0.0]), "multiplicities"),
    ],
)
def test_bad_inputs_are_refused_in_one_line(call, fragment):
    with pytest.raises(DopantgapError, match=fragment):
        call()
