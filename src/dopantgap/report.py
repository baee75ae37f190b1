"""One self-contained HTML page about a model folder: what was learned, filled and checked.

Everything the page needs is inside the file: figures as PNG data URIs, the style
sheet and a small script (sorting and filtering the filled table). It opens from a
disk or an e-mail attachment with no network. The page shows the job summary, the
table's coverage, periodic-table maps of the main columns (value and uncertainty),
site preferences, explanations (when an explanation folder is given), the
cross-validation figures, next picks and campaign history when given, the filled table
and the cautions (radioactive, toxic and extrapolated elements; estimates do not
replace calculation, experiment or local safety rules).
"""

import html
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap import elements, plots
from dopantgap.atomic import write_text_atomic
from dopantgap.calibration import SCENARIOS
from dopantgap.errors import DopantgapError
from dopantgap.fill import fill_table, outside_levels, unfamiliar_elements
from dopantgap.sites import site_preference
from dopantgap.table import coverage

__all__ = [
    "CAUTION",
    "EXPLANATION_FILES",
    "REPORT_STEPS",
    "build_report",
    "read_campaign_folder",
    "read_explanations",
    "read_picks",
]

#: The caution every report carries.
CAUTION = (
    "These numbers are estimates that help choose which calculations to run. They do not "
    "replace calculation, experiment or local safety rules."
)
#: Files read from an explanation folder, and the columns each must have.
EXPLANATION_FILES = {
    "importance": ("importance.csv", ("target", "feature", "importance")),
    "shap_values": ("shap_values.csv", ("target", "element", "feature", "feature_value", "shap")),
    "base_values": ("base_values.csv", ("target", "element", "base_value", "prediction")),
}
_HISTORY_COLUMNS = ("round", "mean_std", "decided", "cost_spent")
_REPLAY_COLUMNS = ("strategy", "seed", "round", "cost_spent", "error", "decided")
#: Stages of ``build_report`` reported to its ``progress`` callback.
REPORT_STEPS = 8
# the page stays readable and small: at most this many main columns get maps,
# explanation targets get figures, and elements get a breakdown per target; pick rows
# and figure resolution likewise (all common practice, no source)
_MAX_MAP_COLUMNS = 6
_MAX_TARGETS = 4
_MAX_BREAKDOWNS = 2
_MAX_PICK_ROWS = 200
_DPI = 80
_TAGS = {"radioactive": "R", "toxic": "T", "extrapolated": "X"}

_STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",Helvetica,Arial,sans-serif;margin:0;color:#1d1d1d;background:#fafaf7;line-height:1.45}
header{background:#23395b;color:#fff;padding:1.1em 2em}
header h1{margin:0 0 .2em 0;font-size:1.6em}
header p{margin:0;opacity:.9}
nav{background:#e8ebf0;padding:.5em 2em;font-size:.92em;position:sticky;top:0;z-index:2}
nav a{margin-right:1.1em;color:#23395b;text-decoration:none}
main{padding:0 2em 3em 2em;max-width:1500px}
section{margin-top:1.8em}
h2{border-bottom:2px solid #23395b;padding-bottom:.15em;font-size:1.3em}
h3{font-size:1.05em;margin-bottom:.3em}
.invented{background:#fff3c4;border:2px solid #b58900;padding:.6em 1em;font-weight:600;margin-top:1em}
.caution{background:#fde8e4;border-left:6px solid #b03a2e;padding:.6em 1em;margin-top:1em}
.caution ul{margin:.3em 0}
.pair{display:grid;grid-template-columns:repeat(auto-fit,minmax(560px,1fr));gap:1em}
figure{margin:.6em 0;background:#fff;border:1px solid #ddd;padding:.5em}
figure img{max-width:100%;height:auto;display:block}
figcaption{font-size:.86em;color:#444;margin-top:.3em}
table{border-collapse:collapse;font-size:.84em;background:#fff}
th,td{border:1px solid #d4d4d4;padding:.18em .5em;text-align:left}
td.num{text-align:right;font-variant-numeric:tabular-nums}
th{background:#eef0f4}
table.sortable th{cursor:pointer}
table.sortable th[data-order=up]::after{content:" \\25B2"}
table.sortable th[data-order=down]::after{content:" \\25BC"}
tr.flagged td{background:#fff1ee}
tr.computed td:first-child{font-weight:700}
.scroll{max-height:36em;overflow:auto;border:1px solid #ccc}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:.15em 1.2em}
dl.facts dt{font-weight:600}
dl.facts dd{margin:0;font-family:ui-monospace,monospace;font-size:.9em;word-break:break-all}
.note{color:#555;font-size:.9em}
input#filter{padding:.25em .5em;margin:.4em 0;width:22em}
"""

_SCRIPT = """
(function(){
 var each=function(list,f){Array.prototype.forEach.call(list,f);};
 each(document.querySelectorAll('table.sortable'),function(t){
  var heads=t.tHead.rows[0].cells;
  each(heads,function(th,i){
   th.addEventListener('click',function(){
    var body=t.tBodies[0],rows=Array.prototype.slice.call(body.rows);
    var up=th.getAttribute('data-order')!=='up';
    each(heads,function(h){h.removeAttribute('data-order');});
    th.setAttribute('data-order',up?'up':'down');
    rows.sort(function(a,b){
     var x=a.cells[i].textContent,y=b.cells[i].textContent,nx=parseFloat(x),ny=parseFloat(y);
     var c=(!isNaN(nx)&&!isNaN(ny))?nx-ny:x.localeCompare(y);
     return up?c:-c;});
    each(rows,function(r){body.appendChild(r);});
   });
  });
 });
 var box=document.getElementById('filter');
 if(box){box.addEventListener('input',function(){
  var words=box.value.toLowerCase();
  each(document.querySelectorAll('#filled tbody tr'),function(r){
   r.style.display=r.textContent.toLowerCase().indexOf(words)>=0?'':'none';});
 });}
 document.body.setAttribute('data-ready','yes');
})();
"""


# ----------------------------------------------------------------------------- inputs
def _read_csv(path, what, option):
    path = Path(path)
    if not path.is_file():
        raise DopantgapError(f"{option} {path}: no such file; give the {what} written by dopantgap.")
    try:
        return pd.read_csv(path)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as error:
        first_line = str(error).splitlines()[0] if str(error) else type(error).__name__
        raise DopantgapError(f"{option} {path}: not a readable CSV file ({first_line}).") from error


def read_explanations(folder):
    """The three tables of an explanation folder.

    Parameters
    ----------
    folder : str or Path
        Holds ``importance.csv``, ``shap_values.csv`` and ``base_values.csv``.

    Returns
    -------
    dict
        "importance", "shap_values", "base_values" -> DataFrame.

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
        frame = _read_csv(folder / name, "explanation file", "--explanations")
        missing = [column for column in columns if column not in frame.columns]
        if missing:
            raise DopantgapError(
                f"--explanations {folder / name}: lacks the column(s) {', '.join(missing)}; "
                f"expected {', '.join(columns)}."
            )
        tables[key] = frame
    return tables


def read_picks(path):
    """A next-picks CSV (as written by ``dopantgap next``) as a DataFrame.

    Raises
    ------
    DopantgapError
        When the file lacks the cell columns element, host, site, method, quantity.
    """
    picks = _read_csv(path, "next-picks CSV", "--picks")
    missing = [c for c in ("element", "host", "site", "method", "quantity") if c not in picks.columns]
    if missing:
        raise DopantgapError(
            f"--picks {path}:1: no column(s) {', '.join(missing)}; give the CSV that "
            f"'dopantgap next MODEL_DIR --out NEXT.csv' wrote."
        )
    return picks


def read_campaign_folder(folder, surrogate=None):
    """Campaign history and replay curves found in a folder.

    A campaign folder (round_0, round_1 ... written by ``dopantgap add --campaign``)
    gives the history through ``campaign.campaign_history``; a replay folder (its
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
    from dopantgap.campaign import campaign_history, campaign_rounds

    folder = Path(folder)
    if not folder.is_dir():
        raise DopantgapError(f"--campaign {folder}: no such folder.")
    history = campaign_history(folder, surrogate=surrogate) if campaign_rounds(folder) else None
    histories, curves = [], []
    for path in sorted(folder.glob("*.csv")):
        frame = _read_csv(path, "campaign file", "--campaign")
        if all(column in frame.columns for column in _REPLAY_COLUMNS):
            curves.append(frame)
        elif all(column in frame.columns for column in _HISTORY_COLUMNS):
            histories.append(frame)
    if history is None and histories:
        history = histories[0]
    if history is None and not curves:
        raise DopantgapError(
            f"--campaign {folder}: neither a campaign folder (round_0, round_1 ...) nor a folder "
            f"with a CSV of columns {', '.join(_HISTORY_COLUMNS)} (history) or "
            f"{', '.join(_REPLAY_COLUMNS)} (replay curves, e.g. 'dopantgap replay' output)."
        )
    replay = pd.concat(curves, ignore_index=True) if curves else None
    return history, replay


# ----------------------------------------------------------------------------- html helpers
def _text(value):
    return html.escape(str(value), quote=True)


def _cell(value, digits=3):
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
    return f"<td>{_text(value)}</td>"


def _table(frame, table_id=None, sortable=False, row_classes=None, digits=3):
    attributes = []
    if table_id:
        attributes.append(f'id="{table_id}"')
    if sortable:
        attributes.append('class="sortable"')
    head = "".join(f"<th>{_text(column)}</th>" for column in frame.columns)
    lines = [f"<table {' '.join(attributes)}><thead><tr>{head}</tr></thead><tbody>"]
    classes = [""] * len(frame) if row_classes is None else list(row_classes)
    for row, extra in zip(frame.itertuples(index=False, name=None), classes):
        opening = f'<tr class="{extra}">' if extra else "<tr>"
        lines.append(opening + "".join(_cell(value, digits) for value in row) + "</tr>")
    lines.append("</tbody></table>")
    return "\n".join(lines)


def _figure_html(figure, caption, alt):
    """A figure as an inline image with its caption; ``caption`` and ``alt`` are plain
    text (user labels welcome: they are escaped here, not by each caller)."""
    uri = plots.figure_to_data_uri(figure, dpi=_DPI)
    return (
        f'<figure><img src="{uri}" alt="{_text(alt)}">'
        f"<figcaption>{_text(caption)}</figcaption></figure>"
    )


def _section(section_id, title, body):
    return f'<section id="{section_id}"><h2>{_text(title)}</h2>\n{body}\n</section>'


# ----------------------------------------------------------------------------- content
def _is_invented(table):
    if "note" not in table.columns:
        return False
    notes = table["note"].astype(str).str.lower()
    return bool(notes.str.contains("invented", regex=False).any())


def _main_columns(table, levels):
    """Per host and quantity: the site computed for most elements, at the dearest level."""
    chosen = []
    for (host, quantity), rows in table.groupby(["host", "quantity"], sort=False):
        methods = [level for level in levels if level in set(rows["method"])]
        counts = rows.groupby("site", sort=False)["element"].nunique()
        site = counts.idxmax()
        chosen.append((host, site, methods[-1], quantity))
    return chosen[:_MAX_MAP_COLUMNS]


def _tags(flags, extrapolated):
    tags = {}
    for symbol, row in flags.iterrows():
        letters = ""
        if row["radioactive"]:
            letters += _TAGS["radioactive"]
        if row["toxic"]:
            letters += _TAGS["toxic"]
        if symbol in extrapolated:
            letters += _TAGS["extrapolated"]
        if letters:
            tags[symbol] = letters
    return tags


_TAG_CAPTION = (
    "Corner letters: R radioactive, T toxic, X outside the training data (no element of its "
    "block in the table, or farther from every table element than the domain limit). Colour "
    "maps cividis (values) and viridis (uncertainty) keep their order in grey."
)


def _summary(surrogate, manifest, model_dir, filled, level, invented):
    table = surrogate.table_
    info = manifest.get("table", {})
    versions = manifest.get("versions", {})
    n_predicted = int((filled["status"] == "predicted").sum())
    lines = [
        "<p>dopantgap learned the computed cells of the table below, checked its error bars by "
        "grouped cross-validation (whole elements, expensive cells and single cells hidden in turn) "
        f"and estimated every missing cell. This page shows {len(filled)} cells of "
        f"{filled['element'].nunique()} elements: {len(filled) - n_predicted} computed (the table's "
        f"own numbers, unchanged) and {n_predicted} predicted, with {level:.0%} central intervals.</p>"
    ]
    if invented:
        lines.append('<p class="invented">The table behind this report is INVENTED (demo data made by '
                     "dopantgap.world); its numbers are not physics.</p>")
    facts = [
        ("model folder", str(model_dir) if model_dir is not None else "(not given)"),
        ("table source", info.get("source") or "(not recorded)"),
        ("table SHA-256", info.get("sha256", "")),
        ("computed cells / elements", f"{len(table)} / {table['element'].nunique()}"),
        ("levels, cheapest first", " < ".join(surrogate.levels_)),
        ("expensive levels learned as", "corrections to the level below" if surrogate.correction else "separate models"),
        ("learner kept", {"gp": "Gaussian process", "boost": "boosted trees"}.get(surrogate.learner_, surrogate.learner_)),
        ("seed", manifest.get("seed", surrogate.random_state)),
        ("versions", ", ".join(f"{name} {version}" for name, version in sorted(versions.items()))),
    ]
    lines.append('<dl class="facts">' + "".join(
        f"<dt>{_text(name)}</dt><dd>{_text(value)}</dd>" for name, value in facts
    ) + "</dl>")
    return "\n".join(lines)


def _cautions(surrogate, flags, extrapolated, level, outside=None):
    items = []
    for symbol, row in flags.iterrows():
        if row["note"]:
            kind = "radioactive" if row["radioactive"] else "toxic"
            items.append(f'<li class="{kind}"><b>{_text(symbol)}</b>: {_text(row["note"])}</li>')
    for symbol, reason in extrapolated.items():
        items.append(
            f'<li class="extrapolated"><b>{_text(symbol)}</b>: outside the training data '
            f"({_text(reason)}): its estimates are extrapolations, whatever their interval says.</li>"
        )
    if outside is not None and len(outside):
        for method, part in outside.groupby("method", sort=False):
            per_element = part.groupby("element", sort=False).agg(
                n_cells=("n_cells", "sum"), nearest=("nearest", "first")
            )
            names = ", ".join(
                f"<b>{_text(element)}</b>" + (f" (nearest: {_text(row.nearest)})" if row.nearest else "")
                for element, row in per_element.iterrows()
            )
            items.append(
                f'<li class="extrapolated">At {_text(method)}, {len(per_element)} elements lie outside what '
                f"was computed at that level ({per_element['n_cells'].sum()} cells; the nearest element "
                f"computed there in brackets): {names}. Their estimates at that level extrapolate the "
                f"step between levels; computing one of them is the way to check.</li>"
            )
    for scenario in SCENARIOS:
        n_residuals = surrogate.calibration_.n_residuals(scenario)
        if n_residuals < 20:
            items.append(
                f"<li>The {scenario} intervals rest on only {n_residuals} cross-validated cells; "
                f"treat them as rough.</li>"
            )
    body = f"<p><b>{_text(CAUTION)}</b></p>"
    if items:
        body += "<ul>" + "".join(items) + "</ul>"
    else:
        body += "<p>No radioactive, toxic or extrapolated element among those shown.</p>"
    return f'<div class="caution">{body}</div>'


def _coverage(table):
    found = coverage(table)
    totals = found.attrs["totals"]
    shown = found[["host", "site", "method", "quantity", "n_elements_computed", "n_elements", "fraction_computed"]]
    shown = shown.rename(columns={
        "n_elements_computed": "elements computed", "n_elements": "elements in table",
        "fraction_computed": "share computed",
    })
    return (
        f"<p>{totals['n_rows']} rows; {totals['n_elements']} elements; {totals['n_columns']} columns "
        f"(host / site / method / quantity); {totals['n_computed']} of {totals['n_cells']} cells "
        f"computed ({100.0 * totals['fraction_computed']:.1f} %).</p>"
        + _table(shown, digits=2)
    )


def _maps(filled, columns, tags):
    parts = []
    for host, site, method, quantity in columns:
        column = plots.column_values(filled, host, site, method, quantity)
        name = f"{quantity}, {host} {site}, {method}"
        value_figure = plots.periodic_map(
            column["value"], f"{name}: value", computed=column["computed"], tags=tags
        )
        spread_figure = plots.spread_map(column, f"{name}: uncertainty (1 std)", tags=tags)
        parts.append(f"<h3>{_text(name)}</h3><div class=\"pair\">")
        parts.append(_figure_html(
            value_figure,
            f"Value (eV) of {name}. Bold frame: computed; thin dashed frame: predicted; grey: "
            f"not in the table or the request. {_TAG_CAPTION}",
            f"periodic table map of {name}",
        ))
        parts.append(_figure_html(
            spread_figure,
            "Calibrated standard deviation (eV) of the same column; computed cells have none.",
            f"periodic table map of the uncertainty of {name}",
        ))
        parts.append("</div>")
    return "\n".join(parts)


def _site_maps(preference, surrogate, tags):
    if len(preference) == 0:
        return "<p>No quantity has two or more sites in a host: there is no site choice to show.</p>"
    parts = []
    keys = preference[["host", "quantity", "method"]].drop_duplicates()
    for (host, quantity), rows in keys.groupby(["host", "quantity"], sort=False):
        methods = [level for level in surrogate.levels_ if level in set(rows["method"])]
        method = methods[-1]
        figure = plots.site_preference_map(preference, host, method, quantity, tags=tags)
        parts.append(_figure_html(
            figure,
            f"Most probable lowest site of {quantity} in {host} at {method}, "
            "from 4000 joint draws of each element's sites. Colour, hatch and letter name the site; "
            f"a pale box means the choice is uncertain. {_TAG_CAPTION}",
            f"site preference map of {host}",
        ))
    return "\n".join(parts)


def _explanations(explanations, element_symbols):
    if explanations is None:
        return (
            "<p>No explanations in this report. Run <code>dopantgap explain</code> on this model "
            "folder (see <code>dopantgap explain --help</code>) and pass its output folder with "
            "<code>--explanations DIR</code>.</p>"
        )
    importance = explanations["importance"]
    shap_values = explanations["shap_values"]
    base_values = explanations["base_values"]
    parts = [
        "<p>SHAP values (Lundberg &amp; Lee 2017) split each prediction into a base value plus one "
        "shift per feature; the shifts add up to the prediction.</p>"
    ]
    targets = list(dict.fromkeys(importance["target"].astype(str)))[:_MAX_TARGETS]
    for target in targets:
        parts.append(f"<h3>{_text(target)}</h3>")
        parts.append(_figure_html(
            plots.importance_figure(importance, shap_values, target),
            "Bars: mean |SHAP value| of each feature (eV). Dots: each element's shift, coloured by "
            "the feature's value.",
            f"feature importance for {target}",
        ))
        bases = base_values[base_values["target"].astype(str) == target]
        chosen = [symbol for symbol in element_symbols if symbol in set(bases["element"])]
        if not chosen and len(bases):
            shift = (bases["prediction"] - bases["base_value"]).abs()
            chosen = [bases["element"].iat[int(np.argmax(shift.to_numpy()))]]
        for symbol in chosen[:_MAX_BREAKDOWNS]:
            parts.append(_figure_html(
                plots.breakdown_figure(shap_values, base_values, target, symbol),
                f"How the prediction of {symbol} is built from the base value, step by step.",
                f"prediction breakdown of {symbol} for {target}",
            ))
    return "\n".join(parts)


def _baseline_comparison(manifest):
    """Pooled out-of-fold rows of every learner and baseline, as ``fit`` stored them."""
    rows = (manifest or {}).get("validation")
    if not rows:
        return ""
    frame = pd.DataFrame(rows)
    frame = frame[frame["quantity"] == "all"][["scenario", "model", "n", "mae", "rmse", "coverage", "chosen"]]
    frame = frame.rename(columns={
        "n": "cells", "mae": "mean |error| (eV)", "rmse": "rms error (eV)",
        "coverage": "90 % coverage", "chosen": "kept",
    })
    return (
        "<p>The same folds, scored for both learners and for baselines one could apply by hand "
        "(column mean; the nearest element of the same group; the cheaper level plus the usual "
        "shift; plain boosted trees on atomic number). A learner worth using beats them all.</p>"
        + _table(frame.reset_index(drop=True), digits=3, sortable=True)
    )


def _validation(surrogate, manifest=None):
    metrics = surrogate.cv_metrics_.copy()
    metrics = metrics.rename(columns={
        "n": "cells", "mae": "mean |error| (eV)", "rmse": "rms error (eV)",
        "coverage_raw": "raw 90 % coverage", "coverage_calibrated": "calibrated 90 % coverage",
        "chosen": "kept",
    })
    parts = [
        "<p>In each of the folds a group of elements was hidden entirely (new-element), the "
        "expensive cells of another group were hidden (upgrade) and single cells of the others "
        "(new-cell); the model was refitted on the rest and predicted what was hidden. The "
        "calibrated coverage is cross-conformal: each fold's cells are judged by the interval "
        "widths the other folds' residuals give.</p>",
        _table(metrics, digits=3),
        _baseline_comparison(manifest),
        '<div class="pair">',
        _figure_html(
            plots.parity_figure(surrogate.cv_residuals_, calibration=surrogate.calibration_),
            "Hidden cells: predicted against computed (eV), error bars 1 calibrated std.",
            "parity plot of cross-validated predictions",
        ),
        _figure_html(
            plots.calibration_figure(surrogate.cv_residuals_, surrogate.calibration_),
            "Share of hidden cells inside their central interval at each level; solid: calibrated, "
            "dotted: raw Gaussian.",
            "interval coverage against nominal level",
        ),
        "</div>",
    ]
    return "\n".join(parts)


def _picks(picks):
    shown = picks.head(_MAX_PICK_ROWS)
    more = f"<p class=\"note\">First {_MAX_PICK_ROWS} of {len(picks)} rows.</p>" if len(picks) > _MAX_PICK_ROWS else ""
    return "<p>The calculations proposed next, as given in the picks file.</p>" + _table(shown, sortable=True) + more


def _campaign(history, replay_curves):
    parts = []
    if history is not None:
        parts.append(_figure_html(
            plots.history_figure(history),
            "Mean predicted standard deviation (eV), site questions decided (P > 0.9) and cost spent after each round.",
            "campaign history",
        ))
    if replay_curves is not None:
        parts.append(_figure_html(
            plots.learning_curve_figure(replay_curves),
            "Replays of picking strategies on a table whose answers are known: error against cost "
            "spent (median over seeds, band 25th-75th percentile).",
            "replay learning curves",
        ))
    return "\n".join(parts)


def _filled_table(filled, extrapolated):
    shown = filled.copy()
    shown["caution"] = shown["caution"].astype(str)
    # a cell outside its own level's domain (an element unlike those computed there)
    level_note = "outside the domain of its level"
    outside_cell = shown["outside_domain"].astype(bool) & ~shown["element"].isin(list(extrapolated))
    shown.loc[outside_cell, "caution"] = [
        f"{text}; {level_note}" if text else level_note for text in shown.loc[outside_cell, "caution"]
    ]
    for symbol, reason in extrapolated.items():
        rows = shown["element"] == symbol
        note = f"outside the training data: {reason}"
        shown.loc[rows, "caution"] = [f"{text}; {note}" if text else note for text in shown.loc[rows, "caution"]]
    classes = [
        " ".join(filter(None, ["flagged" if caution else "", "computed" if status == "computed" else ""]))
        for caution, status in zip(shown["caution"], shown["status"])
    ]
    return (
        "<p>Every cell, computed (bold element) or predicted. Click a column heading to sort; type to "
        "filter. Rows with a caution are tinted.</p>"
        '<input id="filter" type="search" placeholder="filter rows, e.g. Ti or ZnS">'
        f'<div class="scroll">{_table(shown, table_id="filled", sortable=True, row_classes=classes, digits=4)}</div>'
    )


# ----------------------------------------------------------------------------- entry point
def build_report(surrogate, manifest, out_path, element_symbols=(), explanation_dir=None, picks=None,
                 history=None, replay_curves=None, progress=None, model_dir=None, level=0.9):
    """Write one self-contained HTML report of a fitted model.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted model (``store.load_model``).
    manifest : dict
        Its manifest (hash, versions, seed).
    out_path : str or Path
        HTML file to write (atomically).
    element_symbols : sequence of str, default=()
        Elements to add to the table's (as ``fill --elements``).
    explanation_dir : str, Path or None, default=None
        Folder with importance.csv, shap_values.csv, base_values.csv.
    picks : DataFrame, str, Path or None, default=None
        Next picks, shown as a table.
    history, replay_curves : DataFrame or None, default=None
        Campaign history (round, mean_std, decided, cost_spent) and replay curves
        (strategy, seed, round, cost_spent, error, decided).
    progress : callable or None, default=None
        Called with 1 after each of ``REPORT_STEPS`` stages (e.g. ``progress.bar``).
    model_dir : str, Path or None, default=None
        Shown in the summary.
    level : float, default=0.9
        Probability content of the filled table's intervals.

    Returns
    -------
    Path
        The file written.
    """
    step = progress if progress is not None else (lambda n=1: None)
    explanations = read_explanations(explanation_dir) if explanation_dir is not None else None
    if picks is not None and not isinstance(picks, pd.DataFrame):
        picks = read_picks(picks)
    table = surrogate.table_
    element_symbols = list(element_symbols or ())

    filled = fill_table(surrogate, element_symbols=element_symbols, level=level)
    shown_elements = list(dict.fromkeys(filled["element"]))
    flags = elements.element_flags(shown_elements)
    extrapolated = unfamiliar_elements(surrogate, element_symbols)
    outside = outside_levels(surrogate, filled, skip=extrapolated)
    tags = _tags(flags, extrapolated)
    step(1)
    preference = site_preference(surrogate, element_symbols=shown_elements)
    step(1)

    invented = _is_invented(table)
    sections = [
        ("summary", "What was done", _summary(surrogate, manifest, model_dir, filled, level, invented)
         + _cautions(surrogate, flags, extrapolated, level, outside)),
        ("coverage", "What the table covers", _coverage(table)),
        ("maps", "Main columns on the periodic table", _maps(filled, _main_columns(table, surrogate.levels_), tags)),
    ]
    step(1)
    sections.append(("sites", "Site preference", _site_maps(preference, surrogate, tags)))
    step(1)
    sections.append(("explanations", "What drives the predictions", _explanations(explanations, element_symbols)))
    step(1)
    sections.append(("validation", "How well the error bars hold", _validation(surrogate, manifest)))
    step(1)
    if picks is not None:
        sections.append(("picks", "Next calculations", _picks(picks)))
    if history is not None or replay_curves is not None:
        sections.append(("campaign", "Campaign", _campaign(history, replay_curves)))
    step(1)
    sections.append(("filled", "The filled table", _filled_table(filled, extrapolated)))

    title = "dopantgap report" + (" (INVENTED demo data)" if invented else "")
    navigation = "".join(f'<a href="#{section_id}">{_text(name)}</a>' for section_id, name, _ in sections)
    page = "\n".join([
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_text(title)}</title><style>{_STYLE}</style></head><body>",
        f"<header><h1>{_text(title)}</h1><p>{_text(CAUTION)}</p></header>",
        f"<nav>{navigation}</nav><main>",
        *(_section(section_id, name, body) for section_id, name, body in sections),
        "</main>",
        f"<script>{_SCRIPT}</script>",
        "</body></html>",
    ])
    out_path = Path(out_path)
    write_text_atomic(out_path, page + "\n")
    step(1)
    return out_path
