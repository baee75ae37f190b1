"""Colours, figure canvas, text handling and file output shared by every figure."""

import base64
import functools
import io
import sys

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure

from dopantgap.atomic import write_bytes_atomic
from dopantgap.errors import DopantgapError


#: Colour map of values (dark = low, light = high; readable in grey and with CVD).
VALUE_CMAP = "cividis"
#: Colour map of uncertainties.
SPREAD_CMAP = "viridis"
#: Okabe-Ito colours (black left out: symbols are printed on the boxes).
CATEGORY_COLOURS = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")
#: Hatches paired with the categories, for greyscale prints.
CATEGORY_HATCHES = ("", "////", "....", "xxxx", "\\\\\\\\", "++++", "oooo")

# Labels come from the user's table (hosts, sites, methods, quantities, elements): drawn
# with mathtext they could fail to parse (``$x^$``) or say something else than written.
_PLAIN_TEXT = {"text.parse_math": False, "text.usetex": False}


def _plain_text(function):
    """Run ``function`` with every text it creates drawn as written (no mathtext, no TeX)."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(_PLAIN_TEXT):
            return function(*args, **kwargs)

    return wrapper


def _figure(width, height):
    figure = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(figure)
    return figure


def luminance(colour):
    """Relative luminance of a colour, 0 (black) to 1 (white).

    The sRGB linearisation and weights of W3C, "Web Content Accessibility Guidelines
    (WCAG) 2.0", 2008, definition of relative luminance.
    """
    rgb = np.asarray(to_rgb(colour), dtype=float)
    linear = np.where(rgb <= 0.03928, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(linear @ np.array([0.2126, 0.7152, 0.0722]))


def _ink_for(face):
    return "black" if luminance(face) > 0.33 else "white"


def _blend_with_white(colour, weight):
    rgb = np.asarray(to_rgb(colour), dtype=float)
    return tuple(weight * rgb + (1.0 - weight) * np.ones(3))


def _require(frame, columns, what):
    missing = [column for column in columns if column not in frame.columns]
    if missing:
        raise DopantgapError(
            f"{what} lacks the column(s) {', '.join(missing)}; expected {', '.join(columns)}."
        )


def _as_series(values):
    if values is None:
        return pd.Series(dtype=float)
    if isinstance(values, pd.Series):
        return values
    if isinstance(values, dict):
        return pd.Series(values)
    return pd.Series(dict(values))


def _short(value):
    try:
        return f"{float(value):.3g}"
    except (TypeError, ValueError):
        return str(value)


# ----------------------------------------------------------------------------- output
@_plain_text
def _png_bytes(figure, dpi):
    buffer = io.BytesIO()
    # no software stamp: the same figure gives the same bytes
    figure.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return buffer.getvalue()


def _close(figure):
    # figures made here are not registered with pyplot; one that is (made by a caller
    # with pyplot) is released from pyplot's registry too
    pyplot = sys.modules.get("matplotlib.pyplot")
    if pyplot is not None:
        pyplot.close(figure)
    figure.clear()


def save_png(figure, path, dpi=110):
    """Write a figure as PNG atomically, then close it.

    Parameters
    ----------
    figure : Figure
    path : str or Path
    dpi : int, default=110

    Returns
    -------
    int
        Bytes written.
    """
    data = _png_bytes(figure, dpi)
    _close(figure)
    write_bytes_atomic(path, data)
    return len(data)


def figure_to_data_uri(figure, dpi=90):
    """A figure as a ``data:image/png;base64,...`` URI (for self-contained HTML); closes it."""
    data = _png_bytes(figure, dpi)
    _close(figure)
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")
