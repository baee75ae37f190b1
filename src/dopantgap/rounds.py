"""Rounds: merge new results into the table and keep a record of each round.

A table grows round by round: pick cells to compute, compute them, add the
results. :func:`add_results` merges results into a table with provenance (see
:func:`dopantgap.table.merge_results`: the ``source`` column; rows of a table that had
none get ``"original"``, new rows get the label). Earlier values, rows and extra columns
are never changed or dropped; a result that contradicts an earlier value is refused.

The default label is the results file's name (``results_march.csv``) when no rounds
folder is used, and ``"round K"`` inside a rounds folder.

Rounds folder layout
--------------------
::

    ROUNDS_DIR/
      round_0/            the table the rounds started from (written by the first add)
        table.csv
        metrics.json
      round_1/            one folder per add, numbered from 1
        table.csv         the merged table after this round (with the ``source`` column)
        results.csv       the new results as given (bytes copied unchanged)
        picks.csv         the picks this round computed, if given (bytes copied unchanged)
        metrics.json      figures of this round (below); written last: a round folder
      round_2/ ...        without it is incomplete and refused

``metrics.json`` holds the round number, its label, the table's hash
(:func:`dopantgap.table.table_hash`), cell counts (all and new, per method), the cost of
the round and the cost spent since round 0 (``cost_per_cell`` per method; a method not
named costs 1 per cell), and, when a model folder was given, figures from that model
relearned on the round's table with :meth:`Surrogate.refreshed` (hyperparameters and
calibration of the given model kept):

* ``mean_std_missing``: mean calibrated predicted std (eV) of the table's missing cells
  (every element of the table x every host/site/method/quantity column not computed),
  overall and per method;
* ``decided``: number of site preferences (element, host, method, quantity with two or
  more sites) whose most probable lowest site has ``p_lowest > 0.9``
  (:func:`dopantgap.sites.site_preference`), overall and per method.

:func:`rounds_history` reads these files back; rounds recorded without a model get
their figures computed then, if a model is given to it, the same way.
"""

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.atomic import write_bytes_atomic, write_text_atomic
from dopantgap.errors import DopantgapError
from dopantgap.reproducible import seed_integer
from dopantgap.sites import site_preference
from dopantgap.table import (
    KEY_COLUMNS,
    merge_results,
    read_table,
    table_hash,
    write_table,
)

__all__ = [
    "DECIDED_PROBABILITY",
    "METRICS_NAME",
    "add_results",
    "decided_preferences",
    "history_costs_are_counts",
    "history_text",
    "record_round",
    "round_folders",
    "round_metrics",
    "rounds_history",
]

#: A site preference counts as decided above this probability (common practice, no source).
DECIDED_PROBABILITY = 0.9
METRICS_NAME = "metrics.json"
_FORMAT = "dopantgap-round"
_ROUND = re.compile(r"round_(\d+)")


def _default_label(results):
    if "_file" in results.columns and len(results):
        return Path(str(results["_file"].iat[0])).name
    return "new results"


def add_results(table, results, source=None):
    """Merge new computed cells into a table, marking where each row came from.

    Parameters
    ----------
    table : DataFrame
        The table so far (``read_table`` output or an earlier merge).
    results : DataFrame
        New cells in the long layout (``read_table`` output).
    source : str or None, default=None
        Provenance label of the new rows; None: the results file's name.

    Returns
    -------
    DataFrame
        See :func:`dopantgap.table.merge_results`.
    """
    label = _default_label(results) if source is None else str(source)
    if not label.strip():
        raise DopantgapError("--source is blank; give a label such as 'round 2'.")
    return merge_results(table, results, label)


# ------------------------------------------------------------------ figures


def _cost_of(cells, cost):
    """Cost of computing ``cells`` at ``cost`` per cell of each method (methods not named: 1)."""
    cost = cost or {}
    return float(sum(float(cost.get(method, 1.0)) * float(count)
                     for method, count in cells["method"].value_counts().items()))


def _missing_cells(table):
    """Every element x column of the table that is not computed."""
    columns = table[["host", "site", "method", "quantity"]].drop_duplicates()
    symbols = list(dict.fromkeys(table["element"]))
    grid = pd.DataFrame(
        [
            (symbol, host, site, method, quantity)
            for symbol in symbols
            for host, site, method, quantity in columns.itertuples(index=False, name=None)
        ],
        columns=list(KEY_COLUMNS),
    )
    computed = set(table[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    is_missing = [key not in computed for key in grid.itertuples(index=False, name=None)]
    return grid[is_missing].reset_index(drop=True)


def decided_preferences(preference, threshold=DECIDED_PROBABILITY):
    """One row per element, host, method and quantity whose lowest site is decided.

    Parameters
    ----------
    preference : DataFrame
        Output of :func:`dopantgap.sites.site_preference`.
    threshold : float, default=0.9

    Returns
    -------
    DataFrame
        The rank-1 rows with ``p_lowest > threshold``.
    """
    best = preference[preference["rank"] == 1]
    return best[best["p_lowest"] > threshold].reset_index(drop=True)


def round_metrics(surrogate, random_state=0):
    """Uncertainty and site-preference figures of a fitted surrogate's table.

    Parameters
    ----------
    surrogate : Surrogate
        Fitted on (or refreshed with) the round's table.
    random_state : None, int, RandomState or Generator, default=0
        Seed of the site-preference draws (``reproducible.seed_integer``, checked
        before any work).

    Returns
    -------
    dict
        ``mean_std_missing`` (eV, None when nothing is missing),
        ``mean_std_missing_by_method``, ``n_missing_by_method``, ``decided``,
        ``decided_by_method``, ``n_site_groups``.
    """
    random_state = seed_integer(random_state)
    missing = _missing_cells(surrogate.table_)
    figures = {"mean_std_missing": None, "mean_std_missing_by_method": {}, "n_missing_by_method": {}}
    if len(missing):
        predicted = surrogate.predict(missing)
        figures["mean_std_missing"] = float(predicted["std"].mean())
        for method, part in predicted.groupby("method", sort=False):
            figures["mean_std_missing_by_method"][str(method)] = float(part["std"].mean())
            figures["n_missing_by_method"][str(method)] = int(len(part))
    preference = site_preference(surrogate, random_state=random_state)
    groups = preference[preference["rank"] == 1] if len(preference) else preference
    decided = decided_preferences(preference) if len(preference) else preference
    figures["n_site_groups"] = int(len(groups))
    figures["decided"] = int(len(decided))
    figures["decided_by_method"] = (
        {str(m): int(n) for m, n in decided["method"].value_counts().sort_index().items()}
        if len(decided) else {}
    )
    return figures


# ------------------------------------------------------------------ the folder


def round_folders(rounds_dir):
    """The complete round folders in ``rounds_dir``, as (round number, folder), in order.

    Raises
    ------
    DopantgapError
        For a round folder without ``metrics.json`` (an interrupted add) or a gap in the
        numbering.
    """
    folder = Path(rounds_dir)
    if not folder.exists():
        return []
    if not folder.is_dir():
        raise DopantgapError(f"{folder}: not a folder; give a rounds folder (created by 'dopantgap add --rounds-dir').")
    rounds = []
    for child in folder.iterdir():
        match = _ROUND.fullmatch(child.name)
        if match and child.is_dir():
            rounds.append((int(match.group(1)), child))
    rounds.sort()
    for expected, (number, child) in enumerate(rounds):
        if number != expected:
            raise DopantgapError(
                f"{folder}: round folders jump to {child.name} after round_{expected - 1}; "
                f"rounds are numbered 0, 1, 2 ... without gaps."
            )
        if not (child / METRICS_NAME).is_file():
            raise DopantgapError(
                f"{child}: no {METRICS_NAME}, so this round was not completed (interrupted?); "
                f"remove the folder {child} and run the add again."
            )
    return rounds


def _read_metrics(round_dir):
    path = Path(round_dir) / METRICS_NAME
    try:
        metrics = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as error:
        raise DopantgapError(f"{path}: not readable ({error}); remove the round folder and add the round again.") from error
    if not isinstance(metrics, dict) or metrics.get("format") != _FORMAT:
        raise DopantgapError(f"{path}: not a dopantgap round file.")
    return metrics


def _counts(cells):
    return {str(m): int(n) for m, n in cells["method"].value_counts().sort_index().items()}


def _write_round(round_dir, number, table, label, new_cells, cost, cost_spent_before,
                 surrogate, model_label, files, random_state):
    """Write one round folder; ``metrics.json`` last."""
    round_dir = Path(round_dir)
    write_table(table, round_dir / "table.csv")
    for name, source_path in files.items():
        write_bytes_atomic(round_dir / name, Path(source_path).read_bytes())
    cost_round = _cost_of(new_cells, cost) if len(new_cells) else 0.0
    metrics = {
        "format": _FORMAT,
        "round": number,
        "source": label,
        "table_sha256": table_hash(table),
        "files": {name: Path(path).name for name, path in files.items()},
        "n_cells": int(len(table)),
        "n_cells_by_method": _counts(table),
        "n_new_cells": int(len(new_cells)),
        "n_new_by_method": _counts(new_cells) if len(new_cells) else {},
        "cost_per_cell": None if cost is None else {str(k): float(v) for k, v in cost.items()},
        "cost_round": cost_round,
        "cost_spent": float(cost_spent_before) + cost_round,
        "model": model_label,
    }
    if surrogate is not None:
        metrics.update(round_metrics(surrogate.refreshed(table), random_state=random_state))
    write_text_atomic(round_dir / METRICS_NAME, json.dumps(metrics, indent=2, sort_keys=True) + "\n")
    return metrics


def record_round(rounds_dir, table, results, source=None, picks_path=None,
                    surrogate=None, model_label=None, cost=None, out_path=None, random_state=0):
    """Merge results into the table and record the round in a rounds folder.

    The first add to a folder also writes ``round_0`` with ``table`` as given. Later adds
    must start from the latest round's table (same :func:`table_hash`), so that the
    history is one unbroken chain.

    Parameters
    ----------
    rounds_dir : str or Path
        Rounds folder (created if needed); layout in the module docstring.
    table, results : DataFrame
        As for :func:`add_results`; ``results`` should come from ``read_table`` so that
        its file can be copied into the round folder.
    source : str or None, default=None
        Label of the new rows; None: ``"round K"``.
    picks_path : str or Path or None, default=None
        The picks file of this round, copied unchanged as ``picks.csv``.
    surrogate : Surrogate or None, default=None
        A fitted model; when given, the figures of ``round_metrics`` are recorded,
        computed with ``surrogate.refreshed(round table)``.
    model_label : str or None, default=None
        Where the model came from (recorded in metrics.json).
    cost : dict or None, default=None
        Method -> cost of one cell; methods not named cost 1.
    out_path : str or Path or None, default=None
        Where to write the merged table, after the merge succeeded and before the round
        folder is written (so a failed write leaves the rounds folder as it was).
    random_state : None, int, RandomState or Generator, default=0
        Seed of the site-preference draws (``reproducible.seed_integer``, checked
        before any work).

    Returns
    -------
    merged : DataFrame
    round_dir : Path
    """
    random_state = seed_integer(random_state)
    rounds_dir = Path(rounds_dir)
    rounds = round_folders(rounds_dir)
    if rounds:
        last_number, last_dir = rounds[-1]
        last = _read_metrics(last_dir)
        if last.get("table_sha256") != table_hash(table):
            raise DopantgapError(
                f"the table given is not the latest table of {rounds_dir} ({last_dir / 'table.csv'}); "
                f"add to that table (or the --out table of the last add), or start a new rounds folder."
            )
        cost_spent = float(last.get("cost_spent") or 0.0)
    else:
        last_number = 0
        cost_spent = 0.0
    number = last_number + 1
    label = f"round {number}" if source is None else str(source)
    merged = add_results(table, results, source=label)
    if picks_path is not None and not Path(picks_path).is_file():
        raise DopantgapError(f"--picks {picks_path}: no such file; give the picks CSV of this round.")
    if out_path is not None:
        write_table(merged, out_path)
    if not rounds:
        _write_round(rounds_dir / "round_0", 0, table, "start", table.iloc[0:0], cost, 0.0,
                     surrogate, model_label, {}, random_state)
    new_cells = merged.iloc[len(merged) - merged.attrs["n_added"]:]
    files = {}
    if "_file" in results.columns and len(results) and Path(str(results["_file"].iat[0])).is_file():
        files["results.csv"] = str(results["_file"].iat[0])
    if picks_path is not None:
        files["picks.csv"] = str(picks_path)
    round_dir = rounds_dir / f"round_{number}"
    _write_round(round_dir, number, merged, label, new_cells, cost, cost_spent,
                 surrogate, model_label, files, random_state)
    return merged, round_dir


def rounds_history(rounds_dir, surrogate=None, random_state=0):
    """How uncertainty and decided site preferences evolved, one row per round.

    Parameters
    ----------
    rounds_dir : str or Path
    surrogate : Surrogate or None, default=None
        Used only for rounds recorded without a model: their figures are computed now
        with ``surrogate.refreshed(round table)``.
    random_state : None, int, RandomState or Generator, default=0
        Seed of the site-preference draws (``reproducible.seed_integer``, checked
        before any work).

    Returns
    -------
    DataFrame
        Columns ``round, source, n_cells, n_new_cells, cost_spent, mean_std, decided,
        n_site_groups, figures`` (``recorded``, ``computed now`` or ``none``), then
        ``mean_std_<method>`` and ``decided_<method>`` per method.
    """
    random_state = seed_integer(random_state)
    rounds = round_folders(rounds_dir)
    if not rounds:
        raise DopantgapError(
            f"{rounds_dir}: no rounds found; record rounds with "
            f"'dopantgap add TABLE RESULTS.csv --out NEW.csv --rounds-dir {rounds_dir}'."
        )
    rows = []
    methods = []
    for number, round_dir in rounds:
        metrics = _read_metrics(round_dir)
        where = "recorded"
        if "decided" not in metrics:
            if surrogate is None:
                where = "none"
            else:
                round_table = read_table(round_dir / "table.csv")
                metrics.update(round_metrics(surrogate.refreshed(round_table), random_state=random_state))
                where = "computed now"
        by_method_std = metrics.get("mean_std_missing_by_method") or {}
        by_method_decided = metrics.get("decided_by_method") or {}
        for method in list(metrics.get("n_cells_by_method", {})) + list(by_method_std):
            if method not in methods:
                methods.append(method)
        row = {
            "round": number,
            "source": str(metrics.get("source", "")),
            "n_cells": int(metrics.get("n_cells", 0)),
            "n_new_cells": int(metrics.get("n_new_cells", 0)),
            "cost_spent": float(metrics.get("cost_spent", 0.0)),
            "mean_std": np.nan if metrics.get("mean_std_missing") is None else float(metrics["mean_std_missing"]),
            "decided": np.nan if "decided" not in metrics else float(metrics["decided"]),
            "n_site_groups": np.nan if "n_site_groups" not in metrics else float(metrics["n_site_groups"]),
            "figures": where,
        }
        row.update({f"mean_std_{m}": float(v) for m, v in by_method_std.items()})
        row.update({f"decided_{m}": float(v) for m, v in by_method_decided.items()})
        rows.append(row)
    history = pd.DataFrame(rows)
    for method in methods:
        for prefix, blank in (("mean_std_", np.nan), ("decided_", np.nan)):
            name = prefix + method
            if name not in history.columns:
                history[name] = blank
            elif prefix == "decided_":
                # a method absent from a round's decided counts had none decided then
                history[name] = history[name].where(history[name].notna() | history["decided"].isna(), 0.0)
    return history


def history_costs_are_counts(rounds_dir):
    """True when no round in the folder was given costs (cost spent = cells computed)."""
    return all(_read_metrics(folder).get("cost_per_cell") in (None, {})
               for _number, folder in round_folders(rounds_dir))


def history_text(history):
    """Aligned plain-text table of :func:`rounds_history` output, lines ending ``\\n``."""
    methods = [name[len("mean_std_"):] for name in history.columns if name.startswith("mean_std_")]
    headings = ["round", "source", "cells", "new", "cost spent", "mean std eV"]
    headings += [f"std {m} eV" for m in methods] + ["decided sites"]

    def number(value, digits):
        return "-" if pd.isna(value) else f"{value:.{digits}f}"

    body = []
    for row in history.to_dict(orient="records"):
        decided = "-" if pd.isna(row["decided"]) else f"{int(row['decided'])} of {int(row['n_site_groups'])}"
        body.append(
            [str(row["round"]), row["source"], str(row["n_cells"]), str(row["n_new_cells"]),
             number(row["cost_spent"], 0), number(row["mean_std"], 3)]
            + [number(row[f"mean_std_{m}"], 3) for m in methods] + [decided]
        )
    widths = [max(len(h), *(len(cells[i]) for cells in body)) for i, h in enumerate(headings)]

    def render(cells):
        return "  ".join(c.ljust(w) if i == 1 else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths))).rstrip()

    lines = [render(headings)] + [render(cells) for cells in body]
    if (history["figures"] == "none").any():
        lines.append("(-: recorded without a model; give --model MODEL_DIR to compute these figures)")
    if (history["figures"] == "computed now").any():
        lines.append("(rounds recorded without a model: figures computed now with the model given)")
    lines.append(f"decided: most probable lowest site with p_lowest > {DECIDED_PROBABILITY}")
    return "\n".join(lines) + "\n"
