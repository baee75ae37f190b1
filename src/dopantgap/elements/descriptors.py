"""Elemental descriptors: every number dopantgap knows about each chemical element.

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

A model keeps the table it was fitted with (``Surrogate.descriptor_values_``, stored
in its model folder as ``descriptors.csv``): :func:`descriptor_table` takes its rows
from such a table when one is passed as ``values``, so a model predicts with the
numbers it learned from whatever mendeleev is installed later.
"""

import functools
import importlib.util
import re
import sqlite3
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS, normalise_symbol

__all__ = [
    "BLOCK_INDEX",
    "DESCRIPTORS",
    "DESCRIPTOR_NAMES",
    "Descriptor",
    "check_descriptor_values",
    "descriptor_table",
    "imputed_mask",
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
#: Periodic-table block -> the ``block_index`` descriptor.
BLOCK_INDEX = {"s": 0, "p": 1, "d": 2, "f": 3}
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
    source["block_index"] = elements["block"].map(BLOCK_INDEX).to_numpy(dtype=float)
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


def descriptor_table(symbols=None, values=None):
    """Elemental descriptors, one row per element, without missing values.

    Parameters
    ----------
    symbols : sequence of str, optional
        Element symbols in any letter case; all 118 elements in order if None.
    values : DataFrame, optional
        A full table to take the rows from (``descriptor_table()`` as some earlier
        installation gave it, e.g. a model's ``descriptor_values_``); None: the
        installed mendeleev's numbers.

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
    table = _full_tables()[0] if values is None else values
    return table.loc[_canonical_symbols(symbols)].copy()


def check_descriptor_values(values, where):
    """A full descriptor table from elsewhere, checked for shape and numbers.

    Parameters
    ----------
    values : DataFrame
        Should be as ``descriptor_table()`` returns it: the 118 element symbols in
        order as index, at least :data:`DESCRIPTOR_NAMES` as columns, finite floats.
    where : str
        Where the table came from (a file name), for the message.

    Returns
    -------
    DataFrame
        Index and columns as ``descriptor_table()``'s, dtype float64.

    Raises
    ------
    DopantgapError
        Naming ``where`` and the first problem found.
    """
    if not isinstance(values, pd.DataFrame):
        raise DopantgapError(f"{where}: not a table of element descriptors")
    if [str(symbol) for symbol in values.index] != list(SYMBOLS):
        raise DopantgapError(f"{where}: does not list the 118 elements in order, one row each")
    missing = [name for name in DESCRIPTOR_NAMES if name not in values.columns]
    if missing:
        raise DopantgapError(f"{where}: lacks the descriptor column(s) {', '.join(missing)}")
    try:
        numbers = values[list(DESCRIPTOR_NAMES)].to_numpy(dtype=float)
    except (TypeError, ValueError):
        raise DopantgapError(f"{where}: holds a value that is not a number") from None
    if not np.isfinite(numbers).all():
        raise DopantgapError(f"{where}: holds a missing or infinite value")
    return pd.DataFrame(
        numbers, index=pd.Index(SYMBOLS, name="element"), columns=list(DESCRIPTOR_NAMES)
    )


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
