"""Replay finished rounds of calculations: would the picker have found the answers sooner than chance?

On a table the user has already completed, part of it is hidden (``hiding``), a surrogate
learns the rest, and calculations are "run" round by round by revealing hidden values,
once with the picker's cells and with random cells for several seeds (``loop``); the
learning curves, the floor and the savings (``scoring``) say how fast each strategy
brings the hidden cells within reach, in words and files (``text``).
"""

from dopantgap.replay.hiding import hide_cells
from dopantgap.replay.loop import (
    CURVE_COLUMNS,
    RELEARN,
    ReplayResult,
    random_picks,
    replay,
)
from dopantgap.replay.scoring import (
    FLOOR_GROUPS,
    RANDOM,
    SUMMARY_COLUMNS,
    chance_shares,
    oracle_floor,
    savings,
)
from dopantgap.replay.text import replay_text, write_replay

__all__ = [
    "FLOOR_GROUPS",
    "RANDOM",
    "RELEARN",
    "CURVE_COLUMNS",
    "SUMMARY_COLUMNS",
    "ReplayResult",
    "chance_shares",
    "hide_cells",
    "oracle_floor",
    "random_picks",
    "replay",
    "replay_text",
    "savings",
    "write_replay",
]
