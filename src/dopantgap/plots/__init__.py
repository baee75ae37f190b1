"""Figures of a filled table, its validation, explanations, rounds and screens.

Every function returns a :class:`matplotlib.figure.Figure` built without pyplot's
global state (Agg canvas), so figures can be made in threads and tests; importing this
module leaves matplotlib's backend as it was. Text is drawn as written: a ``$`` in a
label is a dollar sign, never the start of mathtext. Colour maps
are perceptually uniform and keep their order in grey (cividis, viridis); categories
use the Okabe-Ito palette (Okabe & Ito 2008, "Color Universal Design", colour-blind
safe) together with hatching or letters, so that a greyscale print still reads.
"""

from dopantgap.plots.checks import calibration_figure, parity_figure
from dopantgap.plots.explanations import breakdown_figure, group_figure, importance_figure
from dopantgap.plots.maps import column_values, periodic_map, site_preference_map, spread_map, table_position
from dopantgap.plots.rounds import history_figure, learning_curve_figure
from dopantgap.plots.screening import ranked_figure, screen_map, screen_map_values, screen_maps
from dopantgap.plots.style import (
    CATEGORY_COLOURS,
    CATEGORY_HATCHES,
    SPREAD_CMAP,
    VALUE_CMAP,
    figure_to_data_uri,
    luminance,
    save_png,
)

__all__ = [
    "CATEGORY_COLOURS",
    "CATEGORY_HATCHES",
    "VALUE_CMAP",
    "SPREAD_CMAP",
    "breakdown_figure",
    "calibration_figure",
    "column_values",
    "figure_to_data_uri",
    "group_figure",
    "history_figure",
    "importance_figure",
    "learning_curve_figure",
    "luminance",
    "parity_figure",
    "periodic_map",
    "ranked_figure",
    "save_png",
    "screen_map",
    "screen_map_values",
    "screen_maps",
    "site_preference_map",
    "spread_map",
    "table_position",
]
