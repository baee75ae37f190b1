"""Screening: which elements meet a researcher's conditions, with what probability.

* :mod:`~dopantgap.screening.conditions`: windows, lowest sites and site gaps, parsed
  from plain text and resolved per host;
* :mod:`~dopantgap.screening.screen`: probabilities from joint draws, verdicts,
  cautions and the thermodynamics at a temperature;
* :mod:`~dopantgap.screening.deciding`: the calculation that would settle an
  undecided verdict most.
"""

from dopantgap.screening.conditions import (
    LowestSite,
    SiteGap,
    Window,
    parse_lowest_site,
    parse_site_gap,
    parse_window_condition,
)
from dopantgap.screening.screen import BINDING_SIGNS, VERDICTS, screen

__all__ = [
    "BINDING_SIGNS",
    "VERDICTS",
    "LowestSite",
    "SiteGap",
    "Window",
    "parse_lowest_site",
    "parse_site_gap",
    "parse_window_condition",
    "screen",
]
