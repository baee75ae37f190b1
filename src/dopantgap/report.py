"""One self-contained HTML page about a model folder: what was learned, filled and checked.

Everything the page needs is inside the file: figures as PNG data URIs, the style
sheet and a small script (sorting and filtering the filled table). It opens from a
disk or an e-mail attachment with no network. The answer comes first: a summary of
what was learned, how far to trust it (out-of-fold errors and coverage per scenario,
against the hand rules), the candidates (lowest predicted values of the main columns)
and the next picks, with the cautions (radioactive, toxic and extrapolated elements;
estimates do not replace calculation, experiment or local safety rules); then site
preferences, explanations (site choices first, then binding, then single columns;
a breakdown of every element asked for), the cross-validation figures (coverage out
of fold), periodic-table maps of the main columns, the table's coverage, next picks
and the rounds' history when given, and the filled table (past
``reporting.filled.MAX_EMBEDDED_ROWS`` rows: the cells that most need a look, and the
whole table in a CSV beside the page, linked). Long parts are folded (``<details>``);
the maps of a section sit in one row scrolled sideways.
"""

from pathlib import Path

import pandas as pd

from dopantgap import elements, plots
from dopantgap.atomic import write_text_atomic
from dopantgap.calibration import SCENARIOS
from dopantgap.errors import DopantgapError
from dopantgap.fill import fill_table, outside_levels, unfamiliar_elements
from dopantgap.reporting.explanations import EXPLANATION_FILES, read_explanations
from dopantgap.reporting.explanations import explanations_html as _explanations
from dopantgap.reporting.filled import MAX_EMBEDDED_ROWS, filled_csv_path, filled_html
from dopantgap.reporting.findings import findings_html as _findings
from dopantgap.reporting.rounds import picks_html as _picks, read_picks, read_rounds_folder, rounds_html as _rounds
from dopantgap.reporting.page import (
    escaped as _text,
    figure_html as _figure_html,
    folded as _folded,
    map_html as _map_html,
    section_html as _section,
    strip as _strip,
    table_html as _table,
)
from dopantgap.reporting.screening import read_screen, screening_html as _screening
from dopantgap.sites import site_preference
from dopantgap.table import coverage

__all__ = [
    "CAUTION",
    "EXPLANATION_FILES",
    "MAX_EMBEDDED_ROWS",
    "REPORT_STEPS",
    "build_report",
    "column_label",
    "filled_csv_path",
    "map_columns",
    "read_rounds_folder",
    "read_explanations",
    "read_picks",
    "read_screen",
]

#: The caution every report carries.
CAUTION = (
    "These numbers are estimates that help choose which calculations to run. They do not "
    "replace calculation, experiment or local safety rules."
)
#: Stages of ``build_report`` reported to its ``progress`` callback.
REPORT_STEPS = 8
# the page stays readable and small: at most this many main columns get maps; pick
# rows and figure resolution likewise (all common practice, no source)
_MAX_MAP_COLUMNS = 6
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
details{margin:.5em 0}
.strip{display:flex;overflow-x:auto;scroll-snap-type:x mandatory;gap:1.5em;border-top:1px solid #ccc;border-bottom:1px solid #ccc}
.strip>.slide{flex:0 0 100%;scroll-snap-align:start;min-width:0}
.slide-count{float:right;color:#555;font-size:.85em;margin-top:.4em}
details>summary{cursor:pointer;color:#23395b;font-weight:600;padding:.2em 0}
.findings{background:#fff;border:1px solid #cfd6e0;border-left:6px solid #23395b;padding:.5em 1.2em;margin-top:1em}
.findings h3{margin:.5em 0 .2em 0}
.findings ul{margin:.2em 0 .4em 0}
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


def column_label(host, site, method, quantity):
    """The label of a table column in ``--columns``: ``host/site/method/quantity``."""
    return f"{host}/{site}/{method}/{quantity}"


def map_columns(table, labels):
    """The columns named by ``--columns`` labels, in the order given.

    Parameters
    ----------
    table : DataFrame
        The model's table (element, host, site, method, quantity, ...).
    labels : sequence of str
        ``host/site/method/quantity`` labels (:func:`column_label`).

    Returns
    -------
    list of (host, site, method, quantity)

    Raises
    ------
    DopantgapError
        A label that names no column of the table (one line naming the valid ones).
    """
    known = {
        column_label(*column): column
        for column in table[["host", "site", "method", "quantity"]].drop_duplicates().itertuples(index=False, name=None)
    }
    chosen = []
    for label in labels:
        label = str(label).strip()
        if label not in known:
            raise DopantgapError(
                f"--columns {label}: no such column in the model's table; give host/site/method/quantity, "
                f"one of: {', '.join(known)}."
            )
        if known[label] not in chosen:
            chosen.append(known[label])
    if not chosen:
        raise DopantgapError(
            f"--columns: no column named; give host/site/method/quantity, one of: {', '.join(known)}."
        )
    return chosen


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
    "Letters in a tile's corner: R radioactive, T toxic, X outside the training data (no element "
    "of its block in the table, or farther from every table element than the domain limit)."
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
    lines.append(_folded("Model folder, table hash, levels, learner, seed and versions", '<dl class="facts">' + "".join(
        f"<dt>{_text(name)}</dt><dd>{_text(value)}</dd>" for name, value in facts
    ) + "</dl>"))
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


def _maps_rule(table, columns, levels, chosen_by_user):
    """Why these columns have maps: the rule that picked them, and how to pick others."""
    n_columns = len(table[["host", "site", "method", "quantity"]].drop_duplicates())
    labels = ", ".join(f"<code>{_text(column_label(*column))}</code>" for column in columns)
    if chosen_by_user:
        return (
            f"<p>Maps of the {len(columns)} column(s) chosen with <code>--columns</code>, in the order "
            f"given: {labels} (the table has {n_columns}).</p>"
        )
    n_pairs = len(table[["host", "quantity"]].drop_duplicates())
    capped = f" (the first {_MAX_MAP_COLUMNS} of {n_pairs})" if n_pairs > _MAX_MAP_COLUMNS else ""
    example = next(
        (column_label(*column) for column in table[["host", "site", "method", "quantity"]]
         .drop_duplicates().itertuples(index=False, name=None) if column not in columns),
        column_label(*columns[0]),
    )
    return (
        f"<p>Why these columns: for each host and quantity{capped}, the site computed for the most "
        f"elements, at the dearest level computed there ({_text(levels[-1])} is the dearest of "
        f"{_text(' < '.join(levels))}). That gives {len(columns)} of the table's {n_columns} columns: "
        f"{labels}. Choose others with <code>dopantgap report MODEL_DIR --columns "
        f"HOST/SITE/METHOD/QUANTITY,...</code>, e.g. <code>--columns {_text(example)}</code>.</p>"
    )


def _maps(filled, columns, tags, table=None, levels=(), chosen_by_user=False):
    parts = [] if table is None else [_maps_rule(table, columns, list(levels), chosen_by_user)]
    for host, site, method, quantity in columns:
        column = plots.column_values(filled, host, site, method, quantity)
        name = f"{quantity}, {host} {site}, {method}"
        figure = plots.periodic_map(
            column["value"], name, computed=column["computed"], tags=tags, spread=column["std"],
            outside=column["outside"],
        )
        scale = figure.spread_scale_
        parts.append(f"<h3>{_text(name)}</h3>")
        parts.append(_map_html(
            figure,
            f"Fill: the value (eV) of {name}, read on the colour strip under the table (cividis: its "
            f"order holds in grey). A predicted tile prints its calibrated standard deviation as "
            f"'± std' and draws it as the bar along its foot (a full bar is {scale:g} eV). Thick solid "
            f"frame: computed, the table's own value; thick dashed frame: predicted for an element "
            f"unlike those computed at {method} (outside the domain of the level); outline only: not "
            f"in the table or the request. {_TAG_CAPTION}",
            f"periodic table map of {name} with its uncertainty",
        ))
    return "\n".join(parts)


def _site_agreement(preference, host, quantity, methods):
    """One sentence: where the cheapest and the dearest level disagree on the lowest site."""
    if len(methods) < 2:
        return ""
    best = preference[
        (preference["host"] == host) & (preference["quantity"] == quantity) & (preference["rank"] == 1)
    ].drop_duplicates(["element", "method"])
    sites = best.pivot(index="element", columns="method", values="site")
    cheap, dear = methods[0], methods[-1]
    differ = sites[sites[cheap] != sites[dear]]
    if len(differ) == 0:
        return (
            f"<p>{_text(cheap)} and {_text(dear)} name the same most probable site for every "
            f"element shown.</p>"
        )
    listed = ", ".join(
        f"<b>{_text(element)}</b> ({_text(row[cheap])} at {_text(cheap)}, {_text(row[dear])} at {_text(dear)})"
        for element, row in differ.iterrows()
    )
    return (
        f"<p>{_text(cheap)} and {_text(dear)} name different most probable sites for "
        f"{len(differ)} element(s): {listed}. The dearer level is usually the one to trust; "
        f"computing it for these elements settles the question.</p>"
    )


def _site_maps(preference, surrogate, tags):
    if len(preference) == 0:
        return "<p>No quantity has two or more sites in a host: there is no site choice to show.</p>"
    parts = [(
        "<p>One map per host, quantity and level, cheapest level first, so the levels can be "
        "compared: a site choice that changes between levels is one the cheap level cannot settle.</p>"
    )]
    keys = preference[["host", "quantity", "method"]].drop_duplicates()
    for (host, quantity), rows in keys.groupby(["host", "quantity"], sort=False):
        methods = [level for level in surrogate.levels_ if level in set(rows["method"])]
        parts.append(f"<h3>{_text(quantity)} in {_text(host)}</h3>")
        parts.append(_site_agreement(preference, host, quantity, methods))
        for position, method in enumerate(methods):
            if len(methods) == 1:
                role = "the only level"
            elif position == 0:
                role = "the cheapest level"
            elif position == len(methods) - 1:
                role = "the dearest level"
            else:
                role = "an intermediate level"
            figure = plots.site_preference_map(preference, host, method, quantity, tags=tags)
            parts.append(_map_html(
                figure,
                f"Most probable lowest site of {quantity} in {host} at {method} ({role}), from 4000 "
                "joint draws of each element's sites. Colour, hatch and letter name the site; the "
                "number after the letter and the bar along the tile's foot are the probability that it "
                f"is the lowest (a pale tile: less sure). {_TAG_CAPTION}",
                f"site preference map of {host} at {method}",
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


def _calibration_html(surrogate):
    """Out-of-fold coverage, as ``validate`` draws it: each fold's hidden cells judged by
    the widths the other folds give; in-sample curves meet the diagonal by construction."""
    residuals = surrogate.cv_residuals_
    if "fold" in residuals.columns:
        return _figure_html(
            plots.calibration_figure(residuals, surrogate.calibration_, out_of_fold=True),
            "Out of fold (as 'dopantgap validate' draws it): the share of hidden cells inside their "
            "central interval at each level, each fold's cells judged by interval widths calibrated "
            "on the other folds only, so the curves test the calibration instead of repeating it. "
            "Solid: calibrated; dotted: raw Gaussian; on the diagonal is honest.",
            "out-of-fold interval coverage against nominal level",
        )
    return _figure_html(
        plots.calibration_figure(residuals, surrogate.calibration_),
        "In sample (this model folder records no folds, so no out-of-fold test is possible): the "
        "calibrated curve meets the nominal levels by construction. Refit to get the out-of-fold figure.",
        "in-sample interval coverage against nominal level",
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
        "(new-cell); with three or more hosts, whole hosts were hidden in turn too (new-host), then "
        "given back five of their cells (sparse-host). "
        "The model was refitted on the rest and predicted what was hidden. The "
        "calibrated coverage is cross-conformal: each fold's cells are judged by the interval "
        "widths the other folds' residuals give.</p>",
        _table(metrics[metrics["quantity"] == "all"].reset_index(drop=True), digits=3),
        _folded("Per quantity", _table(metrics, digits=3)),
        _folded("Learners against hand rules (baselines)", _baseline_comparison(manifest)),
        '<div class="pair">',
        _figure_html(
            plots.parity_figure(surrogate.cv_residuals_, calibration=surrogate.calibration_),
            "Hidden cells: predicted against computed (eV), error bars 1 calibrated std.",
            "parity plot of cross-validated predictions",
        ),
        _calibration_html(surrogate),
        "</div>",
    ]
    return "\n".join(parts)


# ----------------------------------------------------------------------------- entry point
def build_report(surrogate, manifest, out_path, element_symbols=(), explanation_dir=None, picks=None,
                 history=None, replay_curves=None, progress=None, model_dir=None, level=0.9,
                 columns=None, screen=None):
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
        History of the rounds (round, mean_std, decided, cost_spent) and replay curves
        (strategy, seed, round, cost_spent, error, decided).
    progress : callable or None, default=None
        Called with 1 after each of ``REPORT_STEPS`` stages (e.g. ``progress.bar``).
    model_dir : str, Path or None, default=None
        Shown in the summary.
    level : float, default=0.9
        Probability content of the filled table's intervals.
    columns : sequence of str or None, default=None
        ``host/site/method/quantity`` labels of the columns to map (``--columns``);
        None: per host and quantity, the site computed for the most elements at the
        dearest level (at most six).
    screen : DataFrame, str, Path or None, default=None
        A screen (``screening.screen``) or its CSV: adds a screening section (maps,
        ranked candidates, conditions, notes).

    Returns
    -------
    Path
        The file written.
    """
    step = progress if progress is not None else (lambda n=1: None)
    out_path = Path(out_path)
    explanations = read_explanations(explanation_dir) if explanation_dir is not None else None
    if picks is not None and not isinstance(picks, pd.DataFrame):
        picks = read_picks(picks)
    if screen is not None and not isinstance(screen, pd.DataFrame):
        screen = read_screen(screen)
    table = surrogate.table_
    element_symbols = list(element_symbols or ())
    chosen_columns = map_columns(table, columns) if columns is not None else _main_columns(table, surrogate.levels_)

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
    # the answer first (findings, site choice and what drives it, how far to trust it),
    # the maps and the table's coverage after; long parts folded
    sections = [
        ("summary", "What was done",
         _summary(surrogate, manifest, model_dir, filled, level, invented)
         + _findings(surrogate, manifest, filled, preference, picks, chosen_columns, extrapolated)
         + _cautions(surrogate, flags, extrapolated, level, outside)),
    ]
    if screen is not None:
        sections.append(("screen", "Screen: which elements meet the conditions", _screening(screen, invented)))
    step(1)
    sections.append(("sites", "Site preference", _strip(_site_maps(preference, surrogate, tags), "map")))
    step(1)
    sections.append(("explanations", "What drives the predictions", _explanations(explanations, element_symbols)))
    step(1)
    sections.append(("validation", "How well the error bars hold", _validation(surrogate, manifest)))
    step(1)
    sections.append(("maps", "Main columns on the periodic table", _strip(
        _maps(filled, chosen_columns, tags, table, surrogate.levels_, chosen_by_user=columns is not None), "map")))
    sections.append(("coverage", "What the table covers", _folded("Show the coverage of every column", _coverage(table))))
    if picks is not None:
        sections.append(("picks", "Next calculations", _picks(picks)))
    if history is not None or replay_curves is not None:
        sections.append(("rounds", "Rounds and replays",
                         _folded("Show the history of the rounds and the replays", _rounds(history, replay_curves))))
    step(1)
    sections.append(("filled", "The filled table", filled_html(filled, extrapolated, out_path)))

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
    write_text_atomic(out_path, page + "\n")
    step(1)
    return out_path
