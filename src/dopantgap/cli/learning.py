"""Commands that read a table and learn it: check, fit, validate."""

import argparse
import time
from pathlib import Path

from dopantgap.cli.common import (
    Command, _seed, add_scheduler_option, add_suspect_option, add_table_options, say_suspects,
)
from dopantgap.cluster import on_cluster
from dopantgap.errors import DopantgapError
from dopantgap.sizes import MAX_BLOCK_ROWS


def _parse_levels(text):
    return [level.strip() for level in text.split(",") if level.strip()]


def _block_rows(text):
    try:
        value = int(text)
    except ValueError:
        value = None
    if value is None or value < 100:
        raise argparse.ArgumentTypeError(f"expected a whole number of at least 100, got {text!r}")
    return value


def add_learning_options(command, learner_help):
    """The options of commands that learn a table (fit, validate)."""
    command.add_argument("--seed", type=_seed, default=0, help="random seed (default: 0)")
    command.add_argument(
        "--levels", type=_parse_levels, default=None, metavar="CHEAP,...,DEAR",
        help="methods from cheapest to most expensive (default: most computed first)",
    )
    command.add_argument("--learner", choices=("auto", "gp", "boost"), default="auto", help=learner_help)
    command.add_argument(
        "--hosts", default=None, metavar="HOST_FILE",
        help="CSV with columns host,formula (for host labels that are not formulas) and optionally "
             "site,site_kind (sites of different hosts that behave alike) and host properties "
             "such as 'lattice_constant [angstrom]'",
    )
    command.add_argument(
        "--block-rows", type=_block_rows, default=MAX_BLOCK_ROWS, metavar="N",
        help=f"largest stage a Gaussian process learns in one piece (default: {MAX_BLOCK_ROWS}); "
             "a larger one is learned in blocks of whole hosts. Memory grows as N squared",
    )
    add_suspect_option(command)
    add_scheduler_option(command)
    command.add_argument("--quiet", action="store_true", help="print nothing but errors")


def _add_check_parser(commands):
    check = commands.add_parser("check", help="read a table, name any problem in it and show what it covers")
    add_table_options(check)
    check.add_argument(
        "--hosts", default=None, metavar="HOST_FILE",
        help="CSV with columns host,formula for host labels that are not formulas (as for fit)",
    )


def _add_fit_parser(commands):
    fit = commands.add_parser("fit", help="learn a table and save a model folder")
    add_table_options(fit)
    fit.add_argument("--out", required=True, metavar="MODEL_DIR", help="model folder to write")
    add_learning_options(
        fit, "gp: Gaussian process; boost: boosted trees; auto: the better in cross-validation"
    )


def _add_validate_parser(commands):
    validate_command = commands.add_parser(
        "validate",
        help="out-of-fold error and interval coverage of every learner and baseline, per scenario",
    )
    add_table_options(validate_command)
    validate_command.add_argument(
        "--out", required=True, metavar="DIR", help="folder for metrics.csv, the per-element breakdowns and figures"
    )
    add_learning_options(validate_command, "learners to validate (default: auto = both)")


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
    say_suspects(arguments.suspect_values, say, table)
    hosts = properties = site_kinds = None
    if arguments.hosts:
        from dopantgap.hosts import read_host_properties, read_site_properties

        hosts = elements.read_host_file(arguments.hosts)
        properties = read_host_properties(arguments.hosts)
        if not properties.names:
            properties = None
        site_kinds = read_site_properties(arguments.hosts).kinds or None
    estimator = Surrogate(
        learner=arguments.learner, levels=arguments.levels, host_compositions=hosts,
        random_state=arguments.seed, suspect_values=arguments.suspect_values,
        host_properties=properties, site_kinds=site_kinds, max_block_rows=arguments.block_rows,
    )
    return table, estimator


def _learner_bar(arguments):
    from dopantgap.progress import bar

    # the fit counts its fits (cross-validation folds included) once it has read the table
    return bar(1, "fits, cross-validation folds included", quiet=arguments.quiet)


def _command_fit(arguments, say):
    from dopantgap.calibration import undercovered_scenarios
    from dopantgap.store import check_model_target, save_model
    from dopantgap.surrogate.crossval import first_look_text
    from dopantgap.surrogate.stages import correction_forms_text
    from dopantgap.validate import validation_metrics, validation_text

    # before any work: the folder is replaced whole at the end, never an input with it
    check_model_target(arguments.out, inputs=[arguments.table, arguments.hosts])
    table, estimator = _table_and_estimator(arguments, say)
    started = time.perf_counter()
    say(f"Learning {len(table)} computed cells of {table['element'].nunique()} elements ...")
    with on_cluster(arguments.scheduler) as address, _learner_bar(arguments) as progress:
        if address:
            say(f"Fits sent to the Dask scheduler at {address}")
        surrogate = estimator.fit(table, progress=progress)
        metrics, _predictions = validation_metrics(surrogate, random_state=arguments.seed)
    save_model(surrogate, arguments.out, source=arguments.table, validation=metrics)
    elapsed = time.perf_counter() - started
    say(f"Levels, cheapest first: {' < '.join(surrogate.levels_)}")
    say(f"Learner kept: {surrogate.learner_} (lowest cross-validated error, whole elements held out)")
    look = first_look_text(surrogate)
    if look:
        say(look)
    corrections = correction_forms_text(surrogate)
    if corrections:
        say(corrections)
    if surrogate.new_host_ready():
        from dopantgap.surrogate.stages import NEW_HOST_FORM_WORDS, new_host_form

        forms = sorted({new_host_form(stage) for stage in surrogate.stages_.values()})
        say(f"Hosts with no rows: predicted by {' and '.join(NEW_HOST_FORM_WORDS[form] for form in forms)}, "
            "of the ways tried, the closest on hosts left out in turn")
    pooled = metrics[metrics["quantity"] == "all"]
    say(validation_text(metrics).rstrip("\n"))
    for row in undercovered_scenarios(surrogate.cv_metrics_):
        say(
            f"caution: out of fold, the {row['scenario']} cells' 90% intervals held {row['coverage']:.0%} of "
            f"{row['n']} hidden values, fewer than chance explains: on this table they are too narrow, so "
            f"compute a few such cells before trusting them; estimates do not replace calculation."
        )
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
    with on_cluster(arguments.scheduler) as address, _learner_bar(arguments) as progress:
        if address:
            say(f"Fits sent to the Dask scheduler at {address}")
        result = validate(table, estimator=estimator, random_state=arguments.seed, progress=progress)
    paths = write_validation(result, arguments.out)
    say(validation_text(result.metrics).rstrip("\n"))
    say("new-element: all cells of an element hidden together; new-cell: single cells of computed "
        "elements; upgrade: expensive cells whose cheap level is computed"
        + ("; new-host: all cells of a host hidden together (hosts left out in turn); sparse-host: "
           "the same hosts with 5 of their cells given back." if result.surrogate.new_host_ready() else "."))
    say("gp, boost: the learners ('fit' keeps the marked one); 'auto, chosen per fold': the choice "
        "between them judged out of fold (each fold predicted by the learner the other folds chose). "
        "Baselines are rules one could follow by hand, for comparison; level-shift is listed for "
        "upgrade only (elsewhere no cheaper level is computed and it would repeat the column mean), "
        "other-hosts and nearest-host for new-host and sparse-host only.")
    say("Coverage is out of fold: each fold judged by the interval widths the other folds give.")
    say()
    say(f"Where the kept learner ({result.surrogate.learner_}) fails, element by element "
        f"(in full: elements.csv, groups.csv, folds.csv):")
    say(breakdown_text(result.elements, result.groups, result.folds).rstrip("\n"))
    say(f"Files in {arguments.out}: {', '.join(Path(path).name for path in paths)} "
        f"({time.perf_counter() - started:.0f} s)")


COMMANDS = {
    "check": Command(_add_check_parser, _command_check),
    "fit": Command(_add_fit_parser, _command_fit),
    "validate": Command(_add_validate_parser, _command_validate),
}
