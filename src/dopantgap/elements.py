"""Elemental descriptors, element flags and host-relative descriptors.

Every model input of dopantgap starts from numbers that describe the chemical
elements. They are read from the SQLite file that the ``mendeleev`` package
ships (``mendeleev/elements.db``), opened read-only with :mod:`sqlite3`;
mendeleev's own query functions are not used (they break with pandas 3 and
SQLAlchemy 2.1).

Descriptors
-----------
:data:`DESCRIPTORS` lists every column of :func:`descriptor_table` in a fixed
order, each with unit, source, one-line description and the rule used when
the source has no value for an element.

Valence counts come from the ground-state configuration stored in mendeleev
(noble-gas core expanded). With ``n`` the period of the element (the
outermost shell), ``valence_s`` and ``valence_p`` count the electrons in the
``ns`` and ``np`` subshells, ``valence_d`` those in ``(n-1)d`` and
``valence_f`` those in ``(n-2)f``. Filled inner shells therefore count too
(Ga has ``valence_d = 10``, Hf has ``valence_f = 14``).

``valence_electrons`` is the group-style count used in host-relative terms:

* s and p block: ``valence_s + valence_p`` (N 5, O 6, Ga 3);
* d block, groups 3 to 10: ``valence_s + valence_d`` (Fe 8, Pd 10), which is
  the group number;
* d block, groups 11 and 12: ``valence_s`` only (Cu 1, Zn 2), because their
  full d10 shell does not take part in bonding in the usual oxidation states;
  this keeps Ga on a Zn site a one-electron donor, as semiconductor doping
  language has it (common practice, no source);
* f block: ``valence_s + valence_d``, but at least 3, the usual trivalent
  state of the lanthanides (Ce 3, Eu 3, Th 4; common practice, no source).

Imputation
----------
:func:`descriptor_table` never contains NaN. Where the source has no value,
one of the following documented rules fills it, and :func:`imputed_mask`
marks the cell True (it marks every value that is not taken verbatim from the
source):

* Radii, electronegativities, energies, Miedema parameters and the Pettifor
  number use the *neighbour rule*, applied in five steps, each step seeing the
  values filled by the steps before it:

  1. linear interpolation in atomic number between the nearest known
     elements of the same family that bracket the element (the family is the
     group for s, p and d elements, and the position in the 4f/5f series for
     f elements, so Th pairs with Ce and Lr with Lu);
  2. the same within the period;
  3. within the family, interpolation if bracketed, else the value of the
     nearest known member in atomic number (the lighter on a tie);
  4. the same within the period;
  5. the median of all values the source does have.

  Neighbours in a group or a row share valence structure, which is why a
  materials scientist would accept such an estimate as a placeholder; the
  mask tells a model which values are estimates.
* ``electron_affinity``: missing or negative values become 0 eV. A negative
  or absent electron affinity means that the singly charged anion is not
  bound (noble gases, group 2 and 12 metals, N, Mn) or was never measured;
  taking 0 eV says "no energy is gained by adding an electron" and invents no
  anion that may not exist.
* ``group``: the f-block elements Ce-Lu and Th-Lr, which mendeleev leaves
  without a group, get group 3, the column of La and Ac in the 18-column
  table (common practice, no source).

Hosts
-----
:func:`parse_formula` turns host labels such as ``"GaN"`` or ``"Al2O3"`` into
compositions, :func:`read_host_file` reads a CSV that maps other labels (such
as ``diamond``) to formulas, :func:`reference_atoms` decides which host atoms
an impurity at a given site is compared with, and :func:`host_relative_table`
turns elemental descriptors into impurity-minus-reference terms.
"""

import csv
import functools
import importlib.util
import re
import sqlite3
from dataclasses import dataclass
from numbers import Real
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.errors import DopantgapError, TableError
from dopantgap.symbols import SYMBOLS, atomic_number, normalise_symbol

__all__ = [
    "DESCRIPTORS",
    "DESCRIPTOR_NAMES",
    "HOST_RELATIVE_DESCRIPTORS",
    "HOST_RELATIVE_NAMES",
    "TOXIC_ELEMENTS",
    "Descriptor",
    "descriptor_table",
    "element_flags",
    "host_compositions",
    "host_relative_table",
    "imputed_mask",
    "parse_formula",
    "read_host_file",
    "reference_atoms",
]


@dataclass(frozen=True)
class Descriptor:
    """One column of :func:`descriptor_table` or :func:`host_relative_table`.

    Attributes
    ----------
    name : str
        Column name, e.g. ``"covalent_radius"``.
    unit : str
        Unit of the numbers (``"pm"``, ``"eV"``, ``"bohr^3"``); ``""`` for
        dimensionless counts, ranks and ratios.
    source : str
        Where the numbers come from.
    description : str
        One human-readable line.
    imputation : str
        The rule used when the value is missing for an element.
    """

    name: str
    unit: str
    source: str
    description: str
    imputation: str


_DATABASE = "mendeleev elements.db"
_NEIGHBOUR_RULE = (
    "neighbour rule: (1) linear interpolation in atomic number between the nearest known "
    "elements of the same group (f block: same position in the 4f/5f series) that bracket "
    "the element; (2) the same within the period; (3) within the group, interpolation if "
    "bracketed, else the nearest known member (lighter on a tie); (4) the same within the "
    "period; (5) median of the source values"
)
_NEVER_MISSING = "never missing in the source (no rule needed)"
_FROM_CONFIGURATION = (
    "computed from the ground-state configuration, which the source has for every element"
)

DESCRIPTORS = (
    Descriptor(
        "atomic_number", "", f"{_DATABASE}: elements.atomic_number",
        "number of protons", _NEVER_MISSING,
    ),
    Descriptor(
        "period", "", f"{_DATABASE}: elements.period",
        "row of the periodic table (principal quantum number of the outermost shell)",
        _NEVER_MISSING,
    ),
    Descriptor(
        "group", "", f"{_DATABASE}: elements.group_id",
        "column of the 18-column periodic table",
        "f-block elements Ce-Lu and Th-Lr (no group in the source) get group 3, the column "
        "of La and Ac (common practice, no source)",
    ),
    Descriptor(
        "block_index", "", f"{_DATABASE}: elements.block",
        "block of the periodic table as a number: s=0, p=1, d=2, f=3", _NEVER_MISSING,
    ),
    Descriptor(
        "valence_s", "", f"{_DATABASE}: elements.electronic_configuration",
        "electrons in the ns subshell, n = period", _FROM_CONFIGURATION,
    ),
    Descriptor(
        "valence_p", "", f"{_DATABASE}: elements.electronic_configuration",
        "electrons in the np subshell, n = period", _FROM_CONFIGURATION,
    ),
    Descriptor(
        "valence_d", "", f"{_DATABASE}: elements.electronic_configuration",
        "electrons in the (n-1)d subshell, n = period (filled shells count)",
        _FROM_CONFIGURATION,
    ),
    Descriptor(
        "valence_f", "", f"{_DATABASE}: elements.electronic_configuration",
        "electrons in the (n-2)f subshell, n = period (filled shells count)",
        _FROM_CONFIGURATION,
    ),
    Descriptor(
        "valence_electrons", "", f"{_DATABASE}: elements.electronic_configuration",
        "group-style valence: s+p (s, p block); s+d (groups 3-10); s (groups 11-12); "
        "s+d but at least 3 (f block)",
        _FROM_CONFIGURATION,
    ),
    Descriptor(
        "covalent_radius", "pm",
        f"{_DATABASE}: elements.covalent_radius_cordero (Cordero et al., Dalton Trans. 2008, "
        "'Covalent radii revisited')",
        "single-bond covalent radius", _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "metallic_radius", "pm",
        f"{_DATABASE}: elements.metallic_radius (Kaye & Laby tables)",
        "single-bond metallic radius", _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "electronegativity_pauling", "",
        f"{_DATABASE}: elements.en_pauling (CRC Handbook of Chemistry and Physics, "
        "Haynes 2014)",
        "Pauling electronegativity", _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "electronegativity_allen", "eV",
        f"{_DATABASE}: elements.en_allen (Mann, Meek & Allen, J. Am. Chem. Soc. 2000)",
        "Allen electronegativity: mean energy of the valence electrons of the free atom",
        _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "ionisation_energy_1", "eV",
        f"{_DATABASE}: ionizationenergies.ionization_energy, ion_charge 0 (NIST Atomic "
        "Spectra Database)",
        "first ionisation energy of the neutral atom", _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "ionisation_energy_2", "eV",
        f"{_DATABASE}: ionizationenergies.ionization_energy, ion_charge 1 (NIST Atomic "
        "Spectra Database)",
        "second ionisation energy (of the singly charged cation)",
        _NEIGHBOUR_RULE + "; H has no second electron, so its value is a placeholder only",
    ),
    Descriptor(
        "electron_affinity", "eV",
        f"{_DATABASE}: elements.electron_affinity (CRC Handbook, Haynes 2014; Andersen 2004)",
        "energy released when the neutral atom binds an electron",
        "missing or negative (anion not bound or not measured) -> 0 eV",
    ),
    Descriptor(
        "polarisability", "bohr^3",
        f"{_DATABASE}: elements.dipole_polarizability (Schwerdtfeger & Nagle, "
        "table of static dipole polarizabilities, 2023 edition)",
        "static electric dipole polarisability of the free atom", _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "mendeleev_number", "",
        f"{_DATABASE}: elements.mendeleev_number (Pettifor 1984; Villars et al. 2004)",
        "position in a chemically ordered sequence of the elements", _NEVER_MISSING,
    ),
    Descriptor(
        "pettifor_number", "",
        f"{_DATABASE}: elements.pettifor_number (Pettifor, Solid State Commun. 1984)",
        "Pettifor's chemical scale", _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "atomic_weight", "Da",
        f"{_DATABASE}: elements.atomic_weight (IUPAC standard atomic weights, Meija et al. "
        "2016)",
        "standard atomic weight (mass number of the longest-lived isotope where none)",
        _NEVER_MISSING,
    ),
    Descriptor(
        "miedema_electronegativity", "V",
        f"{_DATABASE}: elements.en_miedema (de Boer et al., 'Cohesion in Metals', 1988)",
        "Miedema's electronegativity parameter phi* (defined for metals)", _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "miedema_electron_density", "d.u.",
        f"{_DATABASE}: elements.miedema_electron_density (de Boer et al., 'Cohesion in "
        "Metals', 1988)",
        "Miedema's electron density at the Wigner-Seitz cell boundary (defined for metals)",
        _NEIGHBOUR_RULE,
    ),
    Descriptor(
        "miedema_molar_volume", "cm^3/mol",
        f"{_DATABASE}: elements.miedema_molar_volume (de Boer et al., 'Cohesion in Metals', "
        "1988)",
        "molar volume used in Miedema's model (defined for metals)", _NEIGHBOUR_RULE,
    ),
)
DESCRIPTOR_NAMES = tuple(descriptor.name for descriptor in DESCRIPTORS)

# Our name -> column of the ``elements`` table, for the plainly copied descriptors.
_ELEMENT_COLUMNS = {
    "atomic_number": "atomic_number",
    "period": "period",
    "group": "group_id",
    "covalent_radius": "covalent_radius_cordero",
    "metallic_radius": "metallic_radius",
    "electronegativity_pauling": "en_pauling",
    "electronegativity_allen": "en_allen",
    "electron_affinity": "electron_affinity",
    "polarisability": "dipole_polarizability",
    "mendeleev_number": "mendeleev_number",
    "pettifor_number": "pettifor_number",
    "atomic_weight": "atomic_weight",
    "miedema_electronegativity": "en_miedema",
    "miedema_electron_density": "miedema_electron_density",
    "miedema_molar_volume": "miedema_molar_volume",
}
_IONISATION_CHARGES = {"ionisation_energy_1": 0, "ionisation_energy_2": 1}
_BLOCK_INDEX = {"s": 0, "p": 1, "d": 2, "f": 3}
_F_BLOCK_GROUP = 3

# Electrons in the noble-gas cores written in brackets in the configurations.
_CORE_SUBSHELLS = {"He": [(1, "s", 2)]}
_CORE_SUBSHELLS["Ne"] = _CORE_SUBSHELLS["He"] + [(2, "s", 2), (2, "p", 6)]
_CORE_SUBSHELLS["Ar"] = _CORE_SUBSHELLS["Ne"] + [(3, "s", 2), (3, "p", 6)]
_CORE_SUBSHELLS["Kr"] = _CORE_SUBSHELLS["Ar"] + [(3, "d", 10), (4, "s", 2), (4, "p", 6)]
_CORE_SUBSHELLS["Xe"] = _CORE_SUBSHELLS["Kr"] + [(4, "d", 10), (5, "s", 2), (5, "p", 6)]
_CORE_SUBSHELLS["Rn"] = _CORE_SUBSHELLS["Xe"] + [
    (4, "f", 14), (5, "d", 10), (6, "s", 2), (6, "p", 6)
]
_SUBSHELL_PATTERN = re.compile(r"^(\d+)([spdfg])(\d*)$")


def _database_path():
    """Path of mendeleev's bundled SQLite file."""
    spec = importlib.util.find_spec("mendeleev")
    if spec is None or spec.origin is None:
        raise DopantgapError(
            "the mendeleev package is not installed; install it (pip install mendeleev), "
            "its bundled element data are needed"
        )
    path = Path(spec.origin).parent / "elements.db"
    if not path.is_file():
        raise DopantgapError(
            f"mendeleev's element data file {path} is missing; reinstall mendeleev"
        )
    return path


def _read_database():
    """Rows of the ``elements`` table and the first two ionisation energies."""
    path = _database_path()
    columns = sorted(set(_ELEMENT_COLUMNS.values()) | {"symbol", "block",
                                                       "electronic_configuration",
                                                       "is_radioactive"})
    connection = sqlite3.connect(f"{path.as_uri()}?mode=ro", uri=True)
    try:
        elements = pd.read_sql_query(
            f"SELECT {', '.join(columns)} FROM elements ORDER BY atomic_number", connection
        )
        ionisation = pd.read_sql_query(
            "SELECT atomic_number, ion_charge, ionization_energy FROM ionizationenergies "
            "WHERE ion_charge IN (0, 1)",
            connection,
        )
    finally:
        connection.close()
    if list(elements["symbol"]) != list(SYMBOLS):
        raise DopantgapError(
            f"mendeleev's element data file {path} does not list the 118 elements in order; "
            "reinstall mendeleev"
        )
    return elements, ionisation


def _configuration_occupations(configuration):
    """Electrons per (n, letter) subshell of a configuration such as ``"[Ar] 3d6 4s2"``."""
    occupations = {}
    for token in configuration.split():
        if token.startswith("[") and token.endswith("]"):
            subshells = _CORE_SUBSHELLS[token[1:-1]]
        else:
            match = _SUBSHELL_PATTERN.match(token)
            if match is None:
                raise DopantgapError(
                    f"cannot read the electron configuration {configuration!r} from "
                    "mendeleev's data; reinstall mendeleev"
                )
            count = int(match.group(3)) if match.group(3) else 1
            subshells = [(int(match.group(1)), match.group(2), count)]
        for shell, letter, count in subshells:
            occupations[(shell, letter)] = occupations.get((shell, letter), 0) + count
    return occupations


def _valence_counts(configuration, period, block, group):
    """valence_s, valence_p, valence_d, valence_f and valence_electrons of one element."""
    occupations = _configuration_occupations(configuration)
    s_count = occupations.get((period, "s"), 0)
    p_count = occupations.get((period, "p"), 0)
    d_count = occupations.get((period - 1, "d"), 0)
    f_count = occupations.get((period - 2, "f"), 0)
    if block in ("s", "p"):
        valence = s_count + p_count
    elif block == "d":
        # A full d10 shell of groups 11-12 stays out of bonding (Cu+, Zn2+).
        valence = s_count if group in (11, 12) else s_count + d_count
    else:
        valence = max(3, s_count + d_count)
    return s_count, p_count, d_count, f_count, valence


def _families(elements):
    """Family key of each element for the neighbour rule (group, or f-series position)."""
    keys = []
    for number, block, group in zip(
        elements["atomic_number"], elements["block"], elements["group_id"]
    ):
        if block == "f":
            # Position in the 4f or 5f series: Ce and Th are 1, Lu and Lr are 14.
            first = 57 if number <= 71 else 89
            keys.append(f"f{int(number) - first}")
        else:
            keys.append(f"g{int(group)}")
    return np.array(keys)


def _fill_within(values, family, numbers, allow_nearest):
    """One step of the neighbour rule; returns new values (computed from the old ones)."""
    filled = values.copy()
    for index in np.flatnonzero(np.isnan(values)):
        members = (family == family[index]) & ~np.isnan(values)
        lighter = np.flatnonzero(members & (numbers < numbers[index]))
        heavier = np.flatnonzero(members & (numbers > numbers[index]))
        if lighter.size and heavier.size:
            low, high = lighter[-1], heavier[0]
            fraction = (numbers[index] - numbers[low]) / (numbers[high] - numbers[low])
            filled[index] = values[low] + fraction * (values[high] - values[low])
        elif allow_nearest and (lighter.size or heavier.size):
            candidates = [side for side in (lighter[-1:], heavier[:1]) if side.size]
            nearest = min(
                (int(side[0]) for side in candidates),
                key=lambda other: (abs(numbers[other] - numbers[index]), numbers[other]),
            )
            filled[index] = values[nearest]
    return filled


def _neighbour_rule(source, family, period, numbers):
    """Fill NaN in ``source`` by the five documented steps."""
    values = source.copy()
    for key, allow_nearest in ((family, False), (period, False), (family, True),
                               (period, True)):
        if not np.isnan(values).any():
            break
        values = _fill_within(values, key, numbers, allow_nearest)
    known = source[~np.isnan(source)]
    values[np.isnan(values)] = np.median(known) if known.size else 0.0
    return values


@functools.lru_cache(maxsize=1)
def _full_tables():
    """Descriptor values, imputed mask and element flags for all 118 elements (cached)."""
    elements, ionisation = _read_database()
    numbers = elements["atomic_number"].to_numpy(dtype=float)
    period = elements["period"].to_numpy(dtype=int)
    family = _families(elements)

    source = {}
    for name, column in _ELEMENT_COLUMNS.items():
        source[name] = pd.to_numeric(elements[column], errors="coerce").to_numpy(dtype=float)
    for name, charge in _IONISATION_CHARGES.items():
        energies = ionisation[ionisation["ion_charge"] == charge].set_index("atomic_number")
        source[name] = (
            energies["ionization_energy"].reindex(elements["atomic_number"])
            .to_numpy(dtype=float)
        )
    source["block_index"] = elements["block"].map(_BLOCK_INDEX).to_numpy(dtype=float)
    group_for_valence = np.where(np.isnan(source["group"]), _F_BLOCK_GROUP, source["group"])
    counts = np.array([
        _valence_counts(configuration, int(row_period), block, int(group))
        for configuration, row_period, block, group in zip(
            elements["electronic_configuration"], period, elements["block"],
            group_for_valence,
        )
    ], dtype=float)
    for position, name in enumerate(
        ("valence_s", "valence_p", "valence_d", "valence_f", "valence_electrons")
    ):
        source[name] = counts[:, position]

    values = {}
    imputed = {}
    for name in DESCRIPTOR_NAMES:
        raw = source[name]
        if name == "group":
            filled = np.where(np.isnan(raw), float(_F_BLOCK_GROUP), raw)
            changed = np.isnan(raw)
        elif name == "electron_affinity":
            changed = np.isnan(raw) | (raw < 0)
            filled = np.where(changed, 0.0, raw)
        else:
            changed = np.isnan(raw)
            filled = _neighbour_rule(raw, family, period, numbers) if changed.any() else raw
        values[name] = filled.astype(float)
        imputed[name] = changed.astype(bool)

    index = pd.Index(SYMBOLS, name="element")
    table = pd.DataFrame(values, index=index, columns=list(DESCRIPTOR_NAMES), dtype=float)
    mask = pd.DataFrame(imputed, index=index, columns=list(DESCRIPTOR_NAMES), dtype=bool)
    radioactive = elements["is_radioactive"].fillna(0).astype(bool).to_numpy()
    return table, mask, radioactive


def _canonical_symbols(symbols, what="element"):
    """Canonical spelling of each symbol; DopantgapError naming the first unknown one."""
    if symbols is None:
        return list(SYMBOLS)
    if isinstance(symbols, str):
        symbols = [symbols]
    canonical = []
    for position, text in enumerate(symbols):
        symbol = normalise_symbol(text)
        if symbol is None:
            raise DopantgapError(
                f"{what} {text!r} (item {position + 1}) is not a chemical element symbol; "
                "use symbols such as 'Fe' or 'Ga'"
            )
        canonical.append(symbol)
    return canonical


def descriptor_table(symbols=None):
    """Elemental descriptors, one row per element, without missing values.

    Parameters
    ----------
    symbols : sequence of str, optional
        Element symbols in any letter case; all 118 elements in order if None.

    Returns
    -------
    pandas.DataFrame
        Index: canonical symbols in the order given; columns:
        :data:`DESCRIPTOR_NAMES`; dtype float64; no NaN (see the module
        docstring for the imputation rules). A fresh copy on every call.

    Raises
    ------
    DopantgapError
        If a symbol is not a chemical element.

    Examples
    --------
    >>> float(descriptor_table(["ga", "N"]).loc["Ga", "covalent_radius"])
    122.0
    """
    table = _full_tables()[0]
    return table.loc[_canonical_symbols(symbols)].copy()


def imputed_mask(symbols=None):
    """Where :func:`descriptor_table` holds an estimate instead of a source value.

    Parameters
    ----------
    symbols : sequence of str, optional
        Element symbols; all 118 elements if None.

    Returns
    -------
    pandas.DataFrame
        Same index and columns as ``descriptor_table(symbols)``; bool, True
        where the value was imputed or replaced by a documented rule.

    Raises
    ------
    DopantgapError
        If a symbol is not a chemical element.
    """
    mask = _full_tables()[1]
    return mask.loc[_canonical_symbols(symbols)].copy()


# Elements flagged as toxic, with the reason shown in element_flags' note.
# IARC Group 1 entries are from the IARC Monographs list of agents classified
# as carcinogenic to humans (value from memory); the others are marked.
TOXIC_ELEMENTS = {
    "As": "IARC Group 1: arsenic and inorganic arsenic compounds",
    "Be": "IARC Group 1: beryllium and beryllium compounds",
    "Cd": "IARC Group 1: cadmium and cadmium compounds",
    "Cr": "IARC Group 1: chromium(VI) compounds",
    "Ni": "IARC Group 1: nickel compounds",
    "Pb": "IARC Group 2A: inorganic lead compounds; acute poison",
    "Hg": "acute poison (common practice, no source)",
    "Tl": "acute poison (common practice, no source)",
}


def element_flags(symbols=None):
    """Safety flags of elements: radioactive, toxic and a short note.

    Parameters
    ----------
    symbols : sequence of str, optional
        Element symbols; all 118 elements if None.

    Returns
    -------
    pandas.DataFrame
        Index: canonical symbols; columns ``radioactive`` (bool: no stable
        isotope, from mendeleev's ``is_radioactive``; Bi counts as stable, as
        in mendeleev, since Bi-209 lives about 2e19 years), ``toxic`` (bool:
        listed in :data:`TOXIC_ELEMENTS`) and ``note`` (str, empty if neither).

    Raises
    ------
    DopantgapError
        If a symbol is not a chemical element.
    """
    canonical = _canonical_symbols(symbols)
    radioactive_all = _full_tables()[2]
    radioactive = [bool(radioactive_all[atomic_number(symbol) - 1]) for symbol in canonical]
    toxic = [symbol in TOXIC_ELEMENTS for symbol in canonical]
    notes = []
    for symbol, is_radioactive in zip(canonical, radioactive):
        parts = []
        if is_radioactive:
            parts.append("radioactive: no stable isotope")
        if symbol in TOXIC_ELEMENTS:
            parts.append(f"toxic: {TOXIC_ELEMENTS[symbol]}")
        notes.append("; ".join(parts))
    return pd.DataFrame(
        {
            "radioactive": np.array(radioactive, dtype=bool),
            "toxic": np.array(toxic, dtype=bool),
            "note": pd.Series(notes, dtype=object).to_numpy(),
        },
        index=pd.Index(canonical, name="element"),
    )


# ---------------------------------------------------------------------------
# Hosts

_FORMULA_TOKEN = re.compile(r"([A-Z][a-z]*)|(\()|(\))|(\d+(?:\.\d+)?|\.\d+)")


def _not_a_formula(text, reason):
    return DopantgapError(
        f"host {text!r} is not a chemical formula ({reason}); name the host by its formula "
        "(for example 'GaN', 'Al2O3', or 'C' for diamond) or map the label to a formula in "
        "a host file (CSV with columns host,formula)"
    )


def parse_formula(text):
    """Composition of a chemical formula such as ``"SnO2"`` or ``"Ca(OH)2"``.

    Parameters
    ----------
    text : str
        Formula: element symbols with their usual capitalisation, optional
        counts (integers or decimals such as ``Fe0.95O``) and parentheses
        with a count. Surrounding blanks are ignored.

    Returns
    -------
    dict of str to float
        Element -> number of atoms per formula unit, in order of first
        appearance; repeated elements are summed.

    Raises
    ------
    DopantgapError
        If ``text`` is not a formula (e.g. ``"diamond"``); the message says
        to use the formula or a host file.

    Examples
    --------
    >>> parse_formula("Al2O3")
    {'Al': 2.0, 'O': 3.0}
    """
    if not isinstance(text, str) or not text.strip():
        raise _not_a_formula(text, "it is empty")
    formula = text.strip()
    # Each stack level holds the counts of one pair of parentheses.
    stack = [{}]
    last_group = None
    position = 0
    while position < len(formula):
        match = _FORMULA_TOKEN.match(formula, position)
        if match is None:
            raise _not_a_formula(
                text, f"unexpected {formula[position]!r} at character {position + 1}"
            )
        symbol_text, opening, closing, count_text = match.groups()
        if symbol_text is not None:
            if normalise_symbol(symbol_text) != symbol_text:
                raise _not_a_formula(text, f"{symbol_text!r} is not an element symbol")
            last_group = {symbol_text: 1.0}
            _add_counts(stack[-1], last_group)
        elif opening is not None:
            stack.append({})
            last_group = None
        elif closing is not None:
            if len(stack) == 1:
                raise _not_a_formula(text, f"unmatched ')' at character {position + 1}")
            inner = stack.pop()
            if not inner:
                raise _not_a_formula(text, f"empty parentheses at character {position + 1}")
            last_group = inner
            _add_counts(stack[-1], inner)
        else:
            count = float(count_text)
            if last_group is None:
                raise _not_a_formula(
                    text, f"count {count_text!r} at character {position + 1} follows no "
                    "element or group"
                )
            if count <= 0:
                raise _not_a_formula(text, f"count {count_text!r} is not positive")
            # The group was already added once; add the remaining (count - 1) times.
            _add_counts(stack[-1], {key: value * (count - 1) for key, value in
                                    last_group.items()})
            last_group = None
        position = match.end()
    if len(stack) != 1:
        raise _not_a_formula(text, "a '(' is never closed")
    return stack[0]


def _add_counts(target, addition):
    for symbol, count in addition.items():
        target[symbol] = target.get(symbol, 0.0) + count


def read_host_file(path):
    """Read a CSV that maps host labels to formulas.

    Parameters
    ----------
    path : str or Path
        CSV file with a header row containing the columns ``host`` and
        ``formula`` (other columns are ignored), e.g. a row ``diamond,C``.
        Blank lines and lines starting with ``#`` are skipped.

    Returns
    -------
    dict of str to dict of str to float
        Host label (blanks stripped) -> composition from :func:`parse_formula`.

    Raises
    ------
    TableError
        If the file cannot be read, lacks a column, has an empty cell, a
        formula that does not parse, or a label given twice with different
        formulas; the message names the file and line.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise TableError("host file not found; check the path", path=path) from None
    except (OSError, UnicodeDecodeError) as error:
        raise TableError(
            f"cannot read the host file ({error}); save it as UTF-8 CSV", path=path
        ) from None
    lines = [
        (number, line) for number, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not lines:
        raise TableError("host file is empty; give a header 'host,formula' and rows",
                         path=path)
    rows = list(csv.reader(line for _, line in lines))
    header_line = lines[0][0]
    header = [cell.strip().lower() for cell in rows[0]]
    for needed in ("host", "formula"):
        if needed not in header:
            raise TableError(
                f"header has no column {needed!r}; the first row must be 'host,formula'",
                path=path, line=header_line,
            )
    host_column, formula_column = header.index("host"), header.index("formula")
    mapping = {}
    formulas = {}
    for (line_number, _), cells in zip(lines[1:], rows[1:]):
        if len(cells) <= max(host_column, formula_column):
            raise TableError(
                f"expected {len(header)} columns, found {len(cells)}; give 'host,formula'",
                path=path, line=line_number,
            )
        label = cells[host_column].strip()
        formula = cells[formula_column].strip()
        if not label or not formula:
            raise TableError("empty host or formula cell; fill both", path=path,
                             line=line_number)
        try:
            composition = parse_formula(formula)
        except DopantgapError as error:
            raise TableError(f"formula of host {label!r}: {error}", path=path,
                             line=line_number) from None
        if label in mapping and formulas[label] != formula:
            raise TableError(
                f"host {label!r} is given twice with different formulas "
                f"({formulas[label]!r} and {formula!r}); keep one",
                path=path, line=line_number,
            )
        mapping[label] = composition
        formulas[label] = formula
    return mapping


def host_compositions(host_labels, host_file_map=None):
    """Composition of every host label.

    Parameters
    ----------
    host_labels : iterable of str
        Host labels as they appear in the user's table.
    host_file_map : dict or str or Path, optional
        Label -> composition as returned by :func:`read_host_file`, or the
        path of such a file. Labels found there win; the others must be
        formulas.

    Returns
    -------
    dict of str to dict of str to float
        Label -> composition (fresh dicts), in order of first appearance.

    Raises
    ------
    DopantgapError
        If a label is neither in the host file nor a formula.
    """
    if isinstance(host_file_map, (str, Path)):
        host_file_map = read_host_file(host_file_map)
    mapping = {str(label).strip(): composition
               for label, composition in (host_file_map or {}).items()}
    compositions = {}
    for label in host_labels:
        if label in compositions:
            continue
        key = str(label).strip()
        if key in mapping:
            compositions[label] = dict(mapping[key])
            continue
        try:
            compositions[label] = parse_formula(key)
        except DopantgapError as error:
            if host_file_map:
                raise DopantgapError(
                    f"{error}; the host file given does not list {key!r} either"
                ) from None
            raise
    return compositions


_SITE_SEPARATORS = re.compile(r"[_\-:()@ ]+")
# Lower-case words that are also element symbols when capitalised; in a site
# label they are far more likely English ("int in channel") than In, As ...
_LOWERCASE_WORDS = frozenset({"in", "as", "at", "be", "he", "no", "am"})


def reference_atoms(site, composition):
    """Host atoms that an impurity at ``site`` is compared with, as weights.

    Rule: the site label is split at ``_ - : ( ) @`` and blanks, and trailing
    digits are removed from each piece (``Zn1`` -> ``Zn``). Pieces that are
    exactly (same letter case) a symbol of the host composition name the
    reference atoms. If none is, two-letter pieces are compared ignoring case
    (``sub_ga`` -> Ga), except the lower-case English words ``in as at be he
    no am``. One named atom gets weight 1; several named atoms (a bond centre
    ``bc_Ga_N``) share equal weights. Pieces naming elements absent from the
    host (``V`` for vacancy, the impurity itself in ``Mg_Ga``) are ignored.
    With no named atom (``int_oct``, or no site) the weights are the host
    composition's atom fractions, so an elemental host gives its one atom.

    Parameters
    ----------
    site : str or None
        Site label, e.g. ``"sub_Ga"``, ``"Zn_sub"``, ``"int_tet_S"``.
    composition : dict of str to float
        Host composition, e.g. ``{"Ga": 1.0, "N": 1.0}``.

    Returns
    -------
    dict of str to float
        Host element -> weight; the weights sum to 1.

    Raises
    ------
    DopantgapError
        If the composition is empty or has non-positive counts.

    Examples
    --------
    >>> reference_atoms("sub_Ga", {"Ga": 1.0, "N": 1.0})
    {'Ga': 1.0}
    >>> reference_atoms("int_tet", {"Zn": 1.0, "S": 1.0})
    {'Zn': 0.5, 'S': 0.5}
    """
    if not composition or any(
        isinstance(count, bool) or not isinstance(count, Real) or not count > 0
        for count in composition.values()
    ):
        raise DopantgapError(
            f"host composition {composition!r} is empty or has a non-positive count; "
            "give element counts such as {'Ga': 1, 'N': 1}"
        )
    pieces = []
    if isinstance(site, str):
        pieces = [piece.rstrip("0123456789") for piece in _SITE_SEPARATORS.split(site)]
        pieces = [piece for piece in pieces if piece]
    named = []
    for piece in pieces:
        if piece in composition and piece not in named:
            named.append(piece)
    if not named:
        by_lower = {symbol.lower(): symbol for symbol in composition if len(symbol) == 2}
        for piece in pieces:
            if len(piece) != 2 or piece in _LOWERCASE_WORDS:
                continue
            symbol = by_lower.get(piece.lower())
            if symbol is not None and symbol not in named:
                named.append(symbol)
    if named:
        return {symbol: 1.0 / len(named) for symbol in named}
    total = float(sum(composition.values()))
    return {symbol: float(count) / total for symbol, count in composition.items()}


HOST_RELATIVE_DESCRIPTORS = (
    Descriptor(
        "size_misfit", "", "derived: covalent_radius",
        "(r_impurity - r_reference) / r_reference with covalent radii; r_reference is the "
        "weighted mean over the reference atoms",
        "inherits the imputation of covalent_radius",
    ),
    Descriptor(
        "electronegativity_difference", "", "derived: electronegativity_pauling",
        "chi_impurity - chi_reference (Pauling scale)",
        "inherits the imputation of electronegativity_pauling",
    ),
    Descriptor(
        "valence_difference", "", "derived: valence_electrons",
        "valence_electrons of the impurity minus that of the reference (> 0: donor-like)",
        "none needed: valence counts are never missing",
    ),
    Descriptor(
        "ionisation_energy_difference", "eV", "derived: ionisation_energy_1",
        "first ionisation energy of the impurity minus that of the reference; how much "
        "more tightly the impurity holds its outer electron",
        "inherits the imputation of ionisation_energy_1",
    ),
    Descriptor(
        "electron_affinity_difference", "eV", "derived: electron_affinity",
        "electron affinity of the impurity minus that of the reference; how much more "
        "readily the impurity takes an extra electron",
        "inherits the imputation of electron_affinity",
    ),
)
HOST_RELATIVE_NAMES = tuple(descriptor.name for descriptor in HOST_RELATIVE_DESCRIPTORS)
_HOST_RELATIVE_SOURCES = {
    "electronegativity_difference": "electronegativity_pauling",
    "valence_difference": "valence_electrons",
    "ionisation_energy_difference": "ionisation_energy_1",
    "electron_affinity_difference": "electron_affinity",
}


def host_relative_table(elements, hosts, sites, compositions):
    """Impurity-minus-reference descriptors, one row per (element, host, site) cell.

    Parameters
    ----------
    elements, hosts, sites : sequences of equal length
        Impurity element symbol, host label and site label of each cell.
        A site may be None or NaN (no site: the host's atom fractions).
    compositions : dict
        Host label -> composition, e.g. from :func:`host_compositions`.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`HOST_RELATIVE_NAMES`, float64, one row per cell in the
        order given (index 0 .. n-1). The reference of each cell is given by
        :func:`reference_atoms`.

    Raises
    ------
    DopantgapError
        If the lengths differ, an element is unknown, a host has no
        composition, or a host contains an unknown element.
    """
    elements, hosts, sites = list(elements), list(hosts), list(sites)
    if not len(elements) == len(hosts) == len(sites):
        raise DopantgapError(
            f"elements, hosts and sites must have the same length "
            f"({len(elements)}, {len(hosts)}, {len(sites)}); give one of each per cell"
        )
    impurities = _canonical_symbols(elements, what="impurity element")
    table = _full_tables()[0]
    symbol_position = {symbol: position for position, symbol in enumerate(SYMBOLS)}
    # Reference weights as a (cells x 118) matrix, computed once per (host, site).
    weights = np.zeros((len(impurities), len(SYMBOLS)))
    cache = {}
    for row, (host, site) in enumerate(zip(hosts, sites)):
        site_key = site if isinstance(site, str) else None
        key = (host, site_key)
        if key not in cache:
            if host not in compositions:
                raise DopantgapError(
                    f"host {host!r} (cell {row + 1}) has no composition; name it by its "
                    "formula or add it to the host file"
                )
            vector = np.zeros(len(SYMBOLS))
            for symbol, weight in reference_atoms(site_key, compositions[host]).items():
                if symbol not in symbol_position:
                    raise DopantgapError(
                        f"host {host!r} contains {symbol!r}, which is not an element symbol"
                    )
                vector[symbol_position[symbol]] += weight
            cache[key] = vector
        weights[row] = cache[key]
    impurity_rows = table.loc[impurities]
    result = {}
    radius = table["covalent_radius"].to_numpy()
    reference_radius = weights @ radius
    result["size_misfit"] = (
        impurity_rows["covalent_radius"].to_numpy() - reference_radius
    ) / reference_radius
    for name, column in _HOST_RELATIVE_SOURCES.items():
        result[name] = (
            impurity_rows[column].to_numpy() - weights @ table[column].to_numpy()
        )
    return pd.DataFrame(result, columns=list(HOST_RELATIVE_NAMES), dtype=float)
