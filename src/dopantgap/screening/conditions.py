"""Screening conditions in plain terms: a window on a quantity, the lowest site, a site gap.

Each condition is read from the text a researcher types (``E_bind:-inf:-0.3``,
``sub_Zn``, ``sub_Zn:int_tet_Zn:0.5``), resolved against one host's columns into the
cells it reads, and evaluated on joint draws of those cells.
"""

import math
from dataclasses import dataclass

import numpy as np

from dopantgap.errors import DopantgapError

__all__ = [
    "LowestSite",
    "SiteGap",
    "Window",
    "parse_lowest_site",
    "parse_site_gap",
    "parse_window_condition",
]

_QUANTITY_MARK = "@"


def _split_quantity(token):
    """``"E_sol@sub_Zn"`` -> ("E_sol", "sub_Zn"); ``"sub_Zn"`` -> (None, "sub_Zn")."""
    token = token.strip()
    if _QUANTITY_MARK in token:
        quantity, site = token.split(_QUANTITY_MARK, 1)
        return quantity.strip() or None, site.strip()
    return None, token


def _bound(text, option, example):
    word = text.strip().lower()
    if word in ("-inf", "-infinity"):
        return -math.inf
    if word in ("inf", "+inf", "infinity", "+infinity"):
        return math.inf
    try:
        return float(word)
    except ValueError:
        raise DopantgapError(f"{option}: {text.strip()!r} is not a number of eV or -inf/inf; {example}.") from None


@dataclass(frozen=True)
class Window:
    """The value of ``quantity`` (at ``site``, or its only site in the host) lies in [low, high] eV."""

    quantity: str
    low: float
    high: float
    site: str | None = None

    @property
    def label(self):
        where = f"{self.quantity}@{self.site}" if self.site else self.quantity
        if self.low == -math.inf:
            return f"{where} <= {self.high:g}"
        if self.high == math.inf:
            return f"{where} >= {self.low:g}"
        return f"{where} in [{self.low:g}, {self.high:g}]"


@dataclass(frozen=True)
class LowestSite:
    """``site`` is the lowest in energy among the sites of ``quantity`` in the host."""

    site: str
    quantity: str | None = None

    @property
    def label(self):
        return f"{self.site} lowest" + (f" in {self.quantity}" if self.quantity else "")


@dataclass(frozen=True)
class SiteGap:
    """``first`` lies at least ``gap`` eV below ``second`` (same quantity and host)."""

    first: str
    second: str
    gap: float
    quantity: str | None = None

    @property
    def label(self):
        return f"{self.first} below {self.second} by >= {self.gap:g} eV"


def parse_window_condition(text, option="--window"):
    """A window condition from ``QUANTITY[@SITE]:LOW:HIGH`` (eV; -inf or inf for an open side).

    Raises
    ------
    DopantgapError
        For another layout, a bound that is not a number, both bounds infinite, or LOW >= HIGH.
    """
    example = f"e.g. {option} E_bind:-inf:-0.3 or {option} E_sol@sub_Zn:-1:0.5"
    parts = str(text).split(":")
    if len(parts) != 3 or not parts[0].strip():
        raise DopantgapError(f"{option}: {str(text)!r} is not QUANTITY[@SITE]:LOW:HIGH; {example}.")
    quantity, site = _split_quantity(parts[0])
    if quantity is None:
        quantity, site = site, None
    low, high = _bound(parts[1], option, example), _bound(parts[2], option, example)
    if math.isinf(low) and math.isinf(high):
        raise DopantgapError(f"{option}: at least one bound must be a number; {example}.")
    if not low < high:
        raise DopantgapError(f"{option}: LOW must be below HIGH, got {parts[1].strip()} and {parts[2].strip()}; {example}.")
    return Window(quantity=quantity, low=low, high=high, site=site)


def parse_lowest_site(text, option="--lowest-site"):
    """A lowest-site condition from ``[QUANTITY@]SITE``."""
    quantity, site = _split_quantity(str(text))
    if not site or ":" in site:
        raise DopantgapError(f"{option}: {str(text)!r} is not [QUANTITY@]SITE; e.g. {option} sub_Zn.")
    return LowestSite(site=site, quantity=quantity)


def parse_site_gap(text, option="--site-gap"):
    """A site-gap condition from ``[QUANTITY@]FIRST:SECOND:GAP`` (GAP in eV, >= 0)."""
    example = f"e.g. {option} sub_Zn:int_tet_Zn:0.5 (sub_Zn at least 0.5 eV below int_tet_Zn)"
    parts = str(text).split(":")
    if len(parts) != 3 or not parts[0].strip() or not parts[1].strip():
        raise DopantgapError(f"{option}: {str(text)!r} is not FIRST:SECOND:GAP; {example}.")
    quantity, first = _split_quantity(parts[0])
    second = parts[1].strip()
    try:
        gap = float(parts[2])
    except ValueError:
        gap = math.nan
    if not math.isfinite(gap) or gap < 0:
        raise DopantgapError(f"{option}: GAP must be a number of eV >= 0, got {parts[2].strip()!r}; {example}.")
    if first == second:
        raise DopantgapError(f"{option}: FIRST and SECOND are the same site ({first}); {example}.")
    return SiteGap(first=first, second=second, gap=gap, quantity=quantity)


# ------------------------------------------------------------ resolving in a host
class ResolvedCondition:
    """A condition tied to one host: the (quantity, site) cells it reads and its test.

    ``holds(draws, index)`` takes draws of shape (..., n_cells) over a cell vector whose
    position of each (quantity, site) is ``index[(quantity, site)]`` and returns a
    boolean array of shape (...).
    """

    def __init__(self, condition, cells, test):
        self.condition = condition
        self.cells = cells
        self._test = test

    @property
    def label(self):
        return self.condition.label

    def holds(self, draws, index):
        return self._test(draws, index)


def _site_quantity(condition, host, sites_by_quantity, site_names):
    """The quantity whose sites a site condition compares in ``host``."""
    if condition.quantity is not None:
        if condition.quantity not in sites_by_quantity:
            return None, f"has no {condition.quantity!r} cell"
        return condition.quantity, None
    holding = [q for q, sites in sites_by_quantity.items() if len(sites) >= 2 and all(s in sites for s in site_names)]
    if len(holding) == 1:
        return holding[0], None
    if not holding:
        return None, f"has no quantity with the site(s) {', '.join(site_names)} among two or more sites"
    raise DopantgapError(
        f"{condition.label}: in {host}, {', '.join(holding)} all have these sites; name one, "
        f"e.g. {holding[0]}@{site_names[0]}."
    )


def resolve(condition, host, sites_by_quantity):
    """Tie ``condition`` to ``host``, given its sites per quantity.

    Returns
    -------
    (ResolvedCondition or None, str or None)
        The resolved condition, or None and why the host lacks what it reads.

    Raises
    ------
    DopantgapError
        When the condition is ambiguous in this host (a quantity with several sites
        and no site named, or several quantities sharing the sites).
    """
    if isinstance(condition, Window):
        sites = sites_by_quantity.get(condition.quantity)
        if sites is None:
            return None, f"has no {condition.quantity!r} cell"
        site = condition.site
        if site is None:
            if len(sites) > 1:
                raise DopantgapError(
                    f"window on {condition.quantity}: it has {len(sites)} sites in {host} "
                    f"({', '.join(sites)}); name one, e.g. {condition.quantity}@{sites[0]}:LOW:HIGH."
                )
            site = sites[0]
        elif site not in sites:
            return None, f"has no {condition.quantity} cell at site {site!r}"
        key = (condition.quantity, site)
        low, high = condition.low, condition.high
        return ResolvedCondition(
            condition, [key], lambda draws, index: (draws[..., index[key]] >= low) & (draws[..., index[key]] <= high)
        ), None
    if isinstance(condition, LowestSite):
        quantity, why = _site_quantity(condition, host, sites_by_quantity, [condition.site])
        if quantity is None:
            return None, why
        sites = sites_by_quantity[quantity]
        if condition.site not in sites:
            return None, f"has no {quantity} cell at site {condition.site!r}"
        keys = [(quantity, site) for site in sites]
        own = (quantity, condition.site)
        others = [key for key in keys if key != own]

        def lowest(draws, index):
            rest = np.min(np.stack([draws[..., index[key]] for key in others], axis=-1), axis=-1)
            return draws[..., index[own]] <= rest

        return ResolvedCondition(condition, keys, lowest), None
    if isinstance(condition, SiteGap):
        quantity, why = _site_quantity(condition, host, sites_by_quantity, [condition.first, condition.second])
        if quantity is None:
            return None, why
        sites = sites_by_quantity[quantity]
        for site in (condition.first, condition.second):
            if site not in sites:
                return None, f"has no {quantity} cell at site {site!r}"
        first, second, gap = (quantity, condition.first), (quantity, condition.second), condition.gap
        return ResolvedCondition(
            condition, [first, second], lambda draws, index: draws[..., index[first]] + gap <= draws[..., index[second]]
        ), None
    raise DopantgapError(f"{condition!r} is not a screening condition (Window, LowestSite or SiteGap).")
