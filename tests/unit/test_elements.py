"""Tests of dopantgap.elements against handbook values, configurations and hand calculations."""

import dataclasses
import sqlite3

import numpy as np
import pandas as pd
import pytest

from dopantgap.elements import descriptors as element_descriptors
from dopantgap.elements import (
    DESCRIPTOR_NAMES,
    DESCRIPTORS,
    HOST_RELATIVE_DESCRIPTORS,
    HOST_RELATIVE_NAMES,
    Descriptor,
    descriptor_table,
    element_flags,
    host_compositions,
    host_relative_table,
    imputed_mask,
    parse_formula,
    read_host_file,
    reference_atoms,
)
from dopantgap.errors import DopantgapError, TableError
from dopantgap.symbols import SYMBOLS


@pytest.fixture(scope="module")
def table():
    return descriptor_table()


@pytest.fixture(scope="module")
def mask():
    return imputed_mask()


# ---------------------------------------------------------------------------
# Contract of the descriptor list


def test_descriptor_list_has_required_names_in_fixed_order():
    required = (
        "atomic_number", "period", "group", "block_index", "valence_s", "valence_p",
        "valence_d", "valence_f", "valence_electrons", "covalent_radius", "metallic_radius",
        "electronegativity_pauling", "electronegativity_allen", "ionisation_energy_1",
        "ionisation_energy_2", "electron_affinity", "polarisability", "mendeleev_number",
        "pettifor_number",
    )
    assert DESCRIPTOR_NAMES[: len(required)] == required
    assert len(DESCRIPTORS) >= 16
    assert len(set(DESCRIPTOR_NAMES)) == len(DESCRIPTOR_NAMES)
    for descriptor in DESCRIPTORS + HOST_RELATIVE_DESCRIPTORS:
        assert isinstance(descriptor, Descriptor)
        assert descriptor.source and descriptor.description and descriptor.imputation
    assert HOST_RELATIVE_NAMES == tuple(d.name for d in HOST_RELATIVE_DESCRIPTORS)
    assert all(d.source.startswith("derived") for d in HOST_RELATIVE_DESCRIPTORS)
    with pytest.raises(dataclasses.FrozenInstanceError):
        DESCRIPTORS[0].unit = "pm"


def test_units_match_the_units_mendeleev_documents():
    # mendeleev's own propertymetadata table (shipped in elements.db) names the unit of
    # each column; our units must agree with it.
    units = {d.name: d.unit for d in DESCRIPTORS}
    path = element_descriptors._database_path()
    connection = sqlite3.connect(f"{path.as_uri()}?mode=ro", uri=True)
    try:
        documented = dict(connection.execute(
            "SELECT column_name, unit FROM propertymetadata WHERE table_name = 'elements'"
        ).fetchall())
    finally:
        connection.close()
    for ours, theirs in (
        ("covalent_radius", "covalent_radius_cordero"),
        ("metallic_radius", "metallic_radius"),
        ("electronegativity_allen", "en_allen"),
        ("electron_affinity", "electron_affinity"),
        ("polarisability", "dipole_polarizability"),
        ("atomic_weight", "atomic_weight"),
        ("miedema_electronegativity", "en_miedema"),
    ):
        assert units[ours] == documented[theirs], ours
        # The source string names the column it is read from.
        assert theirs in {d.name: d.source for d in DESCRIPTORS}[ours]


# ---------------------------------------------------------------------------
# Values against outside sources


@pytest.mark.parametrize(
    "symbol, energy",
    [
        # NIST Atomic Spectra Database, ground states and ionization energies
        # (Kramida et al.), first ionisation energies; values from memory.
        ("H", 13.598),
        ("Na", 5.139),
        ("Fe", 7.902),
        ("Au", 9.226),
    ],
)
def test_first_ionisation_energy_matches_nist(table, symbol, energy):
    assert table.loc[symbol, "ionisation_energy_1"] == pytest.approx(energy, abs=0.01)


def test_second_ionisation_energy_matches_nist(table):
    # NIST Atomic Spectra Database: He II 54.418 eV (hydrogen-like, 4 x 13.606 eV),
    # Na II 47.286 eV; values from memory.
    assert table.loc["He", "ionisation_energy_2"] == pytest.approx(54.418, abs=0.01)
    assert table.loc["Na", "ionisation_energy_2"] == pytest.approx(47.286, abs=0.01)


@pytest.mark.parametrize(
    "symbol, radius",
    [
        # Cordero et al., Dalton Trans. 2008, "Covalent radii revisited", Table 2
        # (values from memory of that table).
        ("N", 71), ("O", 66), ("Cu", 132), ("Sn", 139), ("Ba", 215),
        ("Li", 128), ("S", 105), ("Zn", 122), ("Ga", 122), ("Mg", 141),
    ],
)
def test_covalent_radius_matches_cordero(table, symbol, radius):
    assert table.loc[symbol, "covalent_radius"] == pytest.approx(radius, abs=1)


@pytest.mark.parametrize(
    "symbol, value",
    # CRC Handbook of Chemistry and Physics, "Electronegativity" table (Pauling
    # scale); values from memory.
    [("F", 3.98), ("O", 3.44), ("Cs", 0.79), ("Na", 0.93), ("C", 2.55)],
)
def test_pauling_electronegativity_matches_crc(table, symbol, value):
    assert table.loc[symbol, "electronegativity_pauling"] == pytest.approx(value, abs=0.005)


@pytest.mark.parametrize(
    "symbol, s, p, d, f",
    [
        # Ground-state configurations from the NIST Atomic Spectra Database
        # (values from memory): Fe [Ar] 3d6 4s2; O [He] 2s2 2p4; Cu [Ar] 3d10 4s1;
        # Ce [Xe] 4f 5d 6s2; Pd [Kr] 4d10 (no 5s electron); Hf [Xe] 4f14 5d2 6s2.
        ("Fe", 2, 0, 6, 0),
        ("O", 2, 4, 0, 0),
        ("Cu", 1, 0, 10, 0),
        ("Ce", 2, 0, 1, 1),
        ("Pd", 0, 0, 10, 0),
        ("Hf", 2, 0, 2, 14),
    ],
)
def test_valence_counts_follow_ground_state_configurations(table, symbol, s, p, d, f):
    row = table.loc[symbol]
    assert (row["valence_s"], row["valence_p"], row["valence_d"], row["valence_f"]) == (
        s, p, d, f
    )


def test_configurations_hold_atomic_number_electrons():
    # A neutral atom has Z electrons: the expanded configurations (core plus
    # listed subshells) must add up to the atomic number for every element.
    path = element_descriptors._database_path()
    connection = sqlite3.connect(f"{path.as_uri()}?mode=ro", uri=True)
    try:
        rows = connection.execute(
            "SELECT atomic_number, electronic_configuration FROM elements"
        ).fetchall()
    finally:
        connection.close()
    assert len(rows) == 118
    for number, configuration in rows:
        occupations = element_descriptors._configuration_occupations(configuration)
        assert sum(occupations.values()) == number, configuration


@pytest.mark.parametrize(
    "symbol, valence",
    # Group-style valence as documented in the module (common practice, no source):
    # main group s+p, groups 3-10 s+d, groups 11-12 s only, f block s+d but >= 3.
    [("N", 5), ("O", 6), ("Ga", 3), ("Fe", 8), ("Cu", 1), ("Zn", 2), ("Ce", 3),
     ("Th", 4), ("Ne", 8), ("H", 1)],
)
def test_group_style_valence(table, symbol, valence):
    assert table.loc[symbol, "valence_electrons"] == valence


def test_block_index_and_group(table, mask):
    # Blocks of the periodic table (IUPAC periodic table, common knowledge).
    assert table.loc[["Na", "Si", "Fe", "Gd"], "block_index"].tolist() == [0, 1, 2, 3]
    assert table.loc[["Na", "Si", "Fe"], "group"].tolist() == [1, 14, 8]
    # Lanthanides/actinides have no group in the source: documented group 3, imputed.
    assert table.loc["Gd", "group"] == 3 and mask.loc["Gd", "group"]
    assert not mask.loc["Fe", "group"]


# ---------------------------------------------------------------------------
# Completeness, imputation and caching


def test_table_is_complete_float_and_in_order(table, mask):
    assert table.shape == (118, len(DESCRIPTOR_NAMES))
    assert list(table.index) == list(SYMBOLS)
    assert list(table.columns) == list(DESCRIPTOR_NAMES)
    assert (table.dtypes == np.float64).all()
    assert not table.isna().any().any()
    assert mask.shape == table.shape
    assert (mask.dtypes == bool).all()
    assert list(mask.index) == list(table.index) and list(mask.columns) == list(table.columns)
    assert table["atomic_number"].tolist() == list(range(1, 119))


def test_known_gaps_are_marked(mask):
    # Noble gases have no Pauling electronegativity (CRC Handbook lists none for
    # He, Ne, Ar; value from memory), so these values must be estimates.
    assert mask.loc[["He", "Ne", "Ar"], "electronegativity_pauling"].all()
    assert not mask.loc[["F", "O", "Fe"], "electronegativity_pauling"].any()
    # Nitrogen's anion is not bound (CRC Handbook, electron affinities: N- unstable;
    # value from memory): its electron affinity is replaced by 0 eV.
    assert mask.loc["N", "electron_affinity"]
    assert not mask.loc["O", "electron_affinity"]


def test_electron_affinity_rule(table, mask):
    affinity = table["electron_affinity"]
    assert (affinity >= 0).all()
    assert (affinity[mask["electron_affinity"]] == 0).all()
    # Chlorine has the largest electron affinity of all elements, 3.61 eV
    # (CRC Handbook, electron affinities; value from memory).
    assert affinity.idxmax() == "Cl"
    assert affinity["Cl"] == pytest.approx(3.613, abs=0.01)


def test_neighbour_rule_interpolates_between_row_neighbours(table, mask):
    # Pm has no Pauling value in the source; its neighbours Nd and Sm do, so the
    # documented rule gives their mean (step 2: bracketed within the period).
    assert mask.loc["Pm", "electronegativity_pauling"]
    assert not mask.loc[["Nd", "Sm"], "electronegativity_pauling"].any()
    expected = (table.loc["Nd", "electronegativity_pauling"]
                + table.loc["Sm", "electronegativity_pauling"]) / 2
    assert table.loc["Pm", "electronegativity_pauling"] == pytest.approx(expected)
    # Rf has no covalent radius; nothing heavier in group 4 or period 7 has one,
    # so step 3 takes the nearest known group member, Hf.
    assert mask.loc["Rf", "covalent_radius"]
    assert table.loc["Rf", "covalent_radius"] == table.loc["Hf", "covalent_radius"]


def test_fill_step_on_invented_numbers():
    # Hand check of one step of the rule on invented values.
    values = np.array([1.0, np.nan, 5.0, np.nan])
    family = np.array(["a", "a", "a", "a"])
    numbers = np.array([1.0, 2.0, 5.0, 6.0])
    bracketed_only = element_descriptors._fill_within(values, family, numbers, allow_nearest=False)
    np.testing.assert_allclose(bracketed_only, [1.0, 1.0 + (5 - 1) * (1 / 4), 5.0, np.nan])
    with_nearest = element_descriptors._fill_within(values, family, numbers, allow_nearest=True)
    np.testing.assert_allclose(with_nearest, [1.0, 2.0, 5.0, 5.0])


def test_returned_frames_are_copies():
    first = descriptor_table(["Fe", "Ga"])
    first.loc["Fe", "covalent_radius"] = -1.0
    first_mask = imputed_mask(["He"])
    first_mask.loc["He", "electronegativity_pauling"] = False
    assert descriptor_table(["Fe"]).loc["Fe", "covalent_radius"] == pytest.approx(142.0)
    assert imputed_mask(["He"]).loc["He", "electronegativity_pauling"]


def test_symbols_are_canonicalised_in_given_order():
    frame = descriptor_table(["ga", " N", "FE"])
    assert list(frame.index) == ["Ga", "N", "Fe"]
    assert list(descriptor_table("Zn").index) == ["Zn"]


def test_unknown_symbol_raises():
    with pytest.raises(DopantgapError, match="Xx"):
        descriptor_table(["Fe", "Xx"])
    with pytest.raises(DopantgapError):
        imputed_mask(["Q"])
    with pytest.raises(DopantgapError):
        element_flags(["Zz"])


def test_database_is_read_once_and_callers_get_copies(monkeypatch):
    # speed itself is measured in benchmarks/, not here: what makes later calls cheap is
    # that mendeleev's database is read once, and a caller's edit never reaches the cache
    first = descriptor_table()

    def no_second_read():
        raise AssertionError("mendeleev's database read again")

    monkeypatch.setattr(element_descriptors, "_read_database", no_second_read)
    first.iloc[:, 0] = np.nan
    again = descriptor_table()
    assert not again.iloc[:, 0].isna().all()
    pd.testing.assert_frame_equal(descriptor_table(), again)


# ---------------------------------------------------------------------------
# Flags


def test_radioactive_flags():
    flags = element_flags()
    # Elements without a stable isotope: Tc (43), Pm (61) and every element from
    # Po (84) on (IUPAC, common knowledge; value from memory).
    expected = {"Tc", "Pm"} | set(SYMBOLS[83:])
    assert set(flags.index[flags["radioactive"]]) == expected
    # Bi-209 decays with a half-life of about 2e19 years (Marcillac et al., Nature
    # 2003; value from memory); mendeleev counts Bi as stable and so do we.
    assert not flags.loc["Bi", "radioactive"]
    assert flags.loc["Po", "note"].startswith("radioactive")


def test_toxic_flags():
    flags = element_flags(["As", "Be", "Cd", "Cr", "Ni", "Fe", "O", "Hg"])
    # IARC Monographs, list of Group 1 agents (carcinogenic to humans): arsenic,
    # beryllium, cadmium, chromium(VI) and nickel compounds; value from memory.
    assert flags.loc[["As", "Be", "Cd", "Cr", "Ni"], "toxic"].all()
    assert "IARC Group 1" in flags.loc["As", "note"]
    assert not flags.loc[["Fe", "O"], "toxic"].any()
    assert flags.loc["Fe", "note"] == ""
    assert flags["radioactive"].dtype == bool and flags["toxic"].dtype == bool


# ---------------------------------------------------------------------------
# Hosts


@pytest.mark.parametrize(
    "text, expected",
    [
        ("C", {"C": 1}),
        ("SnO2", {"Sn": 1, "O": 2}),
        ("GaN", {"Ga": 1, "N": 1}),
        ("Al2O3", {"Al": 2, "O": 3}),
        ("ZnS", {"Zn": 1, "S": 1}),
        (" CO ", {"C": 1, "O": 1}),
        ("Co", {"Co": 1}),
        ("Ca(OH)2", {"Ca": 1, "O": 2, "H": 2}),
        ("Ca3(PO4)2", {"Ca": 3, "P": 2, "O": 8}),
        ("Fe0.95O", {"Fe": 0.95, "O": 1}),
        ("CH3COOH", {"C": 2, "H": 4, "O": 2}),
    ],
)
def test_parse_formula(text, expected):
    result = parse_formula(text)
    assert result == pytest.approx(expected)
    assert list(result) == list(expected)
    assert all(isinstance(count, float) for count in result.values())


@pytest.mark.parametrize("text", ["diamond", "", "GaN)", "(GaN", "Xx2", "Ga0N", "2GaN", "Ga N"])
def test_parse_formula_rejects_labels(text):
    with pytest.raises(DopantgapError, match="host file"):
        parse_formula(text)


def test_read_host_file(tmp_path):
    path = tmp_path / "hosts.csv"
    path.write_text("# invented host labels\nhost,formula,note\ndiamond,C,sp3\n\n"
                    "wurtzite GaN, GaN ,\n", encoding="utf-8")
    assert read_host_file(path) == {"diamond": {"C": 1.0}, "wurtzite GaN": {"Ga": 1.0,
                                                                           "N": 1.0}}


@pytest.mark.parametrize(
    "text, line, message",
    [
        ("host,formula\ndiamond,C\ncorundum,aluminium oxide\n", 3, "not a chemical formula"),
        ("label,formula\ndiamond,C\n", 1, "no column 'host'"),
        ("host,formula\ndiamond\n", 2, "columns"),
        ("host,formula\ndiamond,\n", 2, "empty"),
        ("host,formula\ndiamond,C\ndiamond,Sn\n", 3, "twice"),
    ],
)
def test_read_host_file_errors_name_file_and_line(tmp_path, text, line, message):
    path = tmp_path / "hosts.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(TableError, match=message) as caught:
        read_host_file(path)
    assert caught.value.line == line
    assert str(caught.value).startswith(f"{path}:{line}: ")


def test_read_host_file_missing(tmp_path):
    with pytest.raises(TableError, match="not found"):
        read_host_file(tmp_path / "absent.csv")


def test_host_compositions(tmp_path):
    path = tmp_path / "hosts.csv"
    path.write_text("host,formula\ndiamond,C\n", encoding="utf-8")
    mapping = read_host_file(path)
    result = host_compositions(["diamond", "GaN", "diamond"], mapping)
    assert result == {"diamond": {"C": 1.0}, "GaN": {"Ga": 1.0, "N": 1.0}}
    result["diamond"]["C"] = 7.0
    assert mapping["diamond"]["C"] == 1.0  # the caller's map is not changed
    assert host_compositions(["diamond"], path) == {"diamond": {"C": 1.0}}
    with pytest.raises(DopantgapError, match="host file"):
        host_compositions(["graphite"], mapping)
    with pytest.raises(DopantgapError, match="host file"):
        host_compositions(["diamond"])


@pytest.mark.parametrize(
    "site, composition, expected",
    [
        ("sub_Ga", {"Ga": 1, "N": 1}, {"Ga": 1.0}),
        ("Zn_sub", {"Zn": 1, "S": 1}, {"Zn": 1.0}),
        ("int_tet_S", {"Zn": 1, "S": 1}, {"S": 1.0}),
        ("sub-ga", {"Ga": 1, "N": 1}, {"Ga": 1.0}),
        ("Mg_Ga", {"Ga": 1, "N": 1}, {"Ga": 1.0}),
        ("V_Zn", {"Zn": 1, "O": 1}, {"Zn": 1.0}),
        ("sub(O2)", {"Al": 2, "O": 3}, {"O": 1.0}),
        ("bc_Ga_N", {"Ga": 1, "N": 1}, {"Ga": 0.5, "N": 0.5}),
        ("int_tet", {"Zn": 1, "S": 1}, {"Zn": 0.5, "S": 0.5}),
        ("int_oct", {"Al": 2, "O": 3}, {"Al": 0.4, "O": 0.6}),
        ("split s", {"Zn": 1, "S": 1}, {"Zn": 0.5, "S": 0.5}),
        ("int in channel", {"In": 1, "N": 1}, {"In": 0.5, "N": 0.5}),
        ("tetrahedral", {"C": 1}, {"C": 1.0}),
        (None, {"Sn": 1, "O": 2}, {"Sn": 1 / 3, "O": 2 / 3}),
    ],
)
def test_reference_atoms(site, composition, expected):
    weights = reference_atoms(site, composition)
    assert weights == pytest.approx(expected)
    assert sum(weights.values()) == pytest.approx(1.0)


def test_reference_atoms_rejects_empty_composition():
    with pytest.raises(DopantgapError):
        reference_atoms("sub_Ga", {})


def test_host_relative_table_hand_computed(table):
    compositions = host_compositions(["ZnS", "GaN"])
    result = host_relative_table(
        ["Ga", "Mg", "Li", "Ga"], ["ZnS", "GaN", "ZnS", "ZnS"],
        ["sub_Zn", "sub_Ga", "int_tet", float("nan")], compositions,
    )
    assert list(result.columns) == list(HOST_RELATIVE_NAMES)
    assert len(result) == 4 and (result.dtypes == np.float64).all()
    radius = table["covalent_radius"]
    # From the descriptor values themselves.
    assert result.loc[0, "size_misfit"] == pytest.approx(
        (radius["Ga"] - radius["Zn"]) / radius["Zn"]
    )
    # From Cordero et al., Dalton Trans. 2008, Table 2 (values from memory):
    # Mg 141 pm, Ga 122 pm, Li 128 pm, Zn 122 pm, S 105 pm.
    assert result.loc[1, "size_misfit"] == pytest.approx((141 - 122) / 122, abs=0.01)
    assert result.loc[2, "size_misfit"] == pytest.approx(
        (128 - (122 + 105) / 2) / ((122 + 105) / 2), abs=0.01
    )
    # Ga on a Zn site is a one-electron donor, Mg on a Ga site a one-electron
    # acceptor (common practice, no source).
    assert result.loc[0, "valence_difference"] == 1
    assert result.loc[1, "valence_difference"] == -1
    # CRC Pauling values (from memory): Ga 1.81, Zn 1.65, Mg 1.31.
    assert result.loc[0, "electronegativity_difference"] == pytest.approx(0.16, abs=0.005)
    assert result.loc[1, "electronegativity_difference"] == pytest.approx(-0.50, abs=0.005)
    # NIST ASD first ionisation energies (from memory): Ga 5.999 eV, Zn 9.394 eV.
    assert result.loc[0, "ionisation_energy_difference"] == pytest.approx(
        5.999 - 9.394, abs=0.01
    )
    assert result.loc[0, "electron_affinity_difference"] == pytest.approx(
        table.loc["Ga", "electron_affinity"] - table.loc["Zn", "electron_affinity"]
    )
    # No site: composition mix of ZnS, the same as the interstitial reference.
    assert result.loc[3, "size_misfit"] == pytest.approx(
        (radius["Ga"] - (radius["Zn"] + radius["S"]) / 2) / ((radius["Zn"] + radius["S"]) / 2)
    )


def test_host_relative_table_errors_and_inputs_unchanged():
    compositions = {"GaN": {"Ga": 1.0, "N": 1.0}}
    before = {"GaN": {"Ga": 1.0, "N": 1.0}}
    elements_in = ["Mg", "Zn"]
    host_relative_table(elements_in, ["GaN", "GaN"], ["sub_Ga", "sub_Ga"], compositions)
    assert compositions == before and elements_in == ["Mg", "Zn"]
    with pytest.raises(DopantgapError, match="same length"):
        host_relative_table(["Mg"], ["GaN", "GaN"], ["sub_Ga"], compositions)
    with pytest.raises(DopantgapError, match="composition"):
        host_relative_table(["Mg"], ["ZnO"], ["sub_Zn"], compositions)
    with pytest.raises(DopantgapError, match="Qq"):
        host_relative_table(["Qq"], ["GaN"], ["sub_Ga"], compositions)
    empty = host_relative_table([], [], [], compositions)
    assert empty.shape == (0, len(HOST_RELATIVE_NAMES))
    assert isinstance(empty, pd.DataFrame)
