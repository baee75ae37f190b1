"""Tests of dopantgap.hosts: formulas moved here, host-file properties, host descriptors.

Outside reference: mendeleev package data (L. M. Mentel, "mendeleev - A Python resource
for properties of chemical elements, ions and isotopes", 2014-), Pauling
electronegativities and Cordero covalent radii, read through mendeleev's own
``mendeleev.element`` beside the hand values.
"""

import mendeleev
import numpy as np
import pandas as pd
import pytest

import dopantgap.elements
from dopantgap.elements import DESCRIPTORS, Descriptor, descriptor_table
from dopantgap.errors import DopantgapError, TableError
from dopantgap.hosts import (
    HOST_ELEMENT_DESCRIPTORS,
    HostProperties,
    host_compositions,
    host_descriptor_table,
    host_descriptors,
    host_property_columns,
    parse_formula,
    read_host_file,
    read_host_properties,
    read_site_properties,
)


def _write(tmp_path, text, name="hosts.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_formulas_still_importable_from_elements():
    assert dopantgap.elements.parse_formula is parse_formula
    assert dopantgap.elements.read_host_file is read_host_file
    assert dopantgap.elements.host_compositions is host_compositions
    assert parse_formula("Al2O3") == {"Al": 2.0, "O": 3.0}


def test_mgo_mean_electronegativity_matches_mendeleev_by_hand():
    # Hand value from mendeleev package data (Mentel, mendeleev 2014-), Pauling
    # electronegativities: Mg 1.31, O 3.44, so the 1:1 mean is (1.31 + 3.44) / 2 = 2.375.
    assert mendeleev.element("Mg").en_pauling == pytest.approx(1.31)
    assert mendeleev.element("O").en_pauling == pytest.approx(3.44)
    table = host_descriptor_table(host_compositions(["MgO"]))
    row = table.loc["MgO"]
    assert row["host_mean_electronegativity_pauling"] == pytest.approx(2.375)
    assert row["host_min_electronegativity_pauling"] == pytest.approx(1.31)
    assert row["host_max_electronegativity_pauling"] == pytest.approx(3.44)


def test_al2o3_weights_atom_fractions():
    # Atom fractions of Al2O3: Al 2/5 = 0.4, O 3/5 = 0.6. Pauling electronegativities from
    # mendeleev package data (Mentel, mendeleev 2014-): Al 1.61, O 3.44 -> 0.4*1.61 + 0.6*3.44 = 2.708.
    al, o = mendeleev.element("Al").en_pauling, mendeleev.element("O").en_pauling
    assert (al, o) == pytest.approx((1.61, 3.44))
    table = host_descriptor_table({"Al2O3": parse_formula("Al2O3")})
    assert table.loc["Al2O3", "host_mean_electronegativity_pauling"] == pytest.approx(2.708)
    assert table.loc["Al2O3", "host_mean_electronegativity_pauling"] == pytest.approx(0.4 * al + 0.6 * o)
    # Cordero covalent radii, mendeleev package data: Al 121 pm, O 66 pm.
    r_al, r_o = mendeleev.element("Al").covalent_radius_cordero, mendeleev.element("O").covalent_radius_cordero
    assert (r_al, r_o) == pytest.approx((121.0, 66.0))
    assert table.loc["Al2O3", "host_mean_covalent_radius"] == pytest.approx(0.4 * 121.0 + 0.6 * 66.0)
    assert table.loc["Al2O3", "host_min_covalent_radius"] == pytest.approx(66.0)
    assert table.loc["Al2O3", "host_max_covalent_radius"] == pytest.approx(121.0)


def test_elemental_host_min_max_mean_agree():
    table = host_descriptor_table({"Cu": {"Cu": 1.0}})
    elemental = descriptor_table(["Cu"])
    for name in HOST_ELEMENT_DESCRIPTORS:
        expected = elemental.loc["Cu", name]
        assert table.loc["Cu", f"host_mean_{name}"] == pytest.approx(expected)
        assert table.loc["Cu", f"host_min_{name}"] == pytest.approx(expected)
        assert table.loc["Cu", f"host_max_{name}"] == pytest.approx(expected)


def test_descriptor_values_are_used_when_given():
    frozen = descriptor_table()
    frozen.loc["Mg", "electronegativity_pauling"] = 1.0
    table = host_descriptor_table({"MgO": {"Mg": 1.0, "O": 1.0}}, descriptor_values=frozen)
    assert table.loc["MgO", "host_mean_electronegativity_pauling"] == pytest.approx((1.0 + 3.44) / 2)


def test_column_records_follow_the_table_and_elements():
    records = host_descriptors()
    assert all(isinstance(record, Descriptor) for record in records)
    table = host_descriptor_table({"MgO": {"Mg": 1.0, "O": 1.0}})
    assert list(table.columns) == [record.name for record in records]
    units = {descriptor.name: descriptor.unit for descriptor in DESCRIPTORS}
    by_name = {record.name: record for record in records}
    assert by_name["host_mean_covalent_radius"].unit == units["covalent_radius"] == "pm"
    assert by_name["host_max_ionisation_energy_1"].unit == "eV"
    with pytest.raises(DopantgapError, match="not an elemental descriptor"):
        host_descriptors(names=["shininess"])


PROPERTIES_FILE = """\
# invented host file for tests
host,formula,site,multiplicity,lattice_constant [angstrom],band_gap [eV],structure,softness,note
MgO,MgO,sub_Mg,1,4.2,7.8,rocksalt,2,invented
MgO,MgO,sub_O,1,,7.80,,,
CaO,CaO,sub_Ca,1,4.8,,rocksalt,,
Cu,Cu,sub,1,3.6,0,fcc,5,
"""


def test_read_host_properties_units_kinds_and_missing(tmp_path):
    properties = read_host_properties(_write(tmp_path, PROPERTIES_FILE))
    assert isinstance(properties, HostProperties)
    assert properties.names == ["lattice_constant", "band_gap", "structure", "softness"]
    assert properties.units == {"lattice_constant": "angstrom", "band_gap": "eV", "structure": "", "softness": ""}
    assert properties.kinds == {
        "lattice_constant": "numeric", "band_gap": "numeric", "structure": "category", "softness": "numeric",
    }
    assert list(properties.values.index) == ["MgO", "CaO", "Cu"]
    assert properties.values.loc["MgO", "band_gap"] == pytest.approx(7.8)
    assert np.isnan(properties.values.loc["CaO", "band_gap"])
    assert properties.values.loc["Cu", "structure"] == "fcc"
    assert properties.missing() == {"band_gap": ["CaO"], "softness": ["CaO"]}
    notes = "\n".join(properties.notes())
    assert "'band_gap' not given for: CaO" in notes
    assert "'softness' has no unit" in notes
    # The same file still reads as formulas and site properties.
    assert read_host_file(properties.source)["CaO"] == {"Ca": 1.0, "O": 1.0}
    assert read_site_properties(properties.source).multiplicity[("MgO", "sub_O")] == 1.0


def test_host_table_with_properties_and_categories(tmp_path):
    properties = read_host_properties(_write(tmp_path, PROPERTIES_FILE))
    compositions = host_compositions(["MgO", "CaO", "Cu", "ZnS"])
    table = host_descriptor_table(compositions, properties)
    assert table.loc["CaO", "host_lattice_constant"] == pytest.approx(4.8)
    assert np.isnan(table.loc["CaO", "host_band_gap"])
    assert table.loc["Cu", "host_structure=fcc"] == 1.0
    assert table.loc["Cu", "host_structure=rocksalt"] == 0.0
    assert table.loc["MgO", "host_structure=rocksalt"] == 1.0
    # ZnS is not in the host file: its property columns stay missing, its elemental ones do not.
    assert table.loc["ZnS"].filter(like="host_structure").isna().all()
    assert np.isfinite(table.loc["ZnS", "host_mean_covalent_radius"])
    by_name = {record.name: record for record in host_descriptors(properties)}
    assert by_name["host_lattice_constant"].unit == "angstrom"
    assert "unitless" in by_name["host_softness"].description
    assert list(table.columns) == list(by_name)


@pytest.mark.parametrize(
    ("text", "line", "message"),
    [
        ("host,formula,band_gap [eV]\nMgO,MgO,7.8\nMgO,MgO,6.1\n", 3, "but '7.8' on line 2"),
        ("host,formula,structure\nMgO,MgO,rocksalt\nMgO,MgO,fcc\n", 3, "but 'rocksalt' on line 2"),
        ("host,formula,band_gap [eV]\nMgO,MgO,wide\n", 2, "not a number"),
        ("host,formula,band_gap\nMgO,MgO,7.8\nCaO,CaO,wide\n", 3, "also holds numbers"),
        ("host,formula,structure\nMgO,MgO,Rocksalt\nCaO,CaO,rocksalt\n", 3, "only in letter case"),
        ("host,formula,band_gap [eV]\n,MgO,7.8\n", 2, "without its host"),
        ("host,formula,band_gap [eV],band gap [meV]\nMgO,MgO,7.8,1\n", 1, "named twice"),
        ("formula,band_gap [eV]\nMgO,7.8\n", 1, "no column 'host'"),
    ],
)
def test_read_host_properties_refuses_with_file_and_line(tmp_path, text, line, message):
    path = _write(tmp_path, text)
    with pytest.raises(TableError, match=message) as caught:
        read_host_properties(path)
    assert caught.value.path == str(path)
    assert caught.value.line == line
    assert "\n" not in str(caught.value)


def test_read_host_properties_without_property_columns(tmp_path):
    properties = read_host_properties(_write(tmp_path, "host,formula\ndiamond,C\n"))
    assert properties.names == []
    assert list(properties.values.index) == ["diamond"]
    table = host_descriptor_table(host_compositions(["diamond"], properties.source), properties)
    assert list(table.columns) == [record.name for record in host_descriptors()]


def test_property_colliding_with_a_descriptor_is_refused(tmp_path):
    properties = read_host_properties(_write(tmp_path, "host,formula,mean_covalent_radius [pm]\nMgO,MgO,80\n"))
    with pytest.raises(DopantgapError, match="made twice"):
        host_descriptor_table({"MgO": {"Mg": 1.0, "O": 1.0}}, properties)


def test_host_table_index_and_dtype():
    table = host_descriptor_table(host_compositions(["GaN", "ZnS"]))
    assert list(table.index) == ["GaN", "ZnS"]
    assert table.index.name == "host"
    assert (table.dtypes == np.float64).all()
    assert isinstance(table, pd.DataFrame)


def test_pair_encoder_compares_the_impurity_with_the_host_atoms_at_its_site():
    # Hand values from mendeleev package data (Mentel, mendeleev 2014-), Pauling scale:
    # Li 0.98, Mg 1.31, Ca 1.00, O 3.44. A site naming Mg compares with Mg alone; an
    # interstitial site with the host's atoms by atom fraction, (1.31 + 3.44) / 2 = 2.375.
    from dopantgap.features import PairEncoder

    for symbol, value in (("Li", 0.98), ("Mg", 1.31), ("Ca", 1.00), ("O", 3.44)):
        assert mendeleev.element(symbol).en_pauling == pytest.approx(value)
    cells = pd.DataFrame({
        "element": ["Li", "Li", "Na", "K"],
        "host": ["MgO", "MgO", "CaO", "CaO"],
        "site": ["sub_Mg", "int_oct", "sub_Ca", "int_oct"],
    })
    compositions = host_compositions(["MgO", "CaO"])
    kinds = {("MgO", "sub_Mg"): "cation", ("CaO", "sub_Ca"): "cation"}
    encoder = PairEncoder(compositions, site_kinds=kinds).fit(cells)
    matrix = encoder.transform(cells)
    names = encoder.feature_names_
    physical = len(encoder.mean_)
    values = matrix[:, :physical] * encoder.scale_ + encoder.mean_
    host_en = values[:, names.index("host_atoms_electronegativity_pauling")]
    np.testing.assert_allclose(host_en, [1.31, 2.375, 1.00, (1.00 + 3.44) / 2])
    np.testing.assert_allclose(values[:2, names.index("impurity_electronegativity_pauling")], [0.98, 0.98])
    # site kinds from the host file tie sub_Mg to sub_Ca; int_oct is its own kind
    assert names[physical:] == ["kind[cation]", "kind[int_oct]"]
    np.testing.assert_array_equal(matrix[:, physical:], [[1, 0], [0, 1], [1, 0], [0, 1]])
    # the inputs are standardised over the training cells
    np.testing.assert_allclose(matrix[:, :physical].mean(axis=0), 0.0, atol=1e-12)
    # a host without a formula is refused in one line
    with pytest.raises(DopantgapError, match="no formula"):
        encoder.transform(cells.assign(host="SrO"))


def test_pair_encoder_reads_the_host_files_properties_standardised(tmp_path):
    # Rock-salt lattice constants, values from memory (MgO 4.21, CaO 4.81, SrO 5.16
    # angstrom): only the standardising arithmetic is checked, against numpy by hand.
    from dopantgap.features import PairEncoder

    path = tmp_path / "hosts.csv"
    path.write_text(
        "host,formula,lattice_constant [angstrom],anion,band\n"
        "MgO,MgO,4.21,oxide,wide\nCaO,CaO,4.81,oxide,wide\nSrO,SrO,5.16,oxide,wide\n"
        "BaO,BaO,,oxide,wide\n"
    )
    compositions = host_compositions(["MgO", "CaO", "SrO", "BaO"])
    values = host_descriptor_table(compositions, read_host_properties(path))
    properties = values[host_property_columns(values)]
    assert host_property_columns(values) == ["host_lattice_constant", "host_anion=oxide", "host_band=wide"]
    cells = pd.DataFrame({"element": ["Li", "Na", "K", "Li"], "host": ["MgO", "CaO", "CaO", "SrO"],
                          "site": ["int_oct"] * 4})
    encoder = PairEncoder(compositions, host_properties=properties).fit(cells)
    # the one-hots are constant over these hosts: they carry nothing and are left out
    assert encoder.property_names_ == ["host_lattice_constant"]
    column = encoder.feature_names_.index("host_lattice_constant")
    given = np.array([4.21, 4.81, 4.81, 5.16])
    np.testing.assert_allclose(encoder.transform(cells)[:, column], (given - given.mean()) / given.std())
    # a host the file gives no lattice constant for is refused in one line, naming it
    with pytest.raises(DopantgapError, match="BaO lack host_lattice_constant"):
        encoder.transform(cells.assign(host="BaO"))
    # a property some training host lacks is not used at all
    encoder = PairEncoder(compositions, host_properties=properties).fit(cells.assign(host=["MgO", "BaO", "CaO", "SrO"]))
    assert encoder.property_names_ == []
    assert not any(name.startswith("host_lattice") for name in encoder.feature_names_)
