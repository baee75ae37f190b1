"""The report's explanation section: what drives the predictions, site choices first.

Reads the folder ``dopantgap explain`` writes (one CSV per kind of table) and shows one
figure per target group: site choices first (the scientific question), then binding,
then single columns; it says how many targets the folder holds and which are shown,
and breaks down every element asked for.
"""

from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap import plots
from dopantgap.errors import DopantgapError
from dopantgap.reporting.page import escaped, figure_html, folded, read_csv

__all__ = ["EXPLANATION_FILES", "explanations_html", "read_explanations"]

#: Files read from an explanation folder, and the columns each must have.
EXPLANATION_FILES = {
    "importance": ("importance.csv", ("target", "feature", "importance")),
    "shap_values": ("shap_values.csv", ("target", "element", "feature", "feature_value", "shap")),
    "base_values": ("breakdowns.csv", ("target", "element", "base_value", "prediction")),
}
# the name breakdowns.csv had before explain wrote one file per kind of table
_OLD_BREAKDOWN_FILE = "base_values.csv"
# explanation groups drawn (the first shown, the others folded) and elements broken
# down in each (common practice, no source)
_MAX_GROUPS = 4
_MAX_BREAKDOWNS = 8


def read_explanations(folder):
    """The three tables of an explanation folder.

    Parameters
    ----------
    folder : str or Path
        Holds ``importance.csv``, ``shap_values.csv`` and ``breakdowns.csv`` (or
        ``base_values.csv``, its name in older folders), and ``targets.csv`` if written
        by ``dopantgap explain``.

    Returns
    -------
    dict
        "importance", "shap_values", "base_values" -> DataFrame; "targets" ->
        DataFrame or None.

    Raises
    ------
    DopantgapError
        A missing folder or file, or a file without the expected columns.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise DopantgapError(
            f"--explanations {folder}: no such folder; give the folder written by 'dopantgap explain'."
        )
    tables = {}
    for key, (name, columns) in EXPLANATION_FILES.items():
        if key == "base_values" and not (folder / name).is_file() and (folder / _OLD_BREAKDOWN_FILE).is_file():
            name = _OLD_BREAKDOWN_FILE
        frame = read_csv(folder / name, "explanation file", "--explanations")
        missing = [column for column in columns if column not in frame.columns]
        if missing:
            raise DopantgapError(
                f"--explanations {folder / name}: lacks the column(s) {', '.join(missing)}; "
                f"expected {', '.join(columns)}."
            )
        tables[key] = frame
    targets = folder / "targets.csv"
    tables["targets"] = read_csv(targets, "explanation file", "--explanations") if targets.is_file() else None
    return tables


def _group_of(target):
    """Group of a target named as ``dopantgap explain`` names them, for folders written
    without a group column: site choice, binding or column | quantity | host | level."""
    parts = [part.strip() for part in str(target).split("|")]
    if len(parts) != 4:
        return f"column | {target}", "column"
    if " - " in parts[3]:
        kind, (quantity, host, method) = "site choice", parts[:3]
    else:
        quantity, host, _site, method = parts
        kind = "binding" if "bind" in quantity.lower() else "column"
    return f"{kind} | {quantity} | {host} | {method}", kind


def _explanation_targets(explanations):
    """Every explained target with its group and kind, in question order: site choices,
    then binding, then single columns (the explain folder's order within each)."""
    names = list(dict.fromkeys(explanations["importance"]["target"].astype(str)))
    targets = explanations.get("targets")
    if targets is not None and "group" in targets.columns:
        known = dict(zip(targets["target"].astype(str), targets["group"].astype(str)))
        order = list(dict.fromkeys([t for t in targets["target"].astype(str) if t in set(names)] + names))
    else:
        known, order = {}, names
    rows = []
    for target in order:
        group = known.get(target) or _group_of(target)[0]
        kind = group.split("|")[0].strip()
        rows.append({"target": target, "group": group, "kind": kind if kind in _GROUP_KINDS else "column"})
    frame = pd.DataFrame(rows, columns=["target", "group", "kind"])
    rank = frame["kind"].map({kind: position for position, kind in enumerate(_GROUP_KINDS)})
    return frame.assign(_rank=rank).sort_values("_rank", kind="stable").drop(columns="_rank").reset_index(drop=True)


# kinds of explanation group, in the order the page shows them (as dopantgap.explain)
_GROUP_KINDS = ("site choice", "binding", "column")
_KIND_WORDS = {"site choice": "site choices", "binding": "binding targets", "column": "single columns"}


def _breakdown_elements(explanations, element_symbols):
    """Elements to break down: those asked for here, then those chosen in explain;
    and the asked ones the folder does not explain."""
    bases = explanations["base_values"]
    explained = set(bases["element"].astype(str))
    asked = [symbol for symbol in element_symbols if symbol in explained]
    missing = [symbol for symbol in element_symbols if symbol not in explained]
    chosen = []
    if "broken_down" in bases.columns:
        flags = bases["broken_down"].astype(str).str.lower().isin(("true", "1", "yes"))
        chosen = list(dict.fromkeys(bases.loc[flags, "element"].astype(str)))
    elements = list(dict.fromkeys(asked + chosen))
    if not elements and len(bases):
        # nothing asked: the element whose prediction moves farthest from the base value
        shift = (bases["prediction"].astype(float) - bases["base_value"].astype(float)).abs()
        elements = [str(bases["element"].iat[int(np.argmax(shift.to_numpy()))])]
    return elements, missing


def explanations_html(explanations, element_symbols):
    if explanations is None:
        return (
            "<p>No explanations in this report. Run <code>dopantgap explain</code> on this model "
            "folder (see <code>dopantgap explain --help</code>) and pass its output folder with "
            "<code>--explanations DIR</code>.</p>"
        )
    importance = explanations["importance"]
    shap_values = explanations["shap_values"]
    base_values = explanations["base_values"]
    order = _explanation_targets(explanations)
    groups = list(dict.fromkeys(order["group"]))
    shown = groups[:_MAX_GROUPS]
    counts = order.drop_duplicates("target")["kind"].value_counts()
    tally = ", ".join(
        f"{int(counts[kind])} {_KIND_WORDS[kind]}" for kind in _GROUP_KINDS if kind in counts.index
    )
    elements, missing = _breakdown_elements(explanations, list(element_symbols))
    capped = ""
    if len(elements) > _MAX_BREAKDOWNS:
        capped = f" (the first {_MAX_BREAKDOWNS} of {len(elements)}; the others are in breakdowns.csv)"
        elements = elements[:_MAX_BREAKDOWNS]
    parts = [
        "<p>SHAP values (Lundberg &amp; Lee 2017) split each prediction into a base value plus one "
        "shift per descriptor; the shifts add up to the prediction. The site-choice targets come "
        "first: they answer which site an impurity takes (a site's value minus the reference "
        "site's; positive means the reference site lies lower).</p>",
        f"<p>The explanation folder holds <b>{len(order)} targets</b> in {len(groups)} groups ({tally}). "
        f"Shown here: {len(shown)} group(s), " + ", ".join(f"<b>{escaped(group)}</b>" for group in shown)
        + (f"; the other {len(groups) - len(shown)} are in the folder (explain_&lt;group&gt;.png, "
           "importance.csv)." if len(groups) > len(shown) else ".") + "</p>",
        f"<p>Breakdowns of: {', '.join(f'<b>{escaped(symbol)}</b>' for symbol in elements)}{capped}.</p>",
    ]
    if missing:
        parts.append(
            f"<p class=\"note\">Not in the explanation folder: {escaped(', '.join(missing))}; run "
            f"<code>dopantgap explain MODEL_DIR --elements {escaped(','.join(missing))} --out DIR</code> "
            "to break them down too.</p>"
        )
    figures = []
    for group in shown:
        members = order[order["group"] == group]
        names = set(members["target"])
        figure = plots.group_figure(
            members, importance[importance["target"].astype(str).isin(names)],
            shap_values[shap_values["target"].astype(str).isin(names)],
            base_values[base_values["target"].astype(str).isin(names)], elements,
        )
        figures.append(f"<h3>{escaped(group)}</h3>" + figure_html(
            figure,
            f"{group}. Top: mean |SHAP value| (eV) of each descriptor for each target over the table's "
            "elements (disc area and number). Below: for each element, its prediction built step by "
            "step from the base value (plain bars raise it, hatched bars lower it), descriptor values "
            "with their units.",
            f"explanation of {group}",
        ))
    if figures:
        parts.append(figures[0])
    if len(figures) > 1:
        parts.append(folded(f"Show {len(figures) - 1} more group(s)", "\n".join(figures[1:])))
    return "\n".join(parts)
