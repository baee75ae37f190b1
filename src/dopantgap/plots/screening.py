"""Figures of a screen (``dopantgap.screening.screen``): where the conditions hold, and who leads.

* :func:`screen_maps`: one periodic-table map per host and method of the probability
  that every condition holds, drawn with :func:`~dopantgap.plots.maps.periodic_map`
  on a fixed 0..1 scale (thick frame: every cell the conditions read is computed, so
  the probability is exact; dashed frame: outside the domain; corner letters R
  radioactive, T toxic);
* :func:`ranked_figure`: the leading candidates of one host and method, their
  probability against the verdict thresholds, and the estimate with its interval of
  every cell the conditions read (filled marks computed, open marks with a bar
  predicted).

Both read the screen's columns only, so a frame read back from a screen CSV draws
the same figures as the frame ``screen`` returned.
"""

import math
import re
import textwrap

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.plots.maps import periodic_map
from dopantgap.plots.style import _figure, _plain_text, _require

__all__ = [
    "PROBABILITY_LABEL",
    "SCREEN_COLUMNS",
    "VERDICT_COLOURS",
    "conditions_text",
    "ranked_figure",
    "read_cells",
    "screen_map",
    "screen_map_values",
    "screen_maps",
    "screen_settings",
]

#: Columns every screen output has (``read_screen`` refuses a file without them).
SCREEN_COLUMNS = ("element", "host", "method", "probability", "verdict")
#: Verdict -> colour (Okabe-Ito bluish green, orange, vermillion; the marker shape
#: tells them apart in grey as well).
VERDICT_COLOURS = {"yes": "#009E73", "undecided": "#E69F00", "no": "#D55E00"}
_VERDICT_MARKERS = {"yes": "o", "undecided": "D", "no": "X"}
# sites of a quantity panel: Okabe-Ito colours the verdicts do not use, then black and
# grey, each with its own marker so that a greyscale print still tells them apart
_SITE_COLOURS = ("#0072B2", "#CC79A7", "#56B4E9", "#000000", "#8c8c8c", "#F0E442")
_SITE_MARKERS = ("o", "s", "^", "v", "D", "P")
#: Label of the probability scale.
PROBABILITY_LABEL = "P(all conditions hold)"
_INVENTED = " (INVENTED demo data)"
_STATUS = " status"
_WINDOW_LABEL = re.compile(
    r"^(?P<where>\S+) (?:(?P<op><=|>=) (?P<bound>\S+)|in \[(?P<low>[^,\]]+), (?P<high>[^\]]+)\])$"
)


def screen_settings(frame):
    """The (host, method) pairs of a screen, in the order of its rows.

    Parameters
    ----------
    frame : DataFrame
        A screen (``screening.screen`` or its CSV read back).

    Returns
    -------
    list of (str, str)
    """
    _require(frame, list(SCREEN_COLUMNS), "The screen")
    return list(dict.fromkeys(zip(frame["host"].astype(str), frame["method"].astype(str))))


def _rows(frame, host, method):
    settings = screen_settings(frame)
    if host is None and method is None:
        host, method = settings[0]
    rows = frame[(frame["host"].astype(str) == str(host)) & (frame["method"].astype(str) == str(method))]
    if len(rows) == 0:
        named = ", ".join(f"{h} at {m}" for h, m in settings)
        raise DopantgapError(f"The screen has no rows for host {host!r} at method {method!r}; it holds {named}.")
    return rows, str(host), str(method)


def read_cells(frame):
    """The cells a screen reads, as ``<quantity>@<site>`` labels grouped by quantity.

    Parameters
    ----------
    frame : DataFrame
        A screen; a cell read has the columns ``<label>``, ``<label> lo``,
        ``<label> hi`` and ``<label> status``.

    Returns
    -------
    dict
        Quantity -> list of cell labels, in column order.
    """
    cells = {}
    for column in frame.columns:
        if not str(column).endswith(_STATUS):
            continue
        label = str(column)[: -len(_STATUS)]
        if label in frame.columns and f"{label} lo" in frame.columns and f"{label} hi" in frame.columns:
            quantity = label.split("@", 1)[0]
            cells.setdefault(quantity, []).append(label)
    return cells


def _all_computed(rows, cells):
    labels = [label for group in cells.values() for label in group]
    if not labels:
        return pd.Series(False, index=rows.index)
    status = rows[[f"{label}{_STATUS}" for label in labels]].astype(str)
    return (status == "computed").all(axis=1)


def _flags(values):
    """True values of a column that may hold booleans or their text (a CSV read back)."""
    return values.map(lambda value: str(value).strip().lower() in ("true", "1", "yes")).astype(bool)


def _caution_letters(symbols):
    """Symbol -> "R", "T" or "RT" for radioactive and toxic elements."""
    flags = elements.element_flags(list(symbols))
    letters = {}
    for symbol, row in flags.iterrows():
        text = ("R" if row["radioactive"] else "") + ("T" if row["toxic"] else "")
        if text:
            letters[symbol] = text
    return letters


def conditions_text(frame):
    """The AND of the screen's conditions (its ``conditions`` column), or the ``P:`` columns'."""
    if "conditions" in frame.columns and len(frame):
        text = frame["conditions"].dropna().astype(str)
        if len(text):
            return text.iloc[0]
    labels = [str(column)[3:] for column in frame.columns if str(column).startswith("P: ")]
    return " AND ".join(labels) or "(conditions not recorded)"


def screen_map_values(frame, host=None, method=None):
    """What the screen map of one host and method draws, per element.

    Parameters
    ----------
    frame : DataFrame
        A screen.
    host, method : str or None, default=None
        The setting; None for both: the first in the frame.

    Returns
    -------
    DataFrame
        Index element; columns ``probability``, ``verdict``, ``computed`` (every cell
        the conditions read is computed: the probability is exact), ``outside`` (the
        screen's ``outside_domain``) and ``caution`` (letters: R radioactive, T toxic;
        empty if neither).
    """
    rows, _, _ = _rows(frame, host, method)
    rows = rows.drop_duplicates("element")
    cells = read_cells(rows)
    symbols = rows["element"].astype(str)
    outside = _flags(rows["outside_domain"]) if "outside_domain" in rows.columns else pd.Series(False, index=rows.index)
    letters = _caution_letters(symbols)
    return pd.DataFrame(
        {
            "probability": rows["probability"].astype(float).to_numpy(),
            "verdict": rows["verdict"].astype(str).to_numpy(),
            "computed": _all_computed(rows, cells).to_numpy(),
            "outside": outside.to_numpy(),
            "caution": [letters.get(symbol, "") for symbol in symbols],
        },
        index=pd.Index(symbols.to_numpy(), name="element"),
    )


@_plain_text
def screen_map(frame, host=None, method=None, invented=False):
    """A periodic-table map of the probability that every condition holds, for one host and method.

    Parameters
    ----------
    frame : DataFrame
        A screen.
    host, method : str or None, default=None
        The setting; None for both: the first in the frame.
    invented : bool, default=False
        The screen is of the invented demo table: the title says so.

    Returns
    -------
    Figure
        ``periodic_map`` on a 0..1 scale labelled ``P(all conditions hold)``: thick
        solid frame, every cell read is computed (exact probability); dashed frame,
        outside the domain; corner letters R radioactive, T toxic. The title states
        the conditions.
    """
    rows, host, method = _rows(frame, host, method)
    values = screen_map_values(rows)
    title = f"{host} at {method}: {conditions_text(rows)}" + (_INVENTED if invented else "")
    title = "\n".join(textwrap.wrap(title, 110)) if len(title) > 110 else title
    tags = {symbol: text for symbol, text in values["caution"].items() if text}
    return periodic_map(
        values["probability"], title, unit="", computed=values["computed"], tags=tags,
        outside=values["outside"], value_range=(0.0, 1.0), scale_label=PROBABILITY_LABEL,
        computed_caption="all cells computed",
    )


def screen_maps(frame, invented=False):
    """One :func:`screen_map` per host and method of the screen, in the frame's order.

    Returns
    -------
    list of (str, str, Figure)
        Host, method and the map.
    """
    return [(host, method, screen_map(frame, host, method, invented)) for host, method in screen_settings(frame)]


def _windows(text):
    """Cell label or quantity -> (low, high) of each window condition in ``text``."""
    windows = {}
    for part in str(text).split(" AND "):
        match = _WINDOW_LABEL.match(part.strip())
        if not match:
            continue
        try:
            if match["op"]:
                bound = float(match["bound"])
                low, high = (-math.inf, bound) if match["op"] == "<=" else (bound, math.inf)
            else:
                low, high = float(match["low"]), float(match["high"])
        except ValueError:
            continue
        windows[match["where"]] = (low, high)
    return windows


@_plain_text
def ranked_figure(frame, host=None, method=None, top=25, confidence=0.9, invented=False):
    """The leading candidates of one host and method, with the estimates the conditions read.

    Parameters
    ----------
    frame : DataFrame
        A screen.
    host, method : str or None, default=None
        The setting; None for both: the first in the frame.
    top : int, default=25
        Rows shown (highest probability first); the figure counts the rest by verdict.
    confidence : float, default=0.9
        The screen's confidence: verdict ``yes`` at P >= confidence, ``no`` at
        P <= 1 - confidence (drawn as dashed lines).
    invented : bool, default=False
        The screen is of the invented demo table: the title says so.

    Returns
    -------
    Figure
        Left: probability per element, coloured and shaped by verdict. Right, one
        panel per quantity read: each cell's estimate (eV) with its interval (``lo``
        to ``hi``), filled mark computed, open mark predicted, one colour per site;
        a window condition is shaded. Tick labels carry caution letters (R
        radioactive, T toxic, X outside the domain).
    """
    if isinstance(top, bool) or not isinstance(top, (int, np.integer)) or top < 1:
        raise DopantgapError(f"top must be a whole number of at least 1, got {top!r}.")
    rows, host, method = _rows(frame, host, method)
    rows = rows.sort_values("probability", ascending=False, kind="stable")
    shown, rest = rows.head(int(top)), rows.iloc[int(top):]
    cells = read_cells(rows)
    windows = _windows(conditions_text(rows))
    # the sites a condition names come first (blue, circles), the others after
    named = set(re.findall(r"[^\s\[\],]+", conditions_text(rows)))
    cells = {
        quantity: sorted(group, key=lambda label: label.split("@", 1)[-1] not in named and label not in named)
        for quantity, group in cells.items()
    }
    letters = _caution_letters(shown["element"].astype(str))
    outside = (_flags(shown["outside_domain"]) if "outside_domain" in shown.columns
               else pd.Series(False, index=shown.index))
    labels = []
    for symbol, is_outside in zip(shown["element"].astype(str), outside):
        marks = letters.get(symbol, "") + ("X" if is_outside else "")
        labels.append(f"{symbol} [{marks}]" if marks else symbol)

    n_rows = len(shown)
    # panels wide enough for the legends above them (constrained layout would shrink a
    # panel to its legend's width otherwise)
    widths = [3.3] + [4.3 if len(group) > 1 else 3.1 for group in cells.values()]
    figure = _figure(1.0 + sum(widths), 2.6 + 0.3 * n_rows)
    axes = figure.subplots(1, len(widths), sharey=True, gridspec_kw={"width_ratios": widths}, squeeze=False)[0]
    # room between panels, so that the end ticks of neighbours do not touch
    figure.get_layout_engine().set(wspace=0.06)
    positions = np.arange(n_rows)

    ax = axes[0]
    verdicts = shown["verdict"].astype(str).to_numpy()
    probabilities = shown["probability"].astype(float).to_numpy()
    ax.hlines(positions, 0.0, probabilities, color="#b9b9b9", linewidth=1.2, zorder=1)
    for verdict, colour in VERDICT_COLOURS.items():
        mine = verdicts == verdict
        if mine.any():
            ax.scatter(probabilities[mine], positions[mine], s=46, color=colour, marker=_VERDICT_MARKERS[verdict],
                       edgecolor="black", linewidth=0.5, zorder=3, label=verdict, gid=f"verdict-{verdict}")
    no_line = 1.0 - confidence
    for threshold, words, side, shift in ((confidence, f"yes >= {confidence:g}", "right", -0.015),
                                          (no_line, f"no <= {no_line:g}", "left", 0.015)):
        ax.axvline(threshold, color="#444444", linestyle="--", linewidth=0.9, zorder=2, gid="threshold")
        ax.text(threshold + shift, -0.85, words, ha=side, va="center", fontsize=9, color="#444444")
    ax.set_xlim(-0.03, 1.03)
    ax.set_ylim(n_rows - 0.5, -1.3)
    ax.set_yticks(positions, labels)
    ax.set_xlabel(PROBABILITY_LABEL)
    ax.grid(axis="x", color="#e4e4e4", linewidth=0.6)
    ax.legend(loc="lower center", bbox_to_anchor=(0.5, 1.0), ncol=3, fontsize=9.5, title="verdict",
              title_fontsize=9.5, frameon=False, handletextpad=0.2, columnspacing=0.8)

    for ax, (quantity, group) in zip(axes[1:], cells.items()):
        step = 0.7 / max(len(group), 1)
        for index, label in enumerate(group):
            colour = _SITE_COLOURS[index % len(_SITE_COLOURS)]
            marker = _SITE_MARKERS[index % len(_SITE_MARKERS)]
            offset = (index - (len(group) - 1) / 2.0) * step
            value = shown[label].astype(float).to_numpy()
            low = shown[f"{label} lo"].astype(float).to_numpy()
            high = shown[f"{label} hi"].astype(float).to_numpy()
            computed = (shown[f"{label}{_STATUS}"].astype(str) == "computed").to_numpy()
            y = positions + offset
            ax.hlines(y[~computed], low[~computed], high[~computed], color=colour, linewidth=1.6, zorder=2)
            ax.scatter(value[~computed], y[~computed], s=26, marker=marker, facecolor="white", edgecolor=colour,
                       linewidth=1.3, zorder=3, gid=f"predicted-{label}")
            ax.scatter(value[computed], y[computed], s=26, marker=marker, color=colour, edgecolor="black",
                       linewidth=0.4, zorder=3, gid=f"computed-{label}")
            window = windows.get(label) or windows.get(quantity)
            if window is not None and (len(group) == 1 or label in windows):
                low_edge, high_edge = window
                ax.axvspan(max(low_edge, -1e9), min(high_edge, 1e9), color="#009E73", alpha=0.12, zorder=0,
                           gid=f"window-{label}")
                for edge in window:
                    if math.isfinite(edge):
                        ax.axvline(edge, color="#009E73", linewidth=1.0, zorder=1)
        finite = shown[[f"{label} lo" for label in group] + [f"{label} hi" for label in group]].astype(float)
        finite = finite.to_numpy()[np.isfinite(finite.to_numpy())]
        if len(finite):
            pad = 0.06 * max(float(finite.max() - finite.min()), 0.2)
            ax.set_xlim(float(finite.min()) - pad, float(finite.max()) + pad)
        only_site = group[0].split("@", 1)[1] if len(group) == 1 and "@" in group[0] else None
        ax.set_xlabel(f"{quantity} at {only_site} (eV)" if only_site else f"{quantity} (eV)")
        ax.grid(axis="x", color="#e4e4e4", linewidth=0.6)
        handles = []
        if len(group) > 1:
            handles += [Line2D([], [], marker=_SITE_MARKERS[i % len(_SITE_MARKERS)], linestyle="none",
                               color=_SITE_COLOURS[i % len(_SITE_COLOURS)], label=label.split("@", 1)[1])
                        for i, label in enumerate(group)]
        handles += [
            Line2D([], [], marker="o", linestyle="none", color="#555555", markeredgecolor="black", label="computed"),
            Line2D([], [], marker="o", linestyle="-", color="#555555", markerfacecolor="white",
                   label="predicted, interval"),
        ]
        if any(key == quantity or key.split("@", 1)[0] == quantity for key in windows):
            handles.append(Patch(color="#009E73", alpha=0.25, label="window"))
        ax.legend(handles=handles, loc="lower center", bbox_to_anchor=(0.5, 1.0), ncol=3 if len(group) > 1 else 2,
                  fontsize=9.5, frameon=False, handletextpad=0.3, columnspacing=0.8)

    title = f"Leading candidates, {host} at {method}: {conditions_text(rows)}" + (_INVENTED if invented else "")
    figure.suptitle("\n".join(textwrap.wrap(title, 95)), fontsize=11, fontweight="bold")
    if len(rest):
        counts = rest["verdict"].astype(str).value_counts()
        tally = ", ".join(f"{int(counts[v])} {v}" for v in VERDICT_COLOURS if v in counts.index)
        note = f"Top {n_rows} of {len(rows)} elements; {len(rest)} more not shown ({tally})."
    else:
        note = f"All {len(rows)} elements shown."
    note += " Tick letters: R radioactive, T toxic, X outside the domain."
    figure.supxlabel(note, fontsize=9.5, color="#444444")
    figure.n_rest_ = len(rest)
    return figure
