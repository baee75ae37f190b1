"""Equilibrium at a temperature: Boltzmann site populations and vacancy trapping.

Pure functions of energies (eV), temperatures (K) and concentrations; no model inside.
They broadcast, so that a whole array of joint draws goes through in one call.
"""

import numpy as np
from scipy.constants import physical_constants
from scipy.special import softmax

from dopantgap.errors import DopantgapError

__all__ = [
    "BOLTZMANN_EV",
    "bound_vacancy_fraction",
    "check_temperature",
    "lomer_vacancy_ratio",
    "site_populations",
]

#: Boltzmann constant in eV/K (CODATA, through ``scipy.constants``).
BOLTZMANN_EV = physical_constants["Boltzmann constant in eV/K"][0]


def check_temperature(temperature, option="--temperature"):
    """A temperature in kelvin as a positive finite float; anything else refused in one line."""
    try:
        value = float(temperature)
    except (TypeError, ValueError):
        value = float("nan")
    if not np.isfinite(value) or value <= 0.0:
        raise DopantgapError(f"{option} must be a positive number of kelvin (e.g. {option} 900), got {temperature!r}.")
    return value


def site_populations(energies, temperature, multiplicities=None):
    """Equilibrium share of the impurity on each site, from Boltzmann factors.

    p_s = g_s exp(-E_s / kT) / sum_t g_t exp(-E_t / kT), with g_s the number of sites
    of that kind per formula unit: the canonical distribution over the sites an
    impurity can occupy, vibrational and configurational terms beyond g left out.

    Parameters
    ----------
    energies : array-like of shape (..., n_sites)
        Site energies in eV on a common reference (lower is more stable).
    temperature : float
        Kelvin, > 0.
    multiplicities : array-like of shape (n_sites,) or None
        Sites per formula unit; None: 1 each.

    Returns
    -------
    ndarray of shape (..., n_sites)
        Populations summing to 1 along the last axis.
    """
    temperature = check_temperature(temperature, option="temperature")
    energies = np.asarray(energies, dtype=float)
    n_sites = energies.shape[-1]
    weights = np.ones(n_sites) if multiplicities is None else np.asarray(multiplicities, dtype=float)
    if weights.shape != (n_sites,) or not np.all(np.isfinite(weights)) or np.any(weights <= 0):
        raise DopantgapError(f"site multiplicities must be {n_sites} positive numbers, got {multiplicities!r}.")
    return softmax(-energies / (BOLTZMANN_EV * temperature) + np.log(weights), axis=-1)


def _check_dilute(concentration, coordination):
    """Concentration as an array and Z as a float, both checked; Z x < 1 required."""
    try:
        concentration = np.asarray(concentration, dtype=float)
        coordination = float(coordination)
    except (TypeError, ValueError):
        raise DopantgapError(
            f"the dopant concentration and coordination Z must be numbers, got {concentration!r} and {coordination!r}."
        ) from None
    if np.any(~np.isfinite(concentration)) or np.any(concentration < 0):
        raise DopantgapError(f"the dopant concentration must be a site fraction >= 0, got {concentration!r}.")
    if not np.isfinite(coordination) or coordination < 1:
        raise DopantgapError(f"the coordination Z must be a number >= 1, got {coordination!r}.")
    if np.any(coordination * concentration >= 1.0):
        raise DopantgapError(
            f"Z x = {coordination:g} x {float(np.max(concentration)):g} >= 1: Lomer's relation holds for "
            f"dilute dopants only (Z x < 1); give a smaller --concentration."
        )
    return concentration, coordination


def lomer_vacancy_ratio(binding, concentration, coordination, temperature):
    """Vacancy concentration with dopants over that without: 1 - Z x + Z x exp(E_b / kT).

    Lomer's mass-action relation for a dilute dopant (Lomer 1958, vacancy-solute
    binding; form from memory), with E_b > 0 for a bound pair and Z the number of
    neighbour sites from which a vacancy is bound to the dopant.

    Parameters
    ----------
    binding : array-like
        Binding energy E_b in eV, positive = bound (Lomer's convention).
    concentration : float or array-like
        Dopant site fraction x.
    coordination : float
        Z.
    temperature : float
        Kelvin.

    Returns
    -------
    ndarray
        c_v / c_v0, broadcast over the inputs.
    """
    temperature = check_temperature(temperature, option="temperature")
    concentration, coordination = _check_dilute(concentration, coordination)
    factor = np.exp(np.asarray(binding, dtype=float) / (BOLTZMANN_EV * temperature))
    zx = coordination * concentration
    return 1.0 - zx + zx * factor


def bound_vacancy_fraction(binding, concentration, coordination, temperature):
    """Share of the vacancies that sit next to a dopant: Z x e^(E_b/kT) / (1 - Z x + Z x e^(E_b/kT)).

    The bound term of ``lomer_vacancy_ratio`` over the whole: 0 without dopants,
    Z x when binding is zero, towards 1 for strong binding.

    Parameters
    ----------
    binding : array-like
        E_b in eV, positive = bound (Lomer's convention).
    concentration : float or array-like
        Dopant site fraction x.
    coordination : float
        Z.
    temperature : float
        Kelvin.

    Returns
    -------
    ndarray
        Fractions in [0, 1].
    """
    temperature = check_temperature(temperature, option="temperature")
    concentration, coordination = _check_dilute(concentration, coordination)
    zx = coordination * concentration
    exponent = np.asarray(binding, dtype=float) / (BOLTZMANN_EV * temperature)
    # written as 1 / (1 + (1 - Zx) / (Zx e^a)) with the exponent kept in logs, so that
    # strong binding at low temperature does not overflow
    with np.errstate(divide="ignore", over="ignore"):
        log_ratio = np.log1p(-zx) - np.log(zx) - exponent
        fraction = 1.0 / (1.0 + np.exp(log_ratio))
    return np.where(zx > 0, fraction, 0.0)
