"""The second INVENTED world and ``observe``: shape, determinism, the documented formula.

Nothing here is physics: the expected numbers are the made-up function of
``dopantgap.world``'s docstring, recomputed by hand from the descriptor values
``dopantgap.elements.descriptor_table`` reads from mendeleev's database.
"""

import math
import re

import numpy as np
import pandas as pd
import pytest

from dopantgap import elements
from dopantgap.hosts import read_host_file
from dopantgap.world import (
    DEMO_HOSTS,
    FAMILY_HOSTS,
    FAMILY_SITE_KINDS,
    SECOND_ELEMENTS,
    SECOND_HOSTS,
    family_host_file_text,
    invent_host_family,
    invent_second_world,
    invent_world,
    observe,
)

COLUMNS = ["element", "host", "site", "method", "quantity", "value", "truth"]
EXPECTED_COLUMNS = {
    ("MgO", "sub_Mg", "E_sol"), ("MgO", "sub_O", "E_sol"), ("MgO", "int_oct", "E_sol"),
    ("MgO", "dumbbell_O", "E_sol"), ("MgO", "sub_Mg", "E_bind"),
    ("GaN", "sub_Ga", "E_sol"), ("GaN", "sub_N", "E_sol"), ("GaN", "int_oct", "E_sol"),
    ("GaN", "int_tet", "E_sol"), ("GaN", "sub_Ga", "E_bind"),
}
NOBLE_GASES = {"He", "Ne", "Ar", "Kr", "Xe", "Rn"}
# Elements without a stable isotope (Tc, Pm and everything past Bi), written out so the
# test does not lean on the code it checks.
RADIOACTIVE = {"Tc", "Pm", "Po", "At", "Rn", "Fr", "Ra", "Ac", "Th", "Pa", "U", "Np", "Pu"}


def descriptors(symbol):
    """Radius, electronegativity, ionisation energy and valence count of one element."""
    row = elements.descriptor_table([symbol]).loc[symbol]
    return (
        float(row["covalent_radius"]), float(row["electronegativity_pauling"]),
        float(row["ionisation_energy_1"]), float(row["valence_electrons"]),
    )


def reference(symbols):
    """Equal-weight mean descriptors of the reference atoms (one atom or a 1:1 host)."""
    values = np.array([descriptors(symbol) for symbol in symbols])
    return tuple(values.mean(axis=0))


def by_hand(symbol, site, quantity):
    """The docstring's formula (cheap level, hyb - gga correction), host offset included."""
    radius, chi, ionisation, valence = descriptors(symbol)
    reference_symbols = {
        "sub_Mg": ["Mg"], "sub_O": ["O"], "dumbbell_O": ["O"], "int_oct_MgO": ["Mg", "O"],
        "sub_Ga": ["Ga"], "sub_N": ["N"], "int_tet": ["Ga", "N"],
    }[site]
    r0, chi0, ionisation0, valence0 = reference(reference_symbols)
    s = math.log(radius / r0)
    d_chi, d_ionisation, d_v = chi - chi0, ionisation - ionisation0, valence - valence0
    offset = 0.6 if site in ("sub_Mg", "sub_O", "dumbbell_O", "int_oct_MgO") else 0.2
    if quantity == "E_bind":
        cheap = -0.25 - 0.3 * abs(d_chi) - 0.15 * abs(d_v) + 0.04 * d_ionisation - 0.5 * s**2
    elif site in ("sub_Mg", "sub_Ga"):
        cheap = offset + 0.7 + 1.1 * abs(d_chi) + 0.16 * abs(d_ionisation) + 0.20 * abs(d_v) + 0.9 * s**2
    elif site in ("sub_O", "sub_N"):
        cheap = offset + 1.2 + 0.8 * d_chi**2 + 0.12 * abs(d_ionisation) + 0.20 * abs(d_v) + 0.9 * s**2
    elif site == "int_oct_MgO":
        cheap = offset + 1.0 + 0.5 * abs(d_chi) + 0.20 * ionisation + 0.15 * abs(d_v) + 1.2 * s**2
    elif site == "int_tet":
        cheap = offset + 1.5 + 0.4 * abs(d_chi) + 0.24 * ionisation + 0.12 * abs(d_v) + 1.8 * s**2
    else:
        cheap = offset + 2.0 - 0.6 * d_chi + 0.10 * abs(d_ionisation) + 0.20 * abs(d_v) + 0.8 * s**2
    correction = 0.10 + 0.10 * d_chi + 0.03 * (ionisation - 7.0) + 0.04 * abs(d_v) + 1.5 * max(0.0, chi - 2.8)
    return cheap, correction


@pytest.fixture(scope="module")
def world():
    return invent_second_world(seed=3)


def cell(frame, symbol, host, site, method, quantity, column="truth"):
    chosen = frame[
        (frame["element"] == symbol) & (frame["host"] == host) & (frame["site"] == site)
        & (frame["method"] == method) & (frame["quantity"] == quantity)
    ]
    assert len(chosen) == 1
    return float(chosen[column].iloc[0])


def test_same_seed_same_world_and_other_seed_other_world(world):
    pd.testing.assert_frame_equal(world, invent_second_world(seed=3))
    other = invent_second_world(seed=4)
    assert not np.allclose(world["value"].to_numpy(), other["value"].to_numpy())


def test_columns_match_the_first_world(world):
    assert list(world.columns) == COLUMNS
    assert list(invent_world(seed=0).columns) == COLUMNS
    assert world[COLUMNS].notna().all().all()


def test_every_element_has_every_host_site_quantity_and_method(world):
    assert set(world[["host", "site", "quantity"]].itertuples(index=False, name=None)) == EXPECTED_COLUMNS
    assert set(world["method"]) == {"gga", "hyb"}
    assert set(world["element"]) == set(SECOND_ELEMENTS)
    # one row per element and column: no duplicate, nothing missing
    assert len(world) == len(SECOND_ELEMENTS) * len(EXPECTED_COLUMNS) * 2
    assert not world.duplicated(["element", "host", "site", "method", "quantity"]).any()


def test_about_three_dozen_stable_elements_with_halogens_and_chalcogens():
    assert 30 <= len(SECOND_ELEMENTS) <= 40
    assert len(set(SECOND_ELEMENTS)) == len(SECOND_ELEMENTS)
    assert not set(SECOND_ELEMENTS) & (NOBLE_GASES | RADIOACTIVE | {"Si", "Ge"})
    assert {"F", "Cl", "Br", "I"} <= set(SECOND_ELEMENTS)
    assert {"O", "S", "Se", "Te"} <= set(SECOND_ELEMENTS)


@pytest.mark.parametrize("hosts", [SECOND_HOSTS, DEMO_HOSTS, FAMILY_HOSTS])
def test_no_silicon_or_germanium_host(hosts):
    compositions = elements.host_compositions(sorted(hosts))
    for composition in compositions.values():
        assert not {"Si", "Ge"} & set(composition)


@pytest.mark.parametrize(
    ("symbol", "host", "site", "quantity", "formula_site"),
    [
        ("F", "MgO", "sub_Mg", "E_sol", "sub_Mg"),
        ("Cs", "MgO", "sub_O", "E_sol", "sub_O"),
        ("Cl", "MgO", "dumbbell_O", "E_sol", "dumbbell_O"),
        ("Ti", "MgO", "int_oct", "E_sol", "int_oct_MgO"),
        ("Fe", "GaN", "int_tet", "E_sol", "int_tet"),
        ("O", "GaN", "sub_N", "E_sol", "sub_N"),
        ("Zn", "GaN", "sub_Ga", "E_bind", "sub_Ga"),
    ],
)
def test_formula_reproduced_by_hand(symbol, host, site, quantity, formula_site):
    # element_sd = noise_sd = 0 leaves the bare formula in both truth and value
    bare = invent_second_world(element_symbols=[symbol, "Li"], noise_sd=0.0, element_sd=0.0, seed=0)
    cheap, correction = by_hand(symbol, formula_site, quantity)
    assert cell(bare, symbol, host, site, "gga", quantity) == pytest.approx(cheap, abs=1e-9)
    assert cell(bare, symbol, host, site, "hyb", quantity) == pytest.approx(cheap + correction, abs=1e-9)
    assert cell(bare, symbol, host, site, "gga", quantity, "value") == pytest.approx(cheap, abs=1e-9)


def test_element_term_is_shared_by_the_element_and_halved_for_binding():
    smooth = invent_second_world(noise_sd=0.0, element_sd=0.0, seed=5)
    rough = invent_second_world(noise_sd=0.0, element_sd=0.3, seed=5)
    shift = (rough["truth"] - smooth["truth"]).groupby(
        [rough["element"], rough["quantity"]]
    ).agg(["min", "max"])
    # one number per element and quantity, whatever the host, site or level
    assert np.allclose(shift["min"], shift["max"], atol=1e-12)
    per_element = shift["min"].unstack("quantity")
    assert np.allclose(per_element["E_bind"], 0.5 * per_element["E_sol"], atol=1e-12)
    assert per_element["E_sol"].std() > 0.1


def test_noise_has_the_requested_spread():
    noisy = invent_second_world(noise_sd=0.2, seed=1)
    residual = (noisy["value"] - noisy["truth"]).to_numpy()
    # 720 draws: the sample sd of N(0, 0.2^2) lies within 10 % of 0.2 far beyond 3 sigma
    assert residual.std() == pytest.approx(0.2, rel=0.1)
    assert abs(residual.mean()) < 0.03


def test_halogen_correction_cannot_be_read_off_the_metals():
    bare = invent_second_world(noise_sd=0.0, element_sd=0.0, seed=0)
    wide = bare.pivot_table(index=["element", "host", "site", "quantity"], columns="method", values="truth")
    correction = (wide["hyb"] - wide["gga"]).groupby("element").mean()
    metals = ["Li", "Na", "K", "Cs", "Ca", "Sr", "Ba", "Al", "In", "Sn", "Sc", "Ti", "V", "Cr",
              "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Zr", "Ag"]
    assert correction["F"] > correction[metals].max() + 1.5
    assert min(correction["O"], correction["Cl"]) > correction[metals].max() + 0.5


def test_unknown_site_is_refused():
    with pytest.raises(ValueError, match=re.escape("no site 'bond_centre'")):
        invent_second_world(hosts={"MgO": ("bond_centre",)})


# ------------------------------------------------------------------------ observe
def expensive_set(observed):
    return set(observed.loc[observed["method"] == "hyb", "element"])


@pytest.mark.parametrize("n_expensive", [1, 6, 15])
def test_observe_n_expensive_is_exact(world, n_expensive):
    observed = observe(world, n_expensive=n_expensive, absent=("F", "Cs"), seed=2)
    chosen = expensive_set(observed)
    assert len(chosen) == n_expensive
    assert not chosen & {"F", "Cs"}
    # every expensive cell of a chosen element is there
    assert (observed["method"] == "hyb").sum() == n_expensive * len(EXPECTED_COLUMNS)


def test_observe_default_count_follows_the_fraction(world):
    observed = observe(world, expensive_fraction=0.25, seed=0)
    assert len(expensive_set(observed)) == round(0.25 * len(SECOND_ELEMENTS))
    assert set(observed["element"]) == set(SECOND_ELEMENTS)


def test_observe_forced_elements_share_the_cheap_cells(world):
    few = observe(world, expensive_elements=["Fe", "Ni"], seed=7)
    more = observe(world, expensive_elements=["Fe", "Ni", "Cu", "Zn"], seed=7)
    assert expensive_set(few) == {"Fe", "Ni"}
    assert expensive_set(more) == {"Fe", "Ni", "Cu", "Zn"}
    cheap_few = few[few["method"] == "gga"].reset_index(drop=True)
    cheap_more = more[more["method"] == "gga"].reset_index(drop=True)
    pd.testing.assert_frame_equal(cheap_few, cheap_more)
    assert len(cheap_few) < len(SECOND_ELEMENTS) * len(EXPECTED_COLUMNS)


@pytest.mark.parametrize(
    ("options", "message"),
    [
        ({"n_expensive": 2, "expensive_elements": ["Fe"]}, "not both"),
        ({"n_expensive": 0}, "between 1 and"),
        ({"n_expensive": 37}, "between 1 and"),
        ({"expensive_elements": ["F"], "absent": ["F"]}, "absent or not in the world"),
        ({"expensive_elements": ["Mg"]}, "absent or not in the world"),
    ],
)
def test_observe_refuses_impossible_choices(world, options, message):
    with pytest.raises(ValueError, match=re.escape(message)):
        observe(world, **options)


# --------------------------------------------------------- the invented host family
# Cation and anion of each family host, written out so the tests do not lean on the code.
FAMILY_IONS = {
    "MgO": ("Mg", "O"), "CaO": ("Ca", "O"), "SrO": ("Sr", "O"), "BaO": ("Ba", "O"),
    "MgS": ("Mg", "S"), "CaS": ("Ca", "S"), "SrS": ("Sr", "S"), "BaS": ("Ba", "S"),
}


def family_host_term(host):
    """The docstring's host term H = 0.6 (chi_X - 3.0) - 1.2 ln(R_M / 170), by hand."""
    cation, anion = FAMILY_IONS[host]
    return 0.6 * (descriptors(anion)[1] - 3.0) - 1.2 * math.log(descriptors(cation)[0] / 170.0)


@pytest.fixture(scope="module")
def family():
    return invent_host_family(seed=2)


def test_family_shape_columns_and_seed(family):
    assert list(family.columns) == COLUMNS
    assert family[COLUMNS].notna().all().all()
    # 8 hosts x (3 E_sol + 1 E_bind) columns x 2 levels, one row each
    assert len(family) == len(SECOND_ELEMENTS) * 8 * 4 * 2
    assert not family.duplicated(["element", "host", "site", "method", "quantity"]).any()
    assert set(family["method"]) == {"gga", "hyb"}
    pd.testing.assert_frame_equal(family, invent_host_family(seed=2))
    assert not np.allclose(family["value"], invent_host_family(seed=3)["value"])


def test_family_every_host_has_its_three_sites_and_cation_binding(family):
    assert set(family["host"]) == set(FAMILY_IONS)
    for host, (cation, anion) in FAMILY_IONS.items():
        columns = set(family.loc[family["host"] == host, ["site", "quantity"]].itertuples(index=False, name=None))
        assert columns == {
            (f"sub_{cation}", "E_sol"), (f"sub_{anion}", "E_sol"), ("int_oct", "E_sol"),
            (f"sub_{cation}", "E_bind"),
        }


def test_family_host_spread_follows_the_host_descriptors(family):
    cheap = family[(family["method"] == "gga") & (family["quantity"] == "E_sol")]
    per_host = cheap.groupby("host")["value"].mean()
    hosts = sorted(FAMILY_IONS)
    host_terms = np.array([family_host_term(host) for host in hosts])
    assert per_host.max() - per_host.min() > 0.5
    assert host_terms.max() - host_terms.min() > 0.8
    assert np.corrcoef(per_host[hosts].to_numpy(), host_terms)[0, 1] > 0.8
    # the oxide of each cation sits above its sulfide (larger chi_X)
    for cation in ("Mg", "Ca", "Sr", "Ba"):
        assert per_host[f"{cation}O"] > per_host[f"{cation}S"]


def test_family_unexplained_host_term_is_one_number_per_host():
    plain = invent_host_family(noise_sd=0.0, element_sd=0.0, host_sd=0.0, seed=4)
    shifted = invent_host_family(noise_sd=0.0, element_sd=0.0, host_sd=0.3, seed=4)
    shift = (shifted["truth"] - plain["truth"]).groupby([plain["host"], plain["quantity"]]).agg(["min", "max"])
    assert np.allclose(shift["min"], shift["max"], atol=1e-12)
    per_host = shift["min"].unstack("quantity")
    assert np.allclose(per_host["E_bind"], 0.5 * per_host["E_sol"], atol=1e-12)
    assert per_host["E_sol"].std() > 0.05


@pytest.mark.parametrize(
    ("symbol", "host", "site", "quantity"),
    [("Li", "CaS", "sub_Ca", "E_sol"), ("F", "BaO", "sub_O", "E_sol"),
     ("Cs", "MgO", "int_oct", "E_sol"), ("Zn", "SrS", "sub_Sr", "E_bind")],
)
def test_family_formula_reproduced_by_hand(symbol, host, site, quantity):
    bare = invent_host_family(element_symbols=[symbol, "Na"], noise_sd=0.0, element_sd=0.0, host_sd=0.0)
    cation, anion = FAMILY_IONS[host]
    radius, chi, _, valence = descriptors(symbol)
    cation_radius, anion_chi = descriptors(cation)[0], descriptors(anion)[1]
    softness = 170.0 / cation_radius
    r0, chi0, _, valence0 = reference([site[4:]] if site.startswith("sub") else [cation, anion])
    s, d_chi, d_v = math.log(radius / r0), chi - chi0, valence - valence0
    if quantity == "E_bind":
        cheap = -0.2 - 0.9 * softness * s**2 - 0.25 * abs(d_chi) + 0.3 * (anion_chi - 3.0)
    elif site == f"sub_{cation}":
        cheap = 0.4 + 2.6 * softness * s**2 + 0.7 * abs(d_chi) + 0.12 * abs(d_v) + family_host_term(host)
    elif site == f"sub_{anion}":
        cheap = 1.3 + 1.8 * softness * s**2 + 0.5 * d_chi**2 + 0.12 * abs(d_v) + family_host_term(host)
    else:
        cheap = 0.6 + 0.9 * softness * (radius / r0) ** 2 + 0.25 * chi - 0.04 * valence + family_host_term(host)
    correction = 0.05 + 0.30 * (anion_chi - 2.5) + 0.15 * abs(d_chi) + 0.2 * s
    assert cell(bare, symbol, host, site, "gga", quantity) == pytest.approx(cheap, abs=1e-9)
    assert cell(bare, symbol, host, site, "hyb", quantity) == pytest.approx(cheap + correction, abs=1e-9)


def test_family_host_descriptors_match_the_published_values():
    # Covalent radii (pm): B. Cordero et al., "Covalent radii revisited", Dalton Trans.
    # 2008, 2832, Table 2 (values from memory). Pauling electronegativities of O and S:
    # CRC Handbook of Chemistry and Physics, "Electronegativity" table (values from memory).
    published_radius = {"Mg": 141.0, "Ca": 176.0, "Sr": 195.0, "Ba": 215.0}
    for symbol, value in published_radius.items():
        assert descriptors(symbol)[0] == pytest.approx(value, abs=1.0)
    assert descriptors("O")[1] == pytest.approx(3.44, abs=0.01)
    assert descriptors("S")[1] == pytest.approx(2.58, abs=0.01)


def test_family_host_file_parses_and_names_a_kind_per_site(tmp_path):
    text = family_host_file_text()
    path = tmp_path / "family_hosts.csv"
    path.write_text(text, encoding="utf-8")
    mapping = read_host_file(path)
    assert mapping == {
        host: {cation: 1.0, anion: 1.0} for host, (cation, anion) in FAMILY_IONS.items()
    }
    lines = text.splitlines()
    assert lines[0] == "host,formula,site,site_kind"
    rows = [line.split(",") for line in lines[1:]]
    assert len(rows) == sum(len(sites) for sites in FAMILY_HOSTS.values()) == 24
    expected = {}
    for host, (cation, anion) in FAMILY_IONS.items():
        expected[(host, f"sub_{cation}")] = "sub_cation"
        expected[(host, f"sub_{anion}")] = "sub_anion"
        expected[(host, "int_oct")] = "int_oct"
    assert {(host, site): kind for host, formula, site, kind in rows} == expected
    assert FAMILY_SITE_KINDS == expected
    assert all(host == formula for host, formula, _, _ in rows)


def test_family_unknown_site_is_refused():
    with pytest.raises(ValueError, match=re.escape("no site 'int_tet'")):
        invent_host_family(hosts={"MgO": ("int_tet",)})
    with pytest.raises(ValueError, match=re.escape("no site 'sub_Zn'")):
        family_host_file_text({"MgO": ("sub_Zn",)})


def test_close_site_gaps_makes_a_third_of_the_elements_undecided(world):
    from dopantgap.world import close_site_gaps

    closed = close_site_gaps(world, gap_sd=0.05, seed=4)
    drawn = closed.attrs["close_elements"]
    assert len(drawn) == round(world["element"].nunique() / 3)
    assert close_site_gaps(world, gap_sd=0.05, seed=4).equals(closed)  # same seed, same world
    moved = (closed["truth"] - world["truth"]).abs() > 0
    # only E_sol cells of the drawn elements move, truth and value alike (noise kept)
    assert set(closed.loc[moved, "element"]) <= set(drawn) and set(closed.loc[moved, "quantity"]) == {"E_sol"}
    np.testing.assert_allclose(closed["value"] - world["value"], closed["truth"] - world["truth"])
    cheap = closed[(closed["method"] == "gga") & (closed["quantity"] == "E_sol")]
    gaps = cheap.groupby(["element", "host"])["truth"].apply(lambda t: np.diff(np.sort(t.to_numpy())[:2])[0])
    close = gaps[gaps.index.get_level_values(0).isin(drawn)]
    far = gaps[~gaps.index.get_level_values(0).isin(drawn)]
    # every drawn gap is |g| below 5 sd of 0.05 eV; most undrawn ones are far wider
    assert close.max() < 0.25 and close.median() < 0.06 < far.median()
