"""The report's rounds: reading a next-picks file and a rounds or replay folder, and
their sections (the picks, the history of the rounds, replay learning curves)."""

from pathlib import Path

import pandas as pd

from dopantgap import plots
from dopantgap.errors import DopantgapError
from dopantgap.reporting.page import figure_html, folded, read_csv, table_html

__all__ = ["picks_html", "read_picks", "read_rounds_folder", "rounds_html"]

_HISTORY_COLUMNS = ("round", "mean_std", "decided", "cost_spent")
_REPLAY_COLUMNS = ("strategy", "seed", "round", "cost_spent", "error", "decided")
# the page stays readable and small (common practice, no source)
_MAX_PICK_ROWS = 200


def read_picks(path):
    """A next-picks CSV (as written by ``dopantgap next``) as a DataFrame.

    Raises
    ------
    DopantgapError
        When the file lacks the cell columns element, host, site, method, quantity.
    """
    picks = read_csv(path, "next-picks CSV", "--picks")
    missing = [c for c in ("element", "host", "site", "method", "quantity") if c not in picks.columns]
    if missing:
        raise DopantgapError(
            f"--picks {path}:1: no column(s) {', '.join(missing)}; give the CSV that "
            f"'dopantgap next MODEL_DIR --out NEXT.csv' wrote."
        )
    return picks


def read_rounds_folder(folder, surrogate=None):
    """History of the rounds and replay curves found in a folder.

    A rounds folder (round_0, round_1 ... written by ``dopantgap add --rounds-dir``)
    gives the history through ``rounds.rounds_history``; a replay folder (its
    ``curves.csv``) or any CSV with the columns strategy, seed, round, cost_spent,
    error, decided gives replay curves; a CSV with round, mean_std, decided,
    cost_spent is taken as a history too.

    Parameters
    ----------
    folder : str or Path
    surrogate : Surrogate or None, default=None
        Computes the figures of rounds recorded without a model.

    Returns
    -------
    history : DataFrame or None
    replay_curves : DataFrame or None

    Raises
    ------
    DopantgapError
        No such folder, or nothing of either kind in it.
    """
    from dopantgap.rounds import round_folders, rounds_history

    folder = Path(folder)
    if not folder.is_dir():
        raise DopantgapError(f"--rounds-dir {folder}: no such folder.")
    history = rounds_history(folder, surrogate=surrogate) if round_folders(folder) else None
    histories, curves = [], []
    for path in sorted(folder.glob("*.csv")):
        frame = read_csv(path, "rounds file", "--rounds-dir")
        if all(column in frame.columns for column in _REPLAY_COLUMNS):
            curves.append(frame)
        elif all(column in frame.columns for column in _HISTORY_COLUMNS):
            histories.append(frame)
    if history is None and histories:
        history = histories[0]
    if history is None and not curves:
        raise DopantgapError(
            f"--rounds-dir {folder}: neither a rounds folder (round_0, round_1 ...) nor a folder "
            f"with a CSV of columns {', '.join(_HISTORY_COLUMNS)} (history) or "
            f"{', '.join(_REPLAY_COLUMNS)} (replay curves, e.g. 'dopantgap replay' output)."
        )
    replay = pd.concat(curves, ignore_index=True) if curves else None
    return history, replay


# ----------------------------------------------------------------------------- html helpers
# ----------------------------------------------------------------------------- content

def picks_html(picks):
    """The next-picks section: the picks file's rows (at most ``_MAX_PICK_ROWS``)."""
    shown = picks.head(_MAX_PICK_ROWS)
    more = f"<p class=\"note\">First {_MAX_PICK_ROWS} of {len(picks)} rows.</p>" if len(picks) > _MAX_PICK_ROWS else ""
    body = table_html(shown, sortable=True) + more
    return "<p>The calculations proposed next, as given in the picks file.</p>" + folded(
        f"Show the {len(shown)} picks", body, open_=len(shown) <= 10
    )


def rounds_html(history, replay_curves):
    """The rounds section: the history of the rounds and replay learning curves."""
    parts = []
    if history is not None:
        parts.append(figure_html(
            plots.history_figure(history),
            "Left: mean predicted standard deviation (eV) of the missing cells against the cost spent, "
            "each point a round. Right: site questions decided (P > 0.9) after each round.",
            "history of the rounds",
        ))
    if replay_curves is not None:
        parts.append(figure_html(
            plots.learning_curve_figure(replay_curves),
            "Replays of picking strategies on a table whose answers are known: error against cost "
            "spent (median over seeds, band 25th-75th percentile).",
            "replay learning curves",
        ))
    return "\n".join(parts)
