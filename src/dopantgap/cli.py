"""Command line: argument parsing only; the work is done by the library."""

import argparse
import sys
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

    check = commands.add_parser("check", help="validate a table and show what it covers")
    add_table_options(check)

    fit = commands.add_parser("fit", help="learn a table and save a model folder")
    add_table_options(fit)
    fit.add_argument("--out", required=True, metavar="MODEL_DIR", help="model folder to write")
    fit.add_argument("--seed", type=int, default=0, help="random seed (default: 0)")
    fit.add_argument(
        "--levels", type=_parse_levels, default=None, metavar="CHEAP,...,DEAR",
        help="methods from cheapest to most expensive (default: most computed first)",
    )
    fit.add_argument(
        "--learner", choices=("auto", "gp", "boost"), default="auto",
        help="gp: Gaussian process; boost: boosted trees; auto: the better in cross-validation",
    )
    fit.add_argument(
        "--hosts", default=None, metavar="HOST_FILE",
        help="CSV with columns host,formula for host labels that are not formulas",
    )
    fit.add_argument("--quiet", action="store_true", help="print nothing but errors")

    fill = commands.add_parser("fill", help="estimate every missing cell with an interval")
    fill.add_argument("model", metavar="MODEL_DIR", help="model folder written by 'fit'")
    fill.add_argument("--out", required=True, metavar="FILLED.csv", help="filled table to write")
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
        help="site preference file (default: site_preference.csv beside FILLED.csv)",
    )
    fill.add_argument("--quiet", action="store_true", help="print nothing but errors")

    demo = commands.add_parser("demo", help="run the whole job on an invented table")
    demo.add_argument("--out", default="dopantgap_demo", metavar="DIR", help="folder for the demo's files")
    return parser


def _command_check(arguments, say):
    from dopantgap.table import coverage_text, read_table

    table = read_table(arguments.table, layout=arguments.layout, sheet=arguments.sheet)
    for notice in table.attrs.get("notices", []):
        say(f"note: {notice}")
    say(f"{arguments.table}: readable, no problems found.")
    say(coverage_text(table))


def _command_fit(arguments, say):
    from dopantgap import elements
    from dopantgap.store import save_model
    from dopantgap.surrogate import Surrogate
    from dopantgap.table import read_table

    table = read_table(arguments.table, layout=arguments.layout, sheet=arguments.sheet)
    for notice in table.attrs.get("notices", []):
        say(f"note: {notice}")
    hosts = elements.read_host_file(arguments.hosts) if arguments.hosts else None
    started = time.perf_counter()
    say(f"Learning {len(table)} computed cells of {table['element'].nunique()} elements ...")
    surrogate = Surrogate(
        learner=arguments.learner,
        levels=arguments.levels,
        host_compositions=hosts,
        random_state=arguments.seed,
    ).fit(table)
    save_model(surrogate, arguments.out, source=arguments.table)
    elapsed = time.perf_counter() - started
    say(f"Levels, cheapest first: {' < '.join(surrogate.levels_)}")
    say(f"Learner kept: {surrogate.learner_} (lowest cross-validated error, whole elements held out)")
    pooled = surrogate.cv_metrics_[surrogate.cv_metrics_["quantity"] == "all"]
    say("Cross-validated error of each learner (eV), by kind of missing cell:")
    say(f"  {'learner':<8} {'scenario':<12} {'cells':>6} {'mean |error|':>13} {'rms error':>10}")
    for row in pooled.itertuples(index=False):
        mark = " <- kept" if row.chosen else ""
        say(f"  {row.learner:<8} {row.scenario:<12} {row.n:>6} {row.mae:>13.3f} {row.rmse:>10.3f}{mark}")
    for scenario in sorted(surrogate.calibration_.borrowed_):
        if scenario in set(pooled["scenario"]):
            say(
                f"note: few cross-validated {scenario} cells; their intervals use the residuals "
                f"of all scenarios pooled. Compute more cells to calibrate it on its own."
            )
    say(f"Model folder written: {arguments.out} ({elapsed:.1f} s)")


def _command_fill(arguments, say):
    from dopantgap.fill import fill_table, parse_element_list, unfamiliar_elements
    from dopantgap.sites import site_preference
    from dopantgap.store import load_model
    from dopantgap.table import write_table

    extra = parse_element_list(arguments.elements) if arguments.elements else []
    surrogate, _manifest = load_model(arguments.model)
    filled = fill_table(surrogate, element_symbols=extra, level=arguments.level)
    write_table(filled, arguments.out)
    sites_out = arguments.sites_out or str(Path(arguments.out).with_name("site_preference.csv"))
    preference = site_preference(surrogate, element_symbols=list(dict.fromkeys(filled["element"])))
    write_table(preference, sites_out)
    predicted = filled[filled["status"] == "predicted"]
    say(
        f"{len(filled)} cells: {len(filled) - len(predicted)} computed (unchanged), "
        f"{len(predicted)} predicted with {arguments.level:.0%} intervals -> {arguments.out}"
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
    for symbol, block in unfamiliar_elements(surrogate, extra).items():
        say(
            f"caution: {symbol} is in the {block} block and the table has no element there: its "
            f"estimates are extrapolations far outside the training data."
        )
    flagged = filled.loc[filled["caution"] != "", ["element", "caution"]].drop_duplicates()
    for row in flagged.itertuples(index=False):
        say(f"caution: {row.element}: {row.caution}")
    say(_CAUTION)


def _command_demo(arguments, say):
    from dopantgap.demo import run_demo

    started = time.perf_counter()
    run_demo(arguments.out, report=say)
    say(f"Demo finished in {time.perf_counter() - started:.0f} s; files in {arguments.out}")


_COMMANDS = {
    "check": _command_check,
    "fit": _command_fit,
    "fill": _command_fill,
    "demo": _command_demo,
}


def main(argv=None):
    """Run the command line; returns the exit status (0 success, 2 user error)."""
    parser = _build_parser()
    arguments = parser.parse_args(argv)
    quiet = getattr(arguments, "quiet", False)

    def say(line=""):
        if not quiet:
            print(line, flush=True)

    try:
        _COMMANDS[arguments.command](arguments, say)
    except DopantgapError as error:
        print(f"dopantgap {arguments.command}: {error}", file=sys.stderr)
        return 2
    except OSError as error:
        # a folder where a file should go, a full disk, no permission: the user's to fix
        target = error.filename or ""
        print(f"dopantgap {arguments.command}: {target}: {error.strerror or error}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("dopantgap: interrupted; no file was left half-written.", file=sys.stderr)
        return 130
    return 0


if __name__ == "__main__":
    sys.exit(main())
