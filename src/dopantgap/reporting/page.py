"""Building blocks of the HTML report: escaped text, tables, inline figures, sections,
folds and side-scrolled rows of maps, and reading the CSV files a report is given."""

import html
import re
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap import plots
from dopantgap.errors import DopantgapError

__all__ = [
    "DPI", "MAP_DPI", "cell_html", "escaped", "figure_html", "folded", "map_html", "read_csv", "section_html",
    "strip", "table_html",
]

#: Resolution of the report's figures (a page small enough to e-mail; common practice, no source).
DPI = 80
#: Resolution of the maps, drawn wider and sharper than the other figures: their tile
#: text must read at 1400 px (plots.maps.MAP_WIDTH_INCHES x MAP_DPI = 1300 px natural width).
MAP_DPI = 100


def read_csv(path, what, option):
    path = Path(path)
    if not path.is_file():
        raise DopantgapError(f"{option} {path}: no such file; give the {what} written by dopantgap.")
    try:
        return pd.read_csv(path)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as error:
        first_line = str(error).splitlines()[0] if str(error) else type(error).__name__
        raise DopantgapError(f"{option} {path}: not a readable CSV file ({first_line}).") from error


def escaped(value):
    return html.escape(str(value), quote=True)


def cell_html(value, digits=3):
    if isinstance(value, (bool, np.bool_)):
        return "<td>" + ("yes" if value else "no") + "</td>"
    if isinstance(value, (int, np.integer)):
        return f'<td class="num">{int(value)}</td>'
    if isinstance(value, (float, np.floating)):
        if not np.isfinite(value):
            return "<td></td>"
        return f'<td class="num">{float(value):.{digits}f}</td>'
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return "<td></td>"
    return f"<td>{escaped(value)}</td>"


def table_html(frame, table_id=None, sortable=False, row_classes=None, digits=3):
    attributes = []
    if table_id:
        attributes.append(f'id="{table_id}"')
    if sortable:
        attributes.append('class="sortable"')
    head = "".join(f"<th>{escaped(column)}</th>" for column in frame.columns)
    lines = [f"<table {' '.join(attributes)}><thead><tr>{head}</tr></thead><tbody>"]
    classes = [""] * len(frame) if row_classes is None else list(row_classes)
    for row, extra in zip(frame.itertuples(index=False, name=None), classes):
        opening = f'<tr class="{extra}">' if extra else "<tr>"
        lines.append(opening + "".join(cell_html(value, digits) for value in row) + "</tr>")
    lines.append("</tbody></table>")
    return "\n".join(lines)


def figure_html(figure, caption, alt):
    """A figure as an inline image with its caption; ``caption`` and ``alt`` are plain
    text (user labels welcome: they are escaped here, not by each caller)."""
    uri = plots.figure_to_data_uri(figure, dpi=DPI)
    return (
        f'<figure><img src="{uri}" alt="{escaped(alt)}">'
        f"<figcaption>{escaped(caption)}</figcaption></figure>"
    )


def map_html(figure, caption, alt):
    """A periodic-table map as a full-width image with its caption.

    ``data-tile-text-px`` is the map's smallest tile font in the PNG's own pixels
    (points x dpi / 72): the size a reader sees is that times the image's displayed
    width over its natural width (the browser test measures both).
    """
    text_px = figure.tile_text_points_ * MAP_DPI / 72.0
    uri = plots.figure_to_data_uri(figure, dpi=MAP_DPI)
    return (
        f'<figure class="map"><img src="{uri}" alt="{escaped(alt)}" data-tile-text-px="{text_px:.2f}">'
        f"<figcaption>{escaped(caption)}</figcaption></figure>"
    )


def section_html(section_id, title, body):
    """A page section: its anchor, heading (plain text) and HTML body."""
    return f'<section id="{section_id}"><h2>{escaped(title)}</h2>\n{body}\n</section>'


def strip(body, what):
    """The map figures of a section side by side in one row the reader scrolls sideways:
    the page grows by one map, not by all of them, and each keeps its full width (the
    tile text stays readable). Headings and notes before a figure travel with it."""
    pieces = re.split(r'(<figure class="map">.*?</figure>)', body, flags=re.S)
    n_figures = len(pieces) // 2
    if n_figures < 2:
        return body
    head = pieces[0]
    cut = head.find("<h3>")
    intro, pending = (head, "") if cut < 0 else (head[:cut], head[cut:])
    slides = []
    for position in range(n_figures):
        figure = pieces[2 * position + 1]
        count = f'<span class="slide-count">{escaped(what)} {position + 1} of {n_figures}</span>'
        slides.append(f'<div class="slide">{count}{pending}{figure}</div>')
        pending = pieces[2 * position + 2]
    return (
        f"{intro}<p class=\"note\">{n_figures} {escaped(what)}s side by side: scroll the row sideways "
        f"(shift + wheel, or the scroll bar under it) to see the next.</p>"
        f'<div class="strip">{"".join(slides)}</div>{pending}'
    )


def folded(label, body, open_=False):
    """``body`` inside a fold the reader opens by its ``label`` (plain text)."""
    opening = "<details open>" if open_ else "<details>"
    return f"{opening}<summary>{escaped(label)}</summary>\n{body}\n</details>"
