"""Chemical element symbols: the one list every module checks against."""

__all__ = ["SYMBOLS", "atomic_number", "normalise_symbol"]

# IUPAC Periodic Table of the Elements (2022 edition): symbols of elements 1-118 in order.
SYMBOLS = (
    "H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn "
    "Ga Ge As Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce "
    "Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn "
    "Fr Ra Ac Th Pa U Np Pu Am Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl "
    "Mc Lv Ts Og"
).split()

_BY_LOWER = {symbol.lower(): symbol for symbol in SYMBOLS}


def normalise_symbol(text):
    """Return the canonical spelling of an element symbol, or None if it is not one.

    Parameters
    ----------
    text : str
        A symbol as a user typed it: surrounding blanks and any letter case are accepted.

    Returns
    -------
    str or None
        ``"Fe"`` for ``" fe "``, ``"FE"`` or ``"Fe"``; None for ``"Xx"`` or ``""``.

    Examples
    --------
    >>> normalise_symbol(" fe ")
    'Fe'
    >>> normalise_symbol("Q") is None
    True
    """
    if not isinstance(text, str):
        return None
    return _BY_LOWER.get(text.strip().lower())


def atomic_number(symbol):
    """Atomic number of a canonical symbol (``"Fe"`` -> 26)."""
    return SYMBOLS.index(symbol) + 1
