"""An invented world of impurity energies, for the demo, tests and benchmarks.

Nothing here is physics or data: it is a documented made-up function of a few
elemental descriptors, chosen so that the job is realistic in shape (site energies
that depend on size and chemistry, a cheap and an expensive level of theory that
differ smoothly, element-specific quirks no descriptor explains, numerical noise).

The invented function
---------------------
For an impurity with covalent radius r, Pauling electronegativity chi, valence
electron count v and period p in a host whose reference atom (the one it replaces or
sits among) has r0, chi0, v0, let rho = r / r0, d_chi = chi - chi0, d_v = v - v0:

    substitutional   E = 1.0 + 5.0 (rho - 1)^2 + 0.6 |d_chi| + 0.25 |d_v|
    tetrahedral int. E = 0.6 + 3.2 rho^2 + 0.3 chi - 0.10 v
    hexagonal int.   E = 1.1 + 3.6 rho^2 + 0.2 chi - 0.08 v
    bond-centred     E = 1.6 + 3.0 rho^2 - 0.25 |d_chi| - 0.05 v
    split-vacancy    E = 1.8 + 2.5 (rho - 1.35)^2 + 0.4 |d_chi|
    vacancy binding  E = -0.3 - 1.8 (rho - 1)^2 - 0.15 |d_v| + 0.2 d_chi

each plus a host offset (ZnS +0.4 eV, C +1.2 eV), an element term e_el ~ N(0, element_sd)
shared by all the element's cells (half of it for the binding energy), and noise
N(0, noise_sd) per cell. The expensive level adds a smooth correction

    E_hyb - E_gga = 0.15 + 0.25 d_chi + 0.05 (p - 3) - 0.1 (rho - 1)

plus its own noise N(0, noise_sd).
"""

import numpy as np
import pandas as pd

from dopantgap import elements

__all__ = ["DEMO_ELEMENTS", "DEMO_HOSTS", "invent_world", "observe"]

#: Hosts of the invented world: a compound with two sublattices and an elemental one.
DEMO_HOSTS = {
    "ZnS": ("sub_Zn", "sub_S", "int_tet_Zn", "int_tet_S", "int_hex"),
    "C": ("sub_C", "int_tet", "int_hex", "bond_centre", "split_vac"),
}
_BINDING_SITES = {"ZnS": "sub_Zn", "C": "sub_C"}
_HOST_OFFSET = {"ZnS": 0.4, "C": 1.2}

#: Elements the invented world knows: main-group and transition metals, no noble gases
#: and no element without a stable isotope.
DEMO_ELEMENTS = tuple(
    "Li Be B N O F Na Mg Al P S Cl K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga As Se Br Rb Sr Y Zr "
    "Nb Mo Ru Rh Pd Ag Cd In Sn Sb Te I Cs Ba La Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Ce Gd".split()
)


def _site_energy(site, rho, chi, d_chi, d_v, valence):
    if site.startswith("sub"):
        return 1.0 + 5.0 * (rho - 1.0) ** 2 + 0.6 * np.abs(d_chi) + 0.25 * np.abs(d_v)
    if site.startswith("int_tet"):
        return 0.6 + 3.2 * rho**2 + 0.3 * chi - 0.10 * valence
    if site.startswith("int_hex"):
        return 1.1 + 3.6 * rho**2 + 0.2 * chi - 0.08 * valence
    if site.startswith("bond"):
        return 1.6 + 3.0 * rho**2 - 0.25 * np.abs(d_chi) - 0.05 * valence
    if site.startswith("split"):
        return 1.8 + 2.5 * (rho - 1.35) ** 2 + 0.4 * np.abs(d_chi)
    raise ValueError(f"The invented world has no site {site!r}.")


def invent_world(
    element_symbols=DEMO_ELEMENTS,
    hosts=None,
    noise_sd=0.05,
    element_sd=0.15,
    methods=("gga", "hyb"),
    seed=0,
):
    """Every cell of the invented world, with its true value (module docstring).

    Parameters
    ----------
    element_symbols : sequence of str, default=DEMO_ELEMENTS
    hosts : dict or None, default=None
        Host formula -> site labels; None: ``DEMO_HOSTS``.
    noise_sd : float, default=0.05
        Standard deviation (eV) of the per-cell noise: the floor no model can beat.
    element_sd : float, default=0.15
        Standard deviation (eV) of the element term no descriptor explains.
    methods : tuple of str, default=("gga", "hyb")
        Names of the cheap and the expensive level.
    seed : int, default=0

    Returns
    -------
    DataFrame
        Columns element, host, site, method, quantity, value, with quantity
        ``E_sol`` for site energies and ``E_bind`` for vacancy binding, plus
        ``truth`` (the value before noise).
    """
    hosts = DEMO_HOSTS if hosts is None else hosts
    rng = np.random.default_rng(seed)
    symbols = list(element_symbols)
    element_term = dict(zip(symbols, rng.normal(0.0, element_sd, len(symbols))))
    table = elements.descriptor_table(symbols)
    compositions = elements.host_compositions(sorted(hosts))
    rows = []
    for host, sites in hosts.items():
        plan = [(site, "E_sol") for site in sites]
        if host in _BINDING_SITES:
            plan.append((_BINDING_SITES[host], "E_bind"))
        for site, quantity in plan:
            reference = elements.reference_atoms(site, compositions[host])
            reference_table = elements.descriptor_table(list(reference))
            weights = np.array(list(reference.values()))
            r0 = float(weights @ reference_table["covalent_radius"].to_numpy())
            chi0 = float(weights @ reference_table["electronegativity_pauling"].to_numpy())
            v0 = float(weights @ reference_table["valence_electrons"].to_numpy())
            for symbol in symbols:
                r = table.at[symbol, "covalent_radius"]
                chi = table.at[symbol, "electronegativity_pauling"]
                valence = table.at[symbol, "valence_electrons"]
                period = table.at[symbol, "period"]
                rho, d_chi, d_v = r / r0, chi - chi0, valence - v0
                if quantity == "E_sol":
                    base = _site_energy(site, rho, chi, d_chi, d_v, valence) + _HOST_OFFSET[host]
                    base += element_term[symbol]
                else:
                    base = -0.3 - 1.8 * (rho - 1.0) ** 2 - 0.15 * abs(d_v) + 0.2 * d_chi
                    base += 0.5 * element_term[symbol]
                correction = 0.15 + 0.25 * d_chi + 0.05 * (period - 3) - 0.1 * (rho - 1.0)
                truths = {methods[0]: base, methods[1]: base + correction}
                for method in methods[:2]:
                    rows.append(
                        {
                            "element": symbol,
                            "host": host,
                            "site": site,
                            "method": method,
                            "quantity": quantity,
                            "truth": float(truths[method]),
                        }
                    )
    world = pd.DataFrame(rows)
    world["value"] = world["truth"] + rng.normal(0.0, noise_sd, len(world))
    return world[["element", "host", "site", "method", "quantity", "value", "truth"]]


def observe(world, expensive_fraction=0.2, missing_fraction=0.1, absent=(), seed=0):
    """What a researcher would have computed of an invented world.

    Parameters
    ----------
    world : DataFrame
        From ``invent_world``.
    expensive_fraction : float, default=0.2
        Share of elements with the expensive level computed (all their cells).
    missing_fraction : float, default=0.1
        Share of cheap-level cells left out at random.
    absent : sequence of str, default=()
        Elements with no cell at all (never computed).
    seed : int, default=0

    Returns
    -------
    DataFrame
        The observed rows of ``world`` (columns element .. value), in world order.
    """
    rng = np.random.default_rng(seed)
    methods = list(dict.fromkeys(world["method"]))
    cheap, expensive = methods[0], methods[1]
    symbols = [s for s in dict.fromkeys(world["element"]) if s not in set(absent)]
    n_expensive = max(1, int(round(expensive_fraction * len(symbols))))
    with_expensive = set(rng.choice(symbols, size=n_expensive, replace=False))
    is_cheap = (world["method"] == cheap).to_numpy()
    is_expensive = (world["method"] == expensive).to_numpy()
    present = world["element"].isin(symbols).to_numpy()
    chosen = world["element"].isin(with_expensive).to_numpy()
    drawn = rng.random(len(world)) >= missing_fraction
    keep = present & ((is_cheap & drawn) | (is_expensive & chosen))
    return world.loc[keep, ["element", "host", "site", "method", "quantity", "value"]].reset_index(drop=True)
