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

The second invented function
----------------------------
``invent_second_world`` is just as INVENTED, with other hosts (an oxide-like MgO and a
nitride-like GaN), other sites and other drivers: electronegativity difference, first
ionisation energy and valence mismatch carry most of the variation and size comes
second, where the first world is mostly about size. With r, chi, v, p as above, I the
first ionisation energy (eV) of the impurity, and r0, chi0, I0, v0 the weighted means
over the reference atoms (``elements.reference_atoms``: the replaced atom on a
substitutional or dumbbell site, the host's atom fractions on an interstitial one),
let s = ln(r / r0), d_chi = chi - chi0, d_I = I - I0, d_v = v - v0:

    cation substitutional  E = 0.7 + 1.1 |d_chi| + 0.16 |d_I| + 0.20 |d_v| + 0.9 s^2
    anion substitutional   E = 1.2 + 0.8 d_chi^2 + 0.12 |d_I| + 0.20 |d_v| + 0.9 s^2
    octahedral int.        E = 1.0 + 0.5 |d_chi| + 0.20 I + 0.15 |d_v| + 1.2 s^2
    tetrahedral int.       E = 1.5 + 0.4 |d_chi| + 0.24 I + 0.12 |d_v| + 1.8 s^2
    anion dumbbell         E = 2.0 - 0.6 d_chi + 0.10 |d_I| + 0.20 |d_v| + 0.8 s^2
    vacancy binding        E = -0.25 - 0.3 |d_chi| - 0.15 |d_v| + 0.04 d_I - 0.5 s^2

A ``sub_X`` site is a cation site when X is the least electronegative atom of the
host (sub_Mg, sub_Ga) and an anion site otherwise (sub_O, sub_N); ``int_oct``,
``int_tet`` and ``dumbbell_X`` are the octahedral and tetrahedral interstitials and the
split pair on an X site. The site energies get a host offset (MgO +0.6 eV, GaN +0.2 eV,
other hosts 0); every E gets the element term e_el ~ N(0, element_sd) (half of it for
the binding energy, which is computed on sub_Mg and sub_Ga) and noise N(0, noise_sd).
The expensive level adds a correction that is nearly flat for metals and jumps for
strongly electronegative elements:

    E_hyb - E_gga = 0.10 + 0.10 d_chi + 0.03 (I - 7) + 0.04 |d_v| + 1.5 max(0, chi - 2.8)

The last term adds 1.8 eV for F (chi 3.98), 1.0 for O, 0.5 for Cl, 0.4 for N, 0.2 for
Br and nothing for any metal, so a correction learned from metals alone cannot be
carried over to them. Plus its own noise N(0, noise_sd).

The third invented function: a family of hosts
----------------------------------------------
``invent_host_family`` is INVENTED too. It serves the new-host job: eight rock-salt-like
binary hosts (``FAMILY_HOSTS``: MgO CaO SrO BaO MgS CaS SrS BaS), each with a cation
site, an anion site and an octahedral interstitial, whose energies move smoothly with
two host descriptors, so a model that sees them can say what a host with no rows does.
The host's cation is its least electronegative atom (as in the second world) and its
anion the most electronegative one. With R_M the covalent radius (pm) of the host's
cation, chi_X the Pauling electronegativity of its anion and r_h the mean covalent
radius of its atoms, the host enters through

    host term        H = 0.6 (chi_X - 3.0) - 1.2 ln(R_M / 170)
    lattice softness k = 170 / R_M

(H runs from about +0.5 eV for MgO to -0.5 eV for BaS; small cations make a stiff
lattice, k > 1, that punishes size misfit more). With r, chi, v as above and r0, chi0,
v0 the weighted means over the reference atoms (``elements.reference_atoms``: the
replaced atom on ``sub_X``, the host's atom fractions on ``int_oct``, so r0 = r_h
there), let s = ln(r / r0), d_chi = chi - chi0, d_v = v - v0:

    cation substitutional  E = 0.4 + 2.6 k s^2 + 0.7 |d_chi| + 0.12 |d_v| + H
    anion substitutional   E = 1.3 + 1.8 k s^2 + 0.5 d_chi^2 + 0.12 |d_v| + H
    octahedral int.        E = 0.6 + 0.9 k (r / r_h)^2 + 0.25 chi - 0.04 v + H
    vacancy binding        E = -0.2 - 0.9 k s^2 - 0.25 |d_chi| + 0.3 (chi_X - 3.0)

(binding on the cation site only). Each host also gets a term u_h ~ N(0, host_sd) that
no descriptor explains (half of it for the binding energy), so leaving one host out can
never be predicted perfectly; every E gets the element term e_el ~ N(0, element_sd)
(half of it for the binding energy) and noise N(0, noise_sd). A host atom put on its
own site (Ca on sub_Ca in CaO) is just another cell of the made-up function. The
expensive level adds a correction that grows with the anion's electronegativity
(larger for the oxides than for the sulfides):

    E_hyb - E_gga = 0.05 + 0.30 (chi_X - 2.5) + 0.15 |d_chi| + 0.2 s

plus its own noise N(0, noise_sd). ``FAMILY_SITE_KINDS`` names the kind shared across
hosts (``sub_cation``, ``sub_anion``, ``int_oct``) of every (host, site), and
``family_host_file_text`` writes it as a host file.

Worlds with undecided sites
---------------------------
``close_site_gaps`` takes any of these worlds and makes the site preference of a share
of its elements (a third by default, drawn with its own seed) nearly undecided: for each
drawn element and host, the site second-lowest in cheap-level ``E_sol`` truth is moved
(every level, truth and value alike, so noise and corrections stay as they were) to
sit g ~ N(0, gap_sd) above the lowest (gap_sd 0.05 eV by default; g < 0 swaps them). A
picker that decides site preferences has work to do there that no descriptor can do
for it. INVENTED like the rest.
"""

import numpy as np
import pandas as pd

from dopantgap import elements

__all__ = [
    "DEMO_ELEMENTS",
    "DEMO_HOSTS",
    "FAMILY_HOSTS",
    "FAMILY_SITE_KINDS",
    "SECOND_ELEMENTS",
    "SECOND_HOSTS",
    "close_site_gaps",
    "family_host_file_text",
    "invent_host_family",
    "invent_second_world",
    "invent_world",
    "observe",
]

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


def _reference_values(site, composition, names):
    """Descriptors of the host atom(s) a site names (``elements.reference_atoms``),
    weighted by their share, one float per name."""
    reference = elements.reference_atoms(site, composition)
    reference_table = elements.descriptor_table(list(reference))
    weights = np.array(list(reference.values()))
    return tuple(float(weights @ reference_table[name].to_numpy()) for name in names)


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
            r0, chi0, v0 = _reference_values(
                site, compositions[host], ("covalent_radius", "electronegativity_pauling", "valence_electrons")
            )
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


#: Hosts of the second invented world: an oxide-like and a nitride-like compound.
SECOND_HOSTS = {
    "MgO": ("sub_Mg", "sub_O", "int_oct", "dumbbell_O"),
    "GaN": ("sub_Ga", "sub_N", "int_oct", "int_tet"),
}
_SECOND_BINDING_SITES = {"MgO": "sub_Mg", "GaN": "sub_Ga"}
_SECOND_HOST_OFFSET = {"MgO": 0.6, "GaN": 0.2}

#: Elements of the second invented world: alkali and alkaline-earth metals, p-block
#: metals and non-metals with four halogens and four chalcogens, and 3d/4d transition
#: metals. No noble gas, no element without a stable isotope, no Si or Ge, and not the
#: host cations Mg and Ga (so every impurity is foreign to both hosts' metal site).
SECOND_ELEMENTS = tuple(
    "Li Na K Cs Ca Sr Ba B Al In C Sn N P As Sb O S Se Te F Cl Br I "
    "Sc Ti V Cr Mn Fe Co Ni Cu Zn Zr Ag".split()
)
# Electronegativity above which the expensive level's correction grows (second world;
# an invented value).
_HALOGEN_ONSET = 2.8


def _second_site_kind(site, composition):
    """Which formula of the second world a site label takes (module docstring)."""
    prefix, _, atom = site.partition("_")
    if prefix == "sub" and atom in composition:
        table = elements.descriptor_table(list(composition))
        least = table["electronegativity_pauling"].idxmin()
        return "cation" if atom == least else "anion"
    if prefix == "dumbbell" and atom in composition:
        return "dumbbell"
    if site in ("int_oct", "int_tet"):
        return site
    raise ValueError(
        f"The second invented world has no site {site!r}; use sub_X or dumbbell_X with X "
        "a host atom, int_oct or int_tet."
    )


def _second_site_energy(kind, s, d_chi, d_ionisation, d_v, ionisation):
    if kind == "cation":
        return 0.7 + 1.1 * np.abs(d_chi) + 0.16 * np.abs(d_ionisation) + 0.20 * np.abs(d_v) + 0.9 * s**2
    if kind == "anion":
        return 1.2 + 0.8 * d_chi**2 + 0.12 * np.abs(d_ionisation) + 0.20 * np.abs(d_v) + 0.9 * s**2
    if kind == "int_oct":
        return 1.0 + 0.5 * np.abs(d_chi) + 0.20 * ionisation + 0.15 * np.abs(d_v) + 1.2 * s**2
    if kind == "int_tet":
        return 1.5 + 0.4 * np.abs(d_chi) + 0.24 * ionisation + 0.12 * np.abs(d_v) + 1.8 * s**2
    # anion dumbbell: the only site an electronegative impurity prefers
    return 2.0 - 0.6 * d_chi + 0.10 * np.abs(d_ionisation) + 0.20 * np.abs(d_v) + 0.8 * s**2


def _second_correction(chi, d_chi, ionisation, d_v):
    """Expensive minus cheap level in the second world (module docstring)."""
    return (
        0.10 + 0.10 * d_chi + 0.03 * (ionisation - 7.0) + 0.04 * np.abs(d_v)
        + 1.5 * np.maximum(0.0, chi - _HALOGEN_ONSET)
    )


def invent_second_world(
    element_symbols=SECOND_ELEMENTS,
    hosts=None,
    noise_sd=0.05,
    element_sd=0.15,
    methods=("gga", "hyb"),
    seed=0,
):
    """Every cell of the second INVENTED world, with its true value (module docstring).

    Unlike ``invent_world``, energies follow electronegativity, ionisation energy and
    valence mismatch more than size, and the expensive level's correction jumps for
    strongly electronegative elements (halogens, O, N).

    Parameters
    ----------
    element_symbols : sequence of str, default=SECOND_ELEMENTS
    hosts : dict or None, default=None
        Host formula -> site labels (``sub_X``, ``dumbbell_X``, ``int_oct``,
        ``int_tet``); None: ``SECOND_HOSTS``. Hosts other than MgO and GaN get no
        offset and no binding energy.
    noise_sd : float, default=0.05
        Standard deviation (eV) of the per-cell noise.
    element_sd : float, default=0.15
        Standard deviation (eV) of the element term no descriptor explains.
    methods : tuple of str, default=("gga", "hyb")
        Names of the cheap and the expensive level.
    seed : int, default=0

    Returns
    -------
    DataFrame
        Columns element, host, site, method, quantity, value, truth, as
        ``invent_world``: quantity ``E_sol`` for site energies and ``E_bind`` for
        vacancy binding; ``truth`` is the value before noise.

    Raises
    ------
    ValueError
        For a site label the invented function does not know.

    Examples
    --------
    >>> world = invent_second_world(seed=0)
    >>> sorted(world["host"].unique())
    ['GaN', 'MgO']
    """
    hosts = SECOND_HOSTS if hosts is None else hosts
    rng = np.random.default_rng(seed)
    symbols = list(element_symbols)
    element_term = dict(zip(symbols, rng.normal(0.0, element_sd, len(symbols))))
    table = elements.descriptor_table(symbols)
    radius = table["covalent_radius"].to_numpy()
    chi = table["electronegativity_pauling"].to_numpy()
    ionisation = table["ionisation_energy_1"].to_numpy()
    valence = table["valence_electrons"].to_numpy()
    element_terms = np.array([element_term[symbol] for symbol in symbols])
    compositions = elements.host_compositions(sorted(hosts))
    parts = []
    for host, sites in hosts.items():
        plan = [(site, "E_sol") for site in sites]
        if host in _SECOND_BINDING_SITES:
            plan.append((_SECOND_BINDING_SITES[host], "E_bind"))
        for site, quantity in plan:
            kind = _second_site_kind(site, compositions[host])
            r0, chi0, ionisation0, v0 = _reference_values(
                site, compositions[host],
                ("covalent_radius", "electronegativity_pauling", "ionisation_energy_1", "valence_electrons"),
            )
            s, d_chi = np.log(radius / r0), chi - chi0
            d_ionisation, d_v = ionisation - ionisation0, valence - v0
            if quantity == "E_sol":
                base = _second_site_energy(kind, s, d_chi, d_ionisation, d_v, ionisation)
                base = base + _SECOND_HOST_OFFSET.get(host, 0.0) + element_terms
            else:
                base = -0.25 - 0.3 * np.abs(d_chi) - 0.15 * np.abs(d_v) + 0.04 * d_ionisation - 0.5 * s**2
                base = base + 0.5 * element_terms
            correction = _second_correction(chi, d_chi, ionisation, d_v)
            for method, truth in ((methods[0], base), (methods[1], base + correction)):
                parts.append(
                    pd.DataFrame(
                        {
                            "element": symbols,
                            "host": host,
                            "site": site,
                            "method": method,
                            "quantity": quantity,
                            "truth": truth.astype(float),
                        }
                    )
                )
    world = pd.concat(parts, ignore_index=True)
    world["value"] = world["truth"] + rng.normal(0.0, noise_sd, len(world))
    return world[["element", "host", "site", "method", "quantity", "value", "truth"]]


#: Hosts of the third invented world: rock-salt-like binaries, each with its cation
#: site, anion site and octahedral interstitial (in that order).
FAMILY_HOSTS = {
    formula: (f"sub_{cation}", f"sub_{anion}", "int_oct")
    for formula, cation, anion in (
        ("MgO", "Mg", "O"), ("CaO", "Ca", "O"), ("SrO", "Sr", "O"), ("BaO", "Ba", "O"),
        ("MgS", "Mg", "S"), ("CaS", "Ca", "S"), ("SrS", "Sr", "S"), ("BaS", "Ba", "S"),
    )
}
#: Kind of every (host, site) of ``FAMILY_HOSTS``, shared across hosts: sub_Mg in MgO and
#: sub_Ca in CaO are both ``sub_cation``.
FAMILY_SITE_KINDS = {
    (host, site): kind
    for host, sites in FAMILY_HOSTS.items()
    for site, kind in zip(sites, ("sub_cation", "sub_anion", "int_oct"))
}
# Cation radius (pm) at which the family's host term has no size part and the lattice
# softness is 1 (an invented value, between Ca and Sr).
_FAMILY_RADIUS_SCALE = 170.0


def _family_ions(composition):
    """The host's cation and anion: its least and most electronegative atoms."""
    chi = elements.descriptor_table(list(composition))["electronegativity_pauling"]
    return chi.idxmin(), chi.idxmax()


def _family_site_kind(site, composition):
    """``sub_cation``, ``sub_anion`` or ``int_oct`` for a site of the family (module docstring)."""
    prefix, _, atom = site.partition("_")
    if prefix == "sub" and atom in composition:
        cation, _ = _family_ions(composition)
        return "sub_cation" if atom == cation else "sub_anion"
    if site == "int_oct":
        return "int_oct"
    raise ValueError(
        f"The invented host family has no site {site!r}; use sub_X with X a host atom, or int_oct."
    )


def _family_host_descriptors(composition):
    """Host term H, lattice softness k and anion electronegativity chi_X (module docstring)."""
    cation, anion = _family_ions(composition)
    table = elements.descriptor_table([cation, anion])
    cation_radius = float(table.at[cation, "covalent_radius"])
    anion_chi = float(table.at[anion, "electronegativity_pauling"])
    host_term = 0.6 * (anion_chi - 3.0) - 1.2 * np.log(cation_radius / _FAMILY_RADIUS_SCALE)
    return host_term, _FAMILY_RADIUS_SCALE / cation_radius, anion_chi


def _family_site_energy(kind, softness, s, size_ratio, chi, d_chi, d_v, valence):
    if kind == "sub_cation":
        return 0.4 + 2.6 * softness * s**2 + 0.7 * np.abs(d_chi) + 0.12 * np.abs(d_v)
    if kind == "sub_anion":
        return 1.3 + 1.8 * softness * s**2 + 0.5 * d_chi**2 + 0.12 * np.abs(d_v)
    # octahedral interstitial: grows with the impurity's size against the host's mean atom
    return 0.6 + 0.9 * softness * size_ratio**2 + 0.25 * chi - 0.04 * valence


def invent_host_family(
    element_symbols=SECOND_ELEMENTS,
    hosts=None,
    noise_sd=0.05,
    element_sd=0.15,
    host_sd=0.08,
    methods=("gga", "hyb"),
    seed=0,
):
    """Every cell of the INVENTED host family, with its true value (module docstring).

    A world for predicting a host with few or no rows: the energies depend on the host
    through its cation's covalent radius and its anion's electronegativity, smoothly,
    plus a small per-host term no descriptor explains.

    Parameters
    ----------
    element_symbols : sequence of str, default=SECOND_ELEMENTS
    hosts : dict or None, default=None
        Host formula -> site labels (``sub_X`` with X a host atom, ``int_oct``); None:
        ``FAMILY_HOSTS``. Every host gets ``E_bind`` on its cation site when it lists it.
    noise_sd : float, default=0.05
        Standard deviation (eV) of the per-cell noise.
    element_sd : float, default=0.15
        Standard deviation (eV) of the element term no descriptor explains.
    host_sd : float, default=0.08
        Standard deviation (eV) of the host term no host descriptor explains.
    methods : tuple of str, default=("gga", "hyb")
        Names of the cheap and the expensive level.
    seed : int, default=0

    Returns
    -------
    DataFrame
        Columns element, host, site, method, quantity, value, truth, as
        ``invent_world``: quantity ``E_sol`` for site energies and ``E_bind`` for
        vacancy binding; ``truth`` is the value before noise.

    Raises
    ------
    ValueError
        For a site label the invented function does not know.

    Examples
    --------
    >>> world = invent_host_family(seed=0)
    >>> sorted(world["host"].unique())
    ['BaO', 'BaS', 'CaO', 'CaS', 'MgO', 'MgS', 'SrO', 'SrS']
    """
    hosts = FAMILY_HOSTS if hosts is None else hosts
    rng = np.random.default_rng(seed)
    symbols = list(element_symbols)
    element_terms = rng.normal(0.0, element_sd, len(symbols))
    unexplained = dict(zip(hosts, rng.normal(0.0, host_sd, len(hosts))))
    table = elements.descriptor_table(symbols)
    radius = table["covalent_radius"].to_numpy()
    chi = table["electronegativity_pauling"].to_numpy()
    valence = table["valence_electrons"].to_numpy()
    compositions = elements.host_compositions(sorted(hosts))
    parts = []
    for host, sites in hosts.items():
        composition = compositions[host]
        host_term, softness, anion_chi = _family_host_descriptors(composition)
        (mean_radius,) = _reference_values("int_oct", composition, ("covalent_radius",))
        kinds = {site: _family_site_kind(site, composition) for site in sites}
        plan = [(site, "E_sol") for site in sites]
        plan += [(site, "E_bind") for site in sites if kinds[site] == "sub_cation"]
        for site, quantity in plan:
            r0, chi0, v0 = _reference_values(
                site, composition, ("covalent_radius", "electronegativity_pauling", "valence_electrons")
            )
            s, d_chi, d_v = np.log(radius / r0), chi - chi0, valence - v0
            if quantity == "E_sol":
                base = _family_site_energy(kinds[site], softness, s, radius / mean_radius, chi, d_chi, d_v, valence)
                base = base + host_term + unexplained[host] + element_terms
            else:
                base = -0.2 - 0.9 * softness * s**2 - 0.25 * np.abs(d_chi) + 0.3 * (anion_chi - 3.0)
                base = base + 0.5 * (unexplained[host] + element_terms)
            correction = 0.05 + 0.30 * (anion_chi - 2.5) + 0.15 * np.abs(d_chi) + 0.2 * s
            for method, truth in ((methods[0], base), (methods[1], base + correction)):
                parts.append(
                    pd.DataFrame(
                        {
                            "element": symbols,
                            "host": host,
                            "site": site,
                            "method": method,
                            "quantity": quantity,
                            "truth": truth.astype(float),
                        }
                    )
                )
    world = pd.concat(parts, ignore_index=True)
    world["value"] = world["truth"] + rng.normal(0.0, noise_sd, len(world))
    return world[["element", "host", "site", "method", "quantity", "value", "truth"]]


def family_host_file_text(hosts=None):
    """CSV text of a host file for the INVENTED host family: formulas and site kinds.

    The ``site_kind`` column tells the tool that sites of different hosts are the same
    kind of site (sub_Mg in MgO and sub_Ca in CaO are both ``sub_cation``).

    Parameters
    ----------
    hosts : dict or None, default=None
        Host formula -> site labels, as for ``invent_host_family``; None: ``FAMILY_HOSTS``.

    Returns
    -------
    str
        Header ``host,formula,site,site_kind`` and one row per (host, site), the host
        label doubling as its formula; ends with a newline.

    Raises
    ------
    ValueError
        For a site label the invented function does not know.

    Examples
    --------
    >>> print(family_host_file_text({"MgO": ("sub_Mg", "int_oct")}), end="")
    host,formula,site,site_kind
    MgO,MgO,sub_Mg,sub_cation
    MgO,MgO,int_oct,int_oct
    """
    hosts = FAMILY_HOSTS if hosts is None else hosts
    compositions = elements.host_compositions(sorted(hosts))
    lines = ["host,formula,site,site_kind"]
    for host, sites in hosts.items():
        lines += [f"{host},{host},{site},{_family_site_kind(site, compositions[host])}" for site in sites]
    return "\n".join(lines) + "\n"


def close_site_gaps(world, share=1.0 / 3.0, gap_sd=0.05, seed=0):
    """The world with the site preference of a share of its elements made nearly
    undecided (module docstring, *Worlds with undecided sites*).

    Parameters
    ----------
    world : DataFrame
        An invented world (``invent_world``, ``invent_second_world``, ...), with ``truth``.
    share : float, default=1/3
        Share of the elements drawn (rounded to a whole number of elements).
    gap_sd : float, default=0.05
        Standard deviation (eV) of the gap g between the two lowest sites.
    seed : int, default=0

    Returns
    -------
    DataFrame
        A copy with the same rows and columns; only ``E_sol`` cells of the drawn
        elements' second-lowest sites are moved. ``attrs["close_elements"]`` lists the
        drawn elements.
    """
    if not 0.0 <= share <= 1.0 or gap_sd < 0.0:
        raise ValueError(f"share must lie in [0, 1] and gap_sd be >= 0, got {share} and {gap_sd}")
    rng = np.random.default_rng(seed)
    world = world.copy()
    symbols = sorted(world["element"].unique())
    drawn = sorted(rng.choice(symbols, size=int(round(share * len(symbols))), replace=False).tolist())
    cheap = pd.unique(world["method"])[0]
    sites = world[(world["quantity"] == "E_sol") & (world["method"] == cheap)]
    for symbol in drawn:
        for host, part in sites[sites["element"] == symbol].groupby("host", sort=True):
            if len(part) < 2:
                continue
            lowest, second = part.sort_values("truth", kind="stable").iloc[:2].itertuples(index=False)
            shift = lowest.truth + rng.normal(0.0, gap_sd) - second.truth
            rows = (
                (world["element"] == symbol) & (world["host"] == host)
                & (world["site"] == second.site) & (world["quantity"] == "E_sol")
            )
            world.loc[rows, ["truth", "value"]] += shift
    world.attrs["close_elements"] = drawn
    return world


def observe(
    world,
    expensive_fraction=0.2,
    missing_fraction=0.1,
    absent=(),
    seed=0,
    n_expensive=None,
    expensive_elements=None,
):
    """What a researcher would have computed of an invented world.

    Parameters
    ----------
    world : DataFrame
        From ``invent_world``, ``invent_second_world`` or ``invent_host_family``.
    expensive_fraction : float, default=0.2
        Share of elements with the expensive level computed (all their cells); ignored
        when ``n_expensive`` or ``expensive_elements`` is given.
    missing_fraction : float, default=0.1
        Share of cheap-level cells left out at random.
    absent : sequence of str, default=()
        Elements with no cell at all (never computed).
    seed : int, default=0
    n_expensive : int or None, default=None
        Exact number of elements, drawn at random, with the expensive level computed.
    expensive_elements : sequence of str or None, default=None
        Exactly these elements have the expensive level computed. Then no elements are
        drawn, so the cheap cells left out depend on ``seed`` and ``missing_fraction``
        only and nested choices of expensive elements see the same cheap cells.

    Returns
    -------
    DataFrame
        The observed rows of ``world`` (columns element .. value), in world order.

    Raises
    ------
    ValueError
        If both ``n_expensive`` and ``expensive_elements`` are given, if
        ``n_expensive`` is not between 1 and the number of present elements, or if
        ``expensive_elements`` names an element that is absent or not in the world.
    """
    rng = np.random.default_rng(seed)
    methods = list(dict.fromkeys(world["method"]))
    cheap, expensive = methods[0], methods[1]
    symbols = [s for s in dict.fromkeys(world["element"]) if s not in set(absent)]
    if n_expensive is not None and expensive_elements is not None:
        raise ValueError("Give n_expensive or expensive_elements, not both.")
    if expensive_elements is not None:
        unknown = [symbol for symbol in expensive_elements if symbol not in symbols]
        if unknown:
            raise ValueError(
                f"expensive_elements {unknown} are absent or not in the world; choose among "
                f"the present elements ({len(symbols)} of them)."
            )
        with_expensive = set(expensive_elements)
    else:
        if n_expensive is None:
            n_expensive = max(1, int(round(expensive_fraction * len(symbols))))
        elif not 1 <= int(n_expensive) <= len(symbols):
            raise ValueError(
                f"n_expensive must lie between 1 and the {len(symbols)} present elements, "
                f"got {n_expensive}."
            )
        with_expensive = set(rng.choice(symbols, size=int(n_expensive), replace=False))
    is_cheap = (world["method"] == cheap).to_numpy()
    is_expensive = (world["method"] == expensive).to_numpy()
    present = world["element"].isin(symbols).to_numpy()
    chosen = world["element"].isin(with_expensive).to_numpy()
    drawn = rng.random(len(world)) >= missing_fraction
    keep = present & ((is_cheap & drawn) | (is_expensive & chosen))
    return world.loc[keep, ["element", "host", "site", "method", "quantity", "value"]].reset_index(drop=True)
