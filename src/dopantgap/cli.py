"""Command line: argument parsing only; the work is done by the library."""

import argparse
import os
import signal
import sys
import threading
import time
from pathlib import Path

from dopantgap import __version__
from dopantgap.errors import DopantgapError

__all__ = ["main"]

_CAUTION = (
    "Estimates guide which calculations to run; they do not replace calculation, "
    "experiment or local safety rules."
)


def _parse_levels(text):
    return [level.strip() for level in text.split(",") if level.strip()]


def _seed(text):
    """A --seed value: a whole number of at least 0 (what every random draw takes)."""
    try:
        value = int(text)
    except ValueError:
        value = -1
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number >= 0 (e.g. --seed 0)")
    return value


def _build_parser():
    parser = argparse.ArgumentParser(
        prog="dopantgap",
        description=(
            "Learn a table of DFT impurity energies and estimate its missing cells "
            "with calibrated uncertainty."
        ),
    )
    parser.add_argument("--version", action="version", version=f"dopantgap {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    commands.required = True

    def add_table_options(command):
        command.add_argument("table", metavar="TABLE", help="CSV or XLSX table, long or wide layout")
        command.add_argument(
            "--layout", choices=("auto", "long", "wide"), default="auto",
            help="table layout (default: auto: wide when there is no 'value' column)",
        )
        command.add_argument("--sheet", default=None, help="worksheet name of an XLSX file")

    check = commands.add_parser("check", help="read a table, name any problem in it and show what it covers")
    add_table_options(check)
    check.add_argument(
        "--hosts", default=None, metavar="HOST_FILE",
        help="CSV with columns host,formula for host labels that are not formulas (as for fit)",
    )

    def add_learning_options(command, learner_help):
        command.add_argument("--seed", type=_seed, default=0, help="random seed (default: 0)")
        command.add_argument(
            "--levels", type=_parse_levels, default=None, metavar="CHEAP,...,DEAR",
            help="methods from cheapest to most expensive (default: most computed first)",
        )
        command.add_argument("--learner", choices=("auto", "gp", "boost"), default="auto", help=learner_help)
        command.add_argument(
            "--hosts", default=None, metavar="HOST_FILE",
            help="CSV with columns host,formula for host labels that are not formulas",
        )
        command.add_argument(
            "--suspect-values", choices=("refuse", "warn"), default="refuse",
            help="values a meV or kJ/mol slip or a flipped sign would explain: refuse the table "
                 "(default) or keep them with a warning each ('check' lists them)",
        )
        command.add_argument("--quiet", action="store_true", help="print nothing but errors")

    fit = commands.add_parser("fit", help="learn a table and save a model folder")
    add_table_options(fit)
    fit.add_argument("--out", required=True, metavar="MODEL_DIR", help="model folder to write")
    add_learning_options(
        fit, "gp: Gaussian process; boost: boosted trees; auto: the better in cross-validation"
    )

    validate_command = commands.add_parser(
        "validate",
        help="out-of-fold error and interval coverage of every learner and baseline, per scenario",
    )
    add_table_options(validate_command)
    validate_command.add_argument(
        "--out", required=True, metavar="DIR", help="folder for metrics.csv, the per-element breakdowns and figures"
    )
    add_learning_options(validate_command, "learners to validate (default: auto = both)")

    fill = commands.add_parser("fill", help="estimate every missing cell with an interval")
    fill.add_argument("model", metavar="MODEL_DIR", help="model folder written by 'fit'")
    fill.add_argument(
        "--out", required=True, metavar="FILLED.csv",
        help="filled table to write: .csv, or .xlsx for an Excel workbook",
    )
    fill.add_argument(
        "--format", default="long", metavar="long|wide",
        help="long: one row per cell (default); wide: one row per element, one column per "
             "host/site/method/quantity with its std, lo, hi and status beside it",
    )
    fill.add_argument(
        "--elements", default=None, metavar="Ti,V,Cr",
        help="elements to add to those of the table, comma-separated",
    )
    fill.add_argument(
        "--level", type=float, default=0.9,
        help="probability content of the lo..hi interval (default: 0.9)",
    )
    fill.add_argument(
        "--sites-out", default=None, metavar="PATH",
        help="site preference file, .csv or .xlsx (default: site_preference.csv, or .xlsx for a "
             "workbook, beside FILLED.csv)",
    )
    fill.add_argument("--quiet", action="store_true", help="print nothing but errors")

    pick = commands.add_parser(
        "next",
        help="rank the missing cells worth calculating next",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "Rank cells not yet computed by what calculating them would teach, per unit\n"
            "cost. The K picks are chosen as a batch: after each pick its result is taken\n"
            "as known at the predicted mean and the others are scored again.\n\n"
            "goals:\n"
            "  table   expected drop of the predictive variance (eV^2) summed over every\n"
            "          missing cell of the method(s): sum_j C[j,i]^2 / C[i,i] for the joint\n"
            "          calibrated covariance C (Rasmussen & Williams 2006, eq. 2.24)\n"
            "  site    expected drop of the entropy (bits) of which site is lowest, for\n"
            "          the candidate's element and host\n"
            "  window  expected drop of the binary entropy (bits) of 'value inside\n"
            "          LOW..HIGH eV', summed over the missing cells of QUANTITY\n"
            "benefit / cost ranks; costs per method default to 1."
        ),
    )
    pick.add_argument("model", metavar="MODEL_DIR", help="model folder written by 'fit'")
    pick.add_argument("--out", required=True, metavar="NEXT.csv", help="ranked picks to write")
    pick.add_argument("--count", default="5", metavar="K", help="number of picks (default: 5)")
    pick.add_argument(
        "--goal", default=None, metavar="table|site|window",
        help="acquisition rule (default: table; window when --window is given)",
    )
    pick.add_argument(
        "--method", default=None, metavar="NAME",
        help="propose and count only this method's cells (default: every method's)",
    )
    pick.add_argument(
        "--cost", default=None, metavar="gga=1,hyb=30",
        help="cost of one calculation per method (default: 1 each)",
    )
    pick.add_argument(
        "--window", default=None, metavar="QUANTITY:LOW:HIGH",
        help="window of the window goal in eV, e.g. E_bind:-1.2:-0.4",
    )
    pick.add_argument(
        "--elements", default=None, metavar="Ti,V,Cr",
        help="elements to add to those of the table, comma-separated",
    )
    pick.add_argument("--seed", type=_seed, default=0, help="seed of the site goal's draws (default: 0)")
    pick.add_argument("--quiet", action="store_true", help="print nothing but errors")

    explain = commands.add_parser(
        "explain", help="SHAP values of the model's columns and site choices in element descriptors"
    )
    explain.add_argument("model", metavar="MODEL_DIR", help="model folder written by 'fit'")
    explain.add_argument(
        "--out", required=True, metavar="DIR",
        help="folder for targets.csv, importance.csv, shap_values.csv, breakdowns.csv and one "
        "explain_<group>.png per target group (site choices first)",
    )
    explain.add_argument(
        "--elements", default=None, metavar="Ti,V,Cr",
        help="elements to break down in every figure (default: the table's first 3); new elements are explained too",
    )
    explain.add_argument("--seed", type=_seed, default=0, help="seed of the background sample (default: 0)")
    explain.add_argument("--quiet", action="store_true", help="print nothing but errors")

    add = commands.add_parser(
        "add", help="merge new results into the table, with provenance; optionally record the round"
    )
    add.add_argument("table", metavar="TABLE", help="the table so far (CSV or XLSX)")
    add.add_argument("results", metavar="RESULTS.csv", help="new computed cells, long layout")
    add.add_argument("--out", required=True, metavar="NEW_TABLE.csv", help="merged table to write")
    add.add_argument(
        "--source", default=None, metavar="LABEL",
        help="provenance of the new rows (default: the results file's name; 'round K' with --rounds-dir)",
    )
    add.add_argument(
        "--rounds-dir", default=None, metavar="DIR",
        help="rounds folder: record this round in DIR/round_K (table, results, picks, metrics)",
    )
    add.add_argument("--picks", default=None, metavar="NEXT.csv", help="the picks of this round, kept in the round folder")
    add.add_argument(
        "--model", default=None, metavar="MODEL_DIR",
        help="with --rounds-dir: record predicted uncertainty and decided sites of the round (model relearned on it)",
    )
    add.add_argument("--cost", default=None, metavar="gga=1,hyb=30", help="cost of one cell per method (default: 1 each)")
    add.add_argument("--quiet", action="store_true", help="print nothing but errors")

    history = commands.add_parser("history", help="how uncertainty and decided site preferences evolved per round")
    history.add_argument("rounds_dir", metavar="ROUNDS_DIR", help="rounds folder written by 'add --rounds-dir'")
    history.add_argument("--out", default=None, metavar="history.png", help="figure to write")
    history.add_argument(
        "--model", default=None, metavar="MODEL_DIR",
        help="compute the figures of rounds recorded without a model",
    )

    replay = commands.add_parser(
        "replay",
        help="on a completed table, replay picks against random ones and write learning curves",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "Hide part of a completed table (the --method level of all but a seeded\n"
            "--keep-fraction of the elements that have it), learn the rest, and reveal\n"
            "hidden cells round by round: the picker's picks, and random picks among the\n"
            "same hidden cells for several seeds. Writes curves.csv, summary.csv, picks.csv,\n"
            "hidden.csv, settings.json and learning_curves.png into --out."
        ),
    )
    add_table_options(replay)
    replay.add_argument("--goal", default="table", metavar="table[,site,window]", help="picker goal(s) (default: table)")
    replay.add_argument("--rounds", default="4", metavar="R", help="rounds (default: 4)")
    replay.add_argument("--per-round", default="5", metavar="K", help="cells revealed per round (default: 5)")
    replay.add_argument("--method", default=None, metavar="NAME", help="level hidden and picked (default: the most expensive)")
    replay.add_argument("--cost", default=None, metavar="gga=1,hyb=30", help="cost of one cell per method (default: 1 each)")
    replay.add_argument("--seeds", default="5", metavar="N", help="random-pick seeds (default: 5)")
    replay.add_argument("--seed", default="0", metavar="N", help="seed of the hiding, fit and picks (default: 0)")
    replay.add_argument(
        "--keep-fraction", default="0.2", metavar="F",
        help="share of elements whose --method cells stay visible (default: 0.2)",
    )
    replay.add_argument(
        "--learner", choices=("auto", "gp", "boost"), default="auto", help="learner of the surrogate (default: auto)"
    )
    replay.add_argument("--window", default=None, metavar="QUANTITY:LOW:HIGH", help="window of the window goal, eV")
    replay.add_argument("--out", default="replay", metavar="DIR", help="folder for the files (default: replay)")
    replay.add_argument("--quiet", action="store_true", help="print nothing but errors")

    report = commands.add_parser("report", help="write one self-contained HTML page about a model")
    report.add_argument("model", metavar="MODEL_DIR", help="model folder written by 'fit'")
    report.add_argument("--out", default="report.html", metavar="REPORT.html", help="page to write (default: report.html)")
    report.add_argument("--elements", default=None, metavar="Ti,V,Cr", help="elements to add to those of the table")
    report.add_argument("--explanations", default=None, metavar="DIR", help="folder written by 'explain'")
    report.add_argument("--picks", default=None, metavar="NEXT.csv", help="picks written by 'next'")
    report.add_argument("--rounds-dir", default=None, metavar="DIR", help="rounds folder (from 'add') or replay folder")
    report.add_argument(
        "--columns", default=None, metavar="HOST/SITE/METHOD/QUANTITY,...",
        help="table columns to draw on the periodic table, e.g. ZnS/sub_Zn/hyb/E_sol (default: per host "
             "and quantity, the site computed for the most elements, at the dearest level)",
    )
    report.add_argument("--quiet", action="store_true", help="print nothing but errors")

    demo = commands.add_parser("demo", help="run the whole job on an invented table")
    demo.add_argument("--out", default="dopantgap_demo", metavar="DIR", help="folder for the demo's files")

    for command in (fill, pick, explain, add, history, report):
        command.add_argument(
            "--accept-other-versions", action="store_true",
            help="load a model made with other versions of scikit-learn, dopantgap, numpy, scipy, "
            "pandas or joblib (its predictions may differ from those it gave when fitted)",
        )
    return parser


def _load_model(arguments, folder, say):
    """``store.load_model`` with --accept-other-versions; what differs is said as notes."""
    import warnings

    from dopantgap.store import ModelVersionWarning, load_model

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ModelVersionWarning)
        loaded = load_model(folder, allow_version_drift=arguments.accept_other_versions)
    for warning in caught:
        if issubclass(warning.category, ModelVersionWarning):
            say(f"note: {warning.message}")
        else:
            warnings.warn_explicit(warning.message, warning.category, warning.filename, warning.lineno)
    return loaded


# Options naming a file or folder that a command writes.
_OUTPUT_OPTIONS = {"out": "--out", "sites_out": "--sites-out"}


# store.MANIFEST_NAME, repeated so that a path with no manifest above it is passed without
# importing store (numpy, pandas, scikit-learn: seconds); a test keeps the two equal
_MANIFEST_NAME = "manifest.json"


def _manifest_above(path):
    """Whether ``path`` or a folder above it holds a file named like a model manifest."""
    path = Path(os.path.abspath(path))
    return any((folder / _MANIFEST_NAME).is_file() for folder in (path, *path.parents))


def _refuse_outputs_in_model_folders(arguments):
    """Refuse, before any work, an output inside a model folder: the folder would then
    refuse to load (it holds only the files its manifest lists) or lose a file."""
    for attribute, option in _OUTPUT_OPTIONS.items():
        path = getattr(arguments, attribute, None)
        if path is None or (arguments.command == "fit" and attribute == "out"):
            continue  # fit's --out is a model folder: store.check_model_target judges it
        if not _manifest_above(path):
            continue  # no manifest anywhere above: certainly not inside a model folder
        from dopantgap.store import model_folder_containing

        folder = model_folder_containing(path)
        if folder is not None:
            raise DopantgapError(
                f"{option} {path}: lies inside the model folder {folder}, which holds only what "
                f"'fit' wrote (another file there makes it refuse to load); write it elsewhere."
            )


class _Terminated(BaseException):
    """SIGTERM as an exception: files being written are cleaned up and workers stopped."""


def _raise_terminated(signum, frame):
    raise _Terminated()


def _command_check(arguments, say):
    from dopantgap.checkup import checkup_text, host_readings, site_readings
    from dopantgap.table import read_table, shown, suspect_values

    table = read_table(arguments.table, layout=arguments.layout, sheet=arguments.sheet)
    for notice in table.attrs.get("notices", []):
        say(f"note: {shown(notice)}")
    hosts = host_readings(table, arguments.hosts)
    suspects = suspect_values(table)
    say(f"{arguments.table}: readable" + (", no problems found." if len(suspects) == 0 else "."))
    say(checkup_text(table, hosts, site_readings(table, hosts), suspects))
    if len(suspects):
        raise DopantgapError(
            f"{len(suspects)} suspect value(s), listed above: 'fit' refuses the table until they "
            "are corrected, or keeps them with --suspect-values warn if they are right."
        )


def _table_and_estimator(arguments, say):
    """The table named on the command line and an unfitted surrogate with its options."""
    from dopantgap import elements
    from dopantgap.surrogate import Surrogate
    from dopantgap.table import read_table

    table = read_table(arguments.table, layout=arguments.layout, sheet=arguments.sheet)
    for notice in table.attrs.get("notices", []):
        say(f"note: {notice}")
    _say_suspects(arguments, say, table)
    hosts = elements.read_host_file(arguments.hosts) if arguments.hosts else None
    estimator = Surrogate(
        learner=arguments.learner, levels=arguments.levels, host_compositions=hosts,
        random_state=arguments.seed, suspect_values=arguments.suspect_values,
    )
    return table, estimator


def _say_suspects(arguments, say, table):
    """List suspect values before a fit refuses them, or warn of each one kept."""
    import warnings

    from dopantgap.errors import SuspectValueWarning
    from dopantgap.table import shown, suspect_values

    suspects = suspect_values(table)
    if arguments.suspect_values == "warn":
        for message in suspects["message"]:
            # on stderr, and even with --quiet: a value kept against the check must be seen
            print(f"WARNING: suspect value kept (--suspect-values warn): {shown(message)}", file=sys.stderr)
        # listed here once; the library's warning of each would repeat them
        warnings.filterwarnings("ignore", category=SuspectValueWarning)
    elif len(suspects) > 1:
        for message in suspects["message"]:
            say(f"suspect value: {shown(message)}")


def _learner_bar(arguments):
    from dopantgap.progress import bar

    n_candidates = 2 if arguments.learner == "auto" else 1
    return bar(n_candidates, "learners fitted and cross-validated", quiet=arguments.quiet)


def _command_fit(arguments, say):
    from dopantgap.store import check_model_target, save_model
    from dopantgap.validate import validation_metrics, validation_text

    # before any work: the folder is replaced whole at the end, never an input with it
    check_model_target(arguments.out, inputs=[arguments.table, arguments.hosts])
    table, estimator = _table_and_estimator(arguments, say)
    started = time.perf_counter()
    say(f"Learning {len(table)} computed cells of {table['element'].nunique()} elements ...")
    with _learner_bar(arguments) as progress:
        surrogate = estimator.fit(table, progress=progress)
    metrics, _predictions = validation_metrics(surrogate, random_state=arguments.seed)
    save_model(surrogate, arguments.out, source=arguments.table, validation=metrics)
    elapsed = time.perf_counter() - started
    say(f"Levels, cheapest first: {' < '.join(surrogate.levels_)}")
    say(f"Learner kept: {surrogate.learner_} (lowest cross-validated error, whole elements held out)")
    pooled = metrics[metrics["quantity"] == "all"]
    say(validation_text(metrics).rstrip("\n"))
    for scenario in sorted(surrogate.calibration_.borrowed_):
        if scenario in set(pooled["scenario"]):
            say(
                f"note: few cross-validated {scenario} cells; their intervals use the residuals "
                f"of all scenarios pooled. Compute more cells to calibrate it on its own."
            )
    say(f"Model folder written: {arguments.out} ({elapsed:.1f} s)")


def _command_validate(arguments, say):
    from dopantgap.validate import breakdown_text, validate, validation_text, write_validation

    table, estimator = _table_and_estimator(arguments, say)
    started = time.perf_counter()
    say(f"Validating on {len(table)} computed cells of {table['element'].nunique()} elements ...")
    with _learner_bar(arguments) as progress:
        result = validate(table, estimator=estimator, random_state=arguments.seed, progress=progress)
    paths = write_validation(result, arguments.out)
    say(validation_text(result.metrics).rstrip("\n"))
    say("new-element: all cells of an element hidden together; new-cell: single cells of computed "
        "elements; upgrade: expensive cells whose cheap level is computed.")
    say("gp, boost: the learners ('fit' keeps the marked one); 'auto, chosen per fold': the choice "
        "between them judged out of fold (each fold predicted by the learner the other folds chose). "
        "Baselines are rules one could follow by hand, for comparison; level-shift is listed for "
        "upgrade only (elsewhere no cheaper level is computed and it would repeat the column mean).")
    say("Coverage is out of fold: each fold judged by the interval widths the other folds give.")
    say()
    say(f"Where the kept learner ({result.surrogate.learner_}) fails, element by element "
        f"(in full: elements.csv, groups.csv, folds.csv):")
    say(breakdown_text(result.elements, result.groups, result.folds).rstrip("\n"))
    say(f"Files in {arguments.out}: {', '.join(Path(path).name for path in paths)} "
        f"({time.perf_counter() - started:.0f} s)")


def _same_file(first, second):
    first, second = Path(first), Path(second)
    if first.exists() and second.exists():
        return os.path.samefile(first, second)
    return first.resolve() == second.resolve()


def _fill_outputs(arguments, surrogate, manifest, say):
    """The site preference file of ``fill``, after refusing outputs that would replace an input.

    The filled table or the site preferences written over the table the model learned
    would destroy the user's own numbers; an existing site preference file beside the
    filled table is replaced only with a note saying so.
    """
    from dopantgap.table import check_output_suffix

    suffix = check_output_suffix(arguments.out, "--out")
    sites_out = arguments.sites_out or str(Path(arguments.out).with_name(f"site_preference{suffix}"))
    check_output_suffix(sites_out, "--sites-out")
    inputs = set(surrogate.table_["_file"]) if "_file" in surrogate.table_.columns else set()
    recorded = manifest.get("table") if isinstance(manifest, dict) else None
    source = recorded.get("source") if isinstance(recorded, dict) else None
    if isinstance(source, str) and source:
        inputs.add(source)
    outputs = {"--out": arguments.out, "--sites-out": sites_out}
    for option, path in outputs.items():
        for table_path in sorted(inputs):
            if _same_file(path, table_path):
                shown = option if option == "--out" or arguments.sites_out else "the site preference file"
                raise DopantgapError(
                    f"{shown} {path} is the table the model was fitted on and would be replaced; "
                    f"give {option} another file name."
                )
    if _same_file(arguments.out, sites_out):
        raise DopantgapError(
            f"--out and the site preference file are both {sites_out}; give --sites-out another name."
        )
    if not arguments.sites_out and Path(sites_out).exists():
        say(f"note: replacing the existing {sites_out} (site preferences; --sites-out writes them elsewhere)")
    return sites_out


def _command_fill(arguments, say):
    from dopantgap.fill import (
        check_fill_format, fill_table, outside_levels, parse_element_list, unfamiliar_elements, wide_filled,
    )
    from dopantgap.sites import site_preference
    from dopantgap.table import check_output_suffix, write_table

    layout = check_fill_format(arguments.format)
    check_output_suffix(arguments.out, "--out")
    if arguments.sites_out:
        check_output_suffix(arguments.sites_out, "--sites-out")
    extra = parse_element_list(arguments.elements) if arguments.elements else []
    surrogate, manifest = _load_model(arguments, arguments.model, say)
    sites_out = _fill_outputs(arguments, surrogate, manifest, say)
    filled = fill_table(surrogate, element_symbols=extra, level=arguments.level)
    write_table(wide_filled(filled) if layout == "wide" else filled, arguments.out)
    preference = site_preference(surrogate, element_symbols=list(dict.fromkeys(filled["element"])))
    write_table(preference, sites_out)
    predicted = filled[filled["status"] == "predicted"]
    say(
        f"{len(filled)} cells: {len(filled) - len(predicted)} computed (unchanged), "
        f"{len(predicted)} predicted with {arguments.level:.0%} intervals -> {arguments.out}"
        + (f" (wide: {filled['element'].nunique()} element rows)" if layout == "wide" else "")
    )
    for scenario, part in predicted.groupby("scenario"):
        say(f"  {scenario:<12} {len(part):>6} cells, median interval width {float((part['hi'] - part['lo']).median()):.2f} eV")
    for scenario in sorted(set(predicted["scenario"])):
        n_residuals = surrogate.calibration_.n_residuals(scenario)
        if n_residuals < 20:
            say(
                f"caution: the {scenario} intervals rest on only {n_residuals} cross-validated "
                f"cells; treat them as rough until the table has more computed cells."
            )
    if len(preference):
        say(f"Site preferences -> {sites_out}")
    else:
        say(f"No quantity has two or more sites in a host: {sites_out} lists no site preference.")
    unfamiliar = unfamiliar_elements(surrogate, extra)
    for symbol, reason in unfamiliar.items():
        say(
            f"caution: {symbol} lies outside the training data ({reason}): its estimates are "
            f"extrapolations; they do not replace calculation, experiment or local safety rules."
        )
    _say_outside_levels(say, outside_levels(surrogate, filled, skip=unfamiliar))
    flagged = filled.loc[filled["caution"] != "", ["element", "caution"]].drop_duplicates()
    for row in flagged.itertuples(index=False):
        say(f"caution: {row.element}: {row.caution}")
    say(_CAUTION)


def _say_outside_levels(say, outside):
    """One caution line per level listing the elements whose estimates extrapolate it."""
    for method, part in outside.groupby("method", sort=False):
        per_element = part.groupby("element", sort=False).agg(
            n_cells=("n_cells", "sum"), reason=("reason", "first"), nearest=("nearest", "first")
        )
        names = [
            f"{element} ({row.nearest})" if row.nearest else element for element, row in per_element.iterrows()
        ]
        say(
            f"caution: at {method}, {', '.join(names)} lie outside what was computed at that level "
            f"(in brackets the nearest element computed there; {per_element['n_cells'].sum()} cells, "
            f"e.g. {per_element.index[0]}: {per_element['reason'].iat[0]}): those estimates extrapolate "
            f"the step between levels; computing one of them is the way to check."
        )


def _command_next(arguments, say):
    from dopantgap.fill import outside_levels, parse_element_list, unfamiliar_elements
    from dopantgap.picker import parse_cost, parse_window, pick_next
    from dopantgap import elements
    from dopantgap.table import write_table

    extra = parse_element_list(arguments.elements) if arguments.elements else []
    costs = parse_cost(arguments.cost)
    window = parse_window(arguments.window) if arguments.window is not None else None
    goal = arguments.goal if arguments.goal is not None else ("window" if window else "table")
    surrogate, _manifest = _load_model(arguments, arguments.model, say)
    picks = pick_next(
        surrogate,
        count=arguments.count,
        goal=goal,
        method=arguments.method,
        cost=costs,
        window=window,
        element_symbols=extra,
        random_state=arguments.seed,
    )
    write_table(picks, arguments.out)
    if len(picks) == 0:
        say(f"No missing cell to propose for goal {goal}: every candidate cell is computed -> {arguments.out}")
    else:
        unit = picks["benefit_unit"].iat[0]
        say(f"{len(picks)} picks for goal {goal} (benefit in {unit}, ranked by benefit / cost) -> {arguments.out}")
        say(f"  {'#':>2} {'element':<7} {'host':<6} {'site':<12} {'method':<6} {'quantity':<8} "
            f"{'value eV':>9} {'std':>5} {'cost':>5} {'benefit':>8}  reason")
        for row in picks.itertuples(index=False):
            say(f"  {row.rank:>2} {row.element:<7} {row.host:<6} {row.site:<12} {row.method:<6} "
                f"{row.quantity:<8} {row.value:>9.3f} {row.std:>5.2f} {row.cost:>5g} {row.benefit:>8.3f}  {row.reason}")
    table_elements = set(surrogate.table_["element"])
    for symbol in extra:
        if symbol not in table_elements:
            say(f"note: {symbol} has no computed cell: its values are new-element estimates with wide intervals.")
    unfamiliar = unfamiliar_elements(surrogate, extra)
    for symbol, reason in unfamiliar.items():
        say(
            f"caution: {symbol} lies outside the training data ({reason}): its estimates are "
            f"extrapolations; they do not replace calculation, experiment or local safety rules."
        )
    _say_outside_levels(say, outside_levels(surrogate, picks, skip=unfamiliar))
    shown = list(dict.fromkeys(list(picks["element"]) + extra))
    if shown:
        flags = elements.element_flags(shown)
        for symbol in shown:
            if flags.at[symbol, "note"]:
                say(f"caution: {symbol}: {flags.at[symbol, 'note']}")
    say(_CAUTION)


def _command_explain(arguments, say):
    from dopantgap import elements
    from dopantgap.explain import explain_model, write_explanation, write_figures
    from dopantgap.fill import parse_element_list, unfamiliar_elements
    from dopantgap.progress import bar

    asked = parse_element_list(arguments.elements) if arguments.elements else []
    surrogate, _manifest = _load_model(arguments, arguments.model, say)
    table_symbols = list(dict.fromkeys(surrogate.table_["element"]))
    shown = asked or table_symbols[:3]
    n_elements = len(dict.fromkeys(table_symbols + asked))
    started = time.perf_counter()
    with bar(n_elements, "explain", quiet=arguments.quiet) as progress:
        explanation = explain_model(
            surrogate, element_symbols=asked, random_state=arguments.seed, progress=progress
        )
    explained = time.perf_counter() - started
    out = Path(arguments.out)
    write_explanation(explanation, out, shown)
    n_targets = len(explanation.targets)
    n_groups = explanation.targets["group"].nunique()
    with bar(n_groups, "figures", quiet=arguments.quiet) as progress:
        write_figures(explanation, out, shown, progress=progress)
    say(
        f"{n_targets} targets in {n_groups} groups explained for {n_elements} elements in "
        f"{explained:.0f} s (SHAP by {explanation.shap_method}, background: "
        f"{len(explanation.background)} elements of the table); targets.csv, importance.csv, "
        f"shap_values.csv, breakdowns.csv and one explain_<group>.png per group (breakdowns of "
        f"{', '.join(shown)}) -> {out} ({time.perf_counter() - started:.0f} s in all)"
    )
    choices = explanation.targets[explanation.targets["kind"] == "site-choice"]["target"]
    listed = list(choices) if len(choices) else list(explanation.targets["target"])
    say("Largest mean |SHAP| (eV) per target:" if listed else "No target to explain.")
    for target in listed[:12]:
        top = explanation.importance[explanation.importance["target"] == target].head(3)
        say(f"  {target}: " + ", ".join(f"{f} {v:.2f}" for f, v in zip(top["feature"], top["importance"])))
    if len(listed) > 12:
        say(f"  ... {len(listed) - 12} more in {out / 'importance.csv'}")
    for symbol, reason in unfamiliar_elements(surrogate, asked).items():
        say(
            f"caution: {symbol} lies outside the training data ({reason}): its "
            f"explanation describes an extrapolation."
        )
    notes = elements.element_flags(shown)["note"]
    for symbol, note in notes.items():
        if note:
            say(f"caution: {symbol}: {note}")
    say(_CAUTION)


def _command_report(arguments, say):
    from dopantgap.fill import parse_element_list
    from dopantgap.progress import bar
    from dopantgap.report import REPORT_STEPS, build_report, map_columns, read_rounds_folder

    extra = parse_element_list(arguments.elements) if arguments.elements else []
    started = time.perf_counter()
    surrogate, manifest = _load_model(arguments, arguments.model, say)
    columns = None
    if arguments.columns is not None:
        columns = [label.strip() for label in arguments.columns.split(",") if label.strip()]
        map_columns(surrogate.table_, columns)  # an unknown label is refused before any work
    history = replay_curves = None
    if arguments.rounds_dir:
        history, replay_curves = read_rounds_folder(arguments.rounds_dir, surrogate=surrogate)
    with bar(REPORT_STEPS, "report", quiet=arguments.quiet) as progress:
        path = build_report(
            surrogate, manifest, arguments.out, element_symbols=extra,
            explanation_dir=arguments.explanations, picks=arguments.picks, history=history,
            replay_curves=replay_curves, progress=progress, model_dir=arguments.model, columns=columns,
        )
    size = path.stat().st_size / 1e6
    say(f"Report written: {path} ({size:.1f} MB, {time.perf_counter() - started:.1f} s); open it in a browser.")
    say(_CAUTION)


def _command_demo(arguments, say):
    from dopantgap.demo import run_demo

    started = time.perf_counter()
    run_demo(arguments.out, report=say)
    say(f"Demo finished in {time.perf_counter() - started:.0f} s; files in {arguments.out}")


def _number_option(text, option, minimum, kind=int):
    """A whole (or real) number option, refused with a one-line message."""
    try:
        value = kind(str(text).strip())
    except ValueError:
        value = None
    if value is None or value < minimum:
        shown = "whole number" if kind is int else "number"
        raise DopantgapError(f"{option} must be a {shown} of at least {minimum}, got {text!r}.")
    return value


def _command_add(arguments, say):
    # options are judged before the heavy imports, so a mistyped command answers at once
    if arguments.rounds_dir is None and (arguments.picks or arguments.model):
        raise DopantgapError("--picks and --model are kept in a rounds folder; add --rounds-dir DIR.")
    from dopantgap.picker import parse_cost
    from dopantgap.rounds import add_results, record_round
    from dopantgap.table import read_table, write_table

    cost = parse_cost(arguments.cost) if arguments.cost else None
    table = read_table(arguments.table)
    results = read_table(arguments.results)
    for notice in table.attrs.get("notices", []) + results.attrs.get("notices", []):
        say(f"note: {notice}")
    table.attrs["notices"] = []
    if arguments.rounds_dir is None:
        merged = add_results(table, results, source=arguments.source)
        write_table(merged, arguments.out)
        round_dir = None
    else:
        surrogate = None
        if arguments.model:
            surrogate, _manifest = _load_model(arguments, arguments.model, say)
        merged, round_dir = record_round(
            arguments.rounds_dir, table, results, source=arguments.source, picks_path=arguments.picks,
            surrogate=surrogate, model_label=arguments.model, cost=cost, out_path=arguments.out,
        )
    for notice in merged.attrs.get("notices", []):
        say(f"note: {notice}")
    label = merged["source"].iat[-1] if merged.attrs["n_added"] else arguments.source or "-"
    say(
        f"{merged.attrs['n_added']} new cells added (source {label!r}) to {len(table)} earlier rows, "
        f"which are unchanged -> {arguments.out}"
    )
    if round_dir is not None:
        say(f"Round recorded: {round_dir}")


def _command_history(arguments, say):
    from dopantgap.rounds import history_costs_are_counts, history_text, rounds_history

    surrogate = None
    if arguments.model:
        surrogate, _manifest = _load_model(arguments, arguments.model, say)
    history = rounds_history(arguments.rounds_dir, surrogate=surrogate)
    say(history_text(history).rstrip("\n"))
    if arguments.out:
        from dopantgap import plots

        unit = "calculations" if history_costs_are_counts(arguments.rounds_dir) else "cost units"
        plots.save_png(plots.history_figure(history, cost_unit=unit), arguments.out)
        say(f"Figure -> {arguments.out}")


def _command_replay(arguments, say):
    # options are judged before the heavy imports, so a mistyped number answers at once
    rounds = _number_option(arguments.rounds, "--rounds", 1)
    per_round = _number_option(arguments.per_round, "--per-round", 1)
    seeds = _number_option(arguments.seeds, "--seeds", 1)
    seed = _number_option(arguments.seed, "--seed", 0)
    keep = _number_option(arguments.keep_fraction, "--keep-fraction", 0.0, kind=float)
    from dopantgap.picker import parse_cost
    from dopantgap.replay import replay, replay_text, write_replay
    from dopantgap.surrogate import Surrogate
    from dopantgap.table import read_table

    goals = [goal.strip() for goal in arguments.goal.split(",") if goal.strip()]
    cost = parse_cost(arguments.cost) if arguments.cost else None
    table = read_table(arguments.table, layout=arguments.layout, sheet=arguments.sheet)
    for notice in table.attrs.get("notices", []):
        say(f"note: {notice}")
    estimator = Surrogate(learner=arguments.learner, random_state=seed)
    total = 1 + rounds * (len(goals) + seeds)
    try:
        from dopantgap.progress import bar
    except ImportError:
        bar = None
    say(f"Replaying {rounds} rounds of {per_round} picks on {len(table)} cells ...")
    if bar is None:
        result = replay(table, goal=goals, rounds=rounds, per_round=per_round, method=arguments.method,
                        cost=cost, n_random_seeds=seeds, random_state=seed, keep_fraction=keep,
                        window=arguments.window, estimator=estimator)
    else:
        with bar(total, "replay", quiet=arguments.quiet) as progress:
            result = replay(table, goal=goals, rounds=rounds, per_round=per_round, method=arguments.method,
                            cost=cost, n_random_seeds=seeds, random_state=seed, progress=progress,
                            keep_fraction=keep, window=arguments.window, estimator=estimator)
    paths = write_replay(result, arguments.out)
    say(replay_text(result).rstrip("\n"))
    say(f"Files in {arguments.out}: {', '.join(Path(path).name for path in paths.values())}")
    say("A replay measures the picker on this one table; other tables may gain more or less.")


_COMMANDS = {
    "check": _command_check,
    "fit": _command_fit,
    "validate": _command_validate,
    "fill": _command_fill,
    "next": _command_next,
    "explain": _command_explain,
    "demo": _command_demo,
    "add": _command_add,
    "history": _command_history,
    "replay": _command_replay,
    "report": _command_report,
}


def main(argv=None):
    """Run the command line; returns the exit status (0 success, 2 user error)."""
    parser = _build_parser()
    arguments = parser.parse_args(argv)
    quiet = getattr(arguments, "quiet", False)
    # figures are written to files, never shown: the command line (not the library,
    # whose users may have chosen a backend of their own) selects the file backend,
    # without importing matplotlib for commands that draw nothing
    if "matplotlib" in sys.modules:
        sys.modules["matplotlib"].use("Agg")
    else:
        os.environ["MPLBACKEND"] = "Agg"

    def say(line=""):
        if not quiet:
            print(line, flush=True)

    # SIGTERM (a job scheduler's stop, kill PID) ends the run as Ctrl-C does: the file or
    # folder being written is left out, and the worker processes are stopped
    previous = None
    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        _refuse_outputs_in_model_folders(arguments)
        _COMMANDS[arguments.command](arguments, say)
    except DopantgapError as error:
        print(f"dopantgap {arguments.command}: {error}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        # output piped into `head` or a pager that closed early: nothing more to say; point
        # stdout at devnull so the interpreter's final flush does not complain either
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except OSError as error:
        # a folder where a file should go, a full disk, no permission: the user's to fix
        target = error.filename or ""
        print(f"dopantgap {arguments.command}: {target}: {error.strerror or error}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("dopantgap: interrupted; no file was left half-written.", file=sys.stderr)
        return 130
    except _Terminated:
        print("dopantgap: terminated; no file was left half-written.", file=sys.stderr)
        return 143
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
    return 0


if __name__ == "__main__":
    sys.exit(main())
