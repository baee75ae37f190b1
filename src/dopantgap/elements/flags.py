"""Safety flags of elements: radioactive (mendeleev's data) and toxic (a listed reason)."""

import numpy as np
import pandas as pd

from dopantgap.elements.descriptors import _canonical_symbols, _full_tables
from dopantgap.symbols import atomic_number

__all__ = ["TOXIC_ELEMENTS", "element_flags"]


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
