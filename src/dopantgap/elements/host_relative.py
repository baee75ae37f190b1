"""Host-relative descriptors: which host atoms an impurity at a site is compared with, and
the impurity-minus-reference terms built from the elemental descriptors.
"""

import re
from numbers import Real

import numpy as np
import pandas as pd

from dopantgap.elements.descriptors import Descriptor, _canonical_symbols, _full_tables
from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS

__all__ = [
    "HOST_RELATIVE_DESCRIPTORS",
    "HOST_RELATIVE_NAMES",
    "host_relative_table",
    "named_atoms",
    "reference_atoms",
]


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
    named = named_atoms(site, composition)
    if named:
        return {symbol: 1.0 / len(named) for symbol in named}
    total = float(sum(composition.values()))
    return {symbol: float(count) / total for symbol, count in composition.items()}


def named_atoms(site, composition):
    """Host atoms a site label names, in order (empty for ``int_oct`` or no site).

    The splitting and letter-case rules are :func:`reference_atoms`'s.

    Examples
    --------
    >>> named_atoms("sub_Zn", {"Zn": 1.0, "S": 1.0}), named_atoms("int_tet", {"Zn": 1.0, "S": 1.0})
    (['Zn'], [])
    """
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
    return named


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


def host_relative_table(elements, hosts, sites, compositions, values=None):
    """Impurity-minus-reference descriptors, one row per (element, host, site) cell.

    Parameters
    ----------
    elements, hosts, sites : sequences of equal length
        Impurity element symbol, host label and site label of each cell.
        A site may be None or NaN (no site: the host's atom fractions).
    compositions : dict
        Host label -> composition, e.g. from :func:`dopantgap.hosts.host_compositions`.
    values : DataFrame, optional
        Full descriptor table to compute from (see ``descriptor_table``'s
        ``values``); None: the installed mendeleev's numbers.

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
    table = _full_tables()[0] if values is None else values
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
