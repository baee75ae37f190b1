"""The report's screening section: which elements meet the screen's conditions.

Reads a screen (the frame ``dopantgap.screening.screen`` returns, or its CSV) and
shows, per host and method, a periodic-table map of the probability that every
condition holds and a ranked chart of the leading candidates, a short table of the
candidates (yes, then undecided), the conditions, the screen's notes and the caution
that a screen ranks candidates and never replaces calculation or experiment.
"""

from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap import plots
from dopantgap.errors import DopantgapError
from dopantgap.plots.screening import SCREEN_COLUMNS, conditions_text, read_cells, screen_settings
from dopantgap.reporting.page import escaped, figure_html, folded, map_html, read_csv, strip, table_html

__all__ = ["SCREEN_CAUTION", "read_screen", "screening_html"]

#: The caution the screening section carries.
SCREEN_CAUTION = (
    "A screen ranks candidates for calculation and experiment; it never replaces them, nor "
    "local safety rules."
)
# candidates listed per host and method, and elements in each ranked chart (common
# practice, no source)
_TABLE_ROWS = 15
_CHART_ROWS = 25
_VERDICT_ORDER = {"yes": 0, "undecided": 1, "no": 2}


def read_screen(path):
    """A screen CSV read back (as ``dopantgap screen`` writes it).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    DataFrame

    Raises
    ------
    DopantgapError
        A missing or unreadable file, or one without the columns of a screen (one line
        naming the file and the fix).
    """
    frame = read_csv(path, "screen CSV", "--screen")
    missing = [column for column in SCREEN_COLUMNS if column not in frame.columns]
    if missing:
        raise DopantgapError(
            f"--screen {Path(path)}: not a screen output (no column {', '.join(missing)}); give the CSV "
            f"written by 'dopantgap screen MODEL_DIR --out SCREEN.csv'."
        )
    return frame


def _candidates(rows, top):
    """The yes, then undecided rows, by probability; their read estimates in short form."""
    kept = rows[rows["verdict"].astype(str).isin(("yes", "undecided"))]
    kept = kept.assign(_order=kept["verdict"].astype(str).map(_VERDICT_ORDER))
    kept = kept.sort_values(["_order", "probability"], ascending=[True, False], kind="stable").head(top)
    cells = read_cells(rows)
    shown = pd.DataFrame({
        "element": kept["element"].astype(str),
        "verdict": kept["verdict"].astype(str),
        "P(all)": kept["probability"].astype(float),
    })
    for group in cells.values():
        for label in group:
            shown[f"{label} (eV)"] = [
                f"{value:.2f}" + ("" if status == "computed" else f" [{low:.2f}, {high:.2f}]")
                for value, low, high, status in zip(
                    kept[label].astype(float), kept[f"{label} lo"].astype(float),
                    kept[f"{label} hi"].astype(float), kept[f"{label} status"].astype(str),
                )
            ]
    if "bound_vacancies" in kept.columns:
        shown["bound vacancies"] = [
            "" if pd.isna(value) else f"{value:.2f} [{low:.2f}, {high:.2f}]"
            for value, low, high in zip(kept["bound_vacancies"].astype(float),
                                        kept["bound_vacancies lo"].astype(float),
                                        kept["bound_vacancies hi"].astype(float))
        ]
    if "decisive_cell" in kept.columns:
        shown["decisive calculation"] = kept["decisive_cell"].fillna("").astype(str)
    shown["caution"] = [_caution(row) for _, row in kept.iterrows()]
    return shown.reset_index(drop=True), len(kept)


def _text(value):
    """A cell's text, empty for a missing value (a CSV read back gives NaN)."""
    return "" if value is None or (isinstance(value, float) and np.isnan(value)) else str(value).strip()


def _caution(row):
    """Safety note and domain note of one screen row, joined."""
    words = [_text(row.get("caution"))]
    if _text(row.get("outside_domain")).lower() in ("true", "1"):
        note = _text(row.get("domain_note"))
        words.append("outside the domain" + (f": {note}" if note else ""))
    return "; ".join(word for word in words if word)


def screening_html(screen, invented=False, notes=None):
    """The screening section's HTML body.

    Parameters
    ----------
    screen : DataFrame, str or Path
        A screen frame, or the path of its CSV (read with :func:`read_screen`).
    invented : bool, default=False
        The screen is of the invented demo table (the figures and text say so).
    notes : sequence of str or None, default=None
        What the screen assumed; None: ``screen.attrs["notes"]`` when present.

    Returns
    -------
    str
    """
    if not isinstance(screen, pd.DataFrame):
        screen = read_screen(screen)
    missing = [column for column in SCREEN_COLUMNS if column not in screen.columns]
    if missing:
        raise DopantgapError(
            f"The screen lacks the column(s) {', '.join(missing)}; give the frame dopantgap.screening.screen returns."
        )
    if notes is None:
        notes = screen.attrs.get("notes")
    conditions = conditions_text(screen)
    settings = screen_settings(screen)
    parts = [
        f'<p class="caution">{escaped(SCREEN_CAUTION)}</p>',
        f"<p>Conditions, all of which must hold (energies in eV): <b>{escaped(conditions)}</b>. "
        f"Screened: {escaped(', '.join(f'{h} at {m}' for h, m in settings))}. The probability comes from "
        "joint draws of every cell the conditions read; the verdict is yes when it reaches the "
        "screen's confidence, no when it falls to one minus it, undecided between.</p>",
    ]
    if invented:
        parts.append('<p class="invented">This screen reads the INVENTED demo table; its numbers are not physics.</p>')
    if notes:
        items = "".join(f"<li>{escaped(note)}</li>" for note in notes)
        parts.append(folded("What the screen assumed", f"<ul>{items}</ul>"))
    tables = []
    for host, method in settings:
        rows = screen[(screen["host"].astype(str) == host) & (screen["method"].astype(str) == method)]
        counts = rows["verdict"].astype(str).value_counts()
        tally = ", ".join(f"{int(counts.get(verdict, 0))} {verdict}" for verdict in _VERDICT_ORDER)
        shown, n_kept = _candidates(rows, _TABLE_ROWS)
        total = int(counts.get("yes", 0) + counts.get("undecided", 0))
        more = f" (first {n_kept} of {total})" if total > n_kept else ""
        body = (table_html(shown, digits=3) if len(shown) else "<p>No element reaches yes or undecided.</p>")
        tables.append(f"<h3>{escaped(host)} at {escaped(method)}: {escaped(tally)}</h3>"
                      f"<p>Candidates, yes first, then undecided{escaped(more)}; computed values bare, "
                      f"predicted ones with their interval.</p>{body}")
    parts.extend(tables)
    maps = []
    for host, method, figure in plots.screen_maps(screen, invented=invented):
        maps.append(f"<h3>{escaped(host)} at {escaped(method)}</h3>" + map_html(
            figure,
            f"Fill: the probability that every condition holds ({conditions}) for {host} at {method}, "
            "read on the 0 to 1 strip (cividis: its order holds in grey). Thick solid frame: every cell "
            "the conditions read is computed, so the probability is exact (0 or 1); thick dashed frame: "
            "outside the domain, an extrapolation; outline only: not screened. Corner letters: R "
            "radioactive, T toxic.",
            f"periodic table map of the screen probability for {host} at {method}",
        ))
    parts.append("<h3>Where the conditions hold</h3>")
    parts.append(strip("\n".join(maps), "map"))
    charts = []
    for host, method in settings:
        figure = plots.ranked_figure(screen, host, method, top=_CHART_ROWS, invented=invented)
        charts.append(figure_html(
            figure,
            f"{host} at {method}: the {_CHART_ROWS} elements most likely to meet the conditions. Left: "
            "the probability, by verdict (dashed lines: the confidence thresholds). Right: the estimate "
            "(eV) of every cell the conditions read, filled mark computed, open mark with its interval "
            "predicted; the shaded band is a window condition. Tick letters: R radioactive, T toxic, "
            "X outside the domain.",
            f"ranked candidates for {host} at {method}",
        ))
    parts.append("<h3>Leading candidates</h3>" + charts[0] if charts else "")
    if len(charts) > 1:
        parts.append(folded(f"Show the ranked candidates of {len(charts) - 1} more host(s) and method(s)",
                            "\n".join(charts[1:])))
    return "\n".join(parts)

