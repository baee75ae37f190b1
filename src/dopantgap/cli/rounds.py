"""Commands about rounds of new calculations: add, history, replay."""

import argparse
from pathlib import Path

from dopantgap.cli.common import (
    Command, _load_model, _number_option, add_scheduler_option, add_suspect_option, add_table_options,
    add_version_option, say_suspects,
)
from dopantgap.cluster import on_cluster
from dopantgap.errors import DopantgapError


def _add_add_parser(commands):
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
    add_version_option(add)


def _add_history_parser(commands):
    history = commands.add_parser("history", help="how uncertainty and decided site preferences evolved per round")
    history.add_argument("rounds_dir", metavar="ROUNDS_DIR", help="rounds folder written by 'add --rounds-dir'")
    history.add_argument("--out", default=None, metavar="history.png", help="figure to write")
    history.add_argument(
        "--model", default=None, metavar="MODEL_DIR",
        help="compute the figures of rounds recorded without a model",
    )
    add_version_option(history)


def _add_replay_parser(commands):
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
    add_suspect_option(replay)
    add_scheduler_option(replay)
    replay.add_argument(
        "--relearn", choices=("fit", "refresh"), default="fit",
        help="after each round, fit the model in full as you would between rounds (a fit per "
        "strategy and round), or only refresh it (seconds; can tell another story) (default: fit)",
    )
    replay.add_argument("--out", default="replay", metavar="DIR", help="folder for the files (default: replay)")
    replay.add_argument("--quiet", action="store_true", help="print nothing but errors")


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
    from dopantgap.replay import FLOOR_GROUPS, replay, replay_text, write_replay
    from dopantgap.surrogate import Surrogate
    from dopantgap.table import read_table

    goals = [goal.strip() for goal in arguments.goal.split(",") if goal.strip()]
    cost = parse_cost(arguments.cost) if arguments.cost else None
    table = read_table(arguments.table, layout=arguments.layout, sheet=arguments.sheet)
    for notice in table.attrs.get("notices", []):
        say(f"note: {notice}")
    say_suspects(arguments.suspect_values, say, table)
    estimator = Surrogate(learner=arguments.learner, random_state=seed, suspect_values=arguments.suspect_values)
    total = 1 + rounds * (len(goals) + seeds) + FLOOR_GROUPS
    try:
        from dopantgap.progress import bar
    except ImportError:
        bar = None
    say(f"Replaying {rounds} rounds of {per_round} picks on {len(table)} cells ...")
    with on_cluster(arguments.scheduler) as address:
        if address:
            say(f"Fits sent to the Dask scheduler at {address}")
        if bar is None:
            result = replay(table, goal=goals, rounds=rounds, per_round=per_round, method=arguments.method,
                            cost=cost, n_random_seeds=seeds, random_state=seed, keep_fraction=keep,
                            window=arguments.window, estimator=estimator, relearn=arguments.relearn)
        else:
            with bar(total, "replay", quiet=arguments.quiet) as progress:
                result = replay(table, goal=goals, rounds=rounds, per_round=per_round, method=arguments.method,
                                cost=cost, n_random_seeds=seeds, random_state=seed, progress=progress,
                                keep_fraction=keep, window=arguments.window, estimator=estimator,
                                relearn=arguments.relearn)
    paths = write_replay(result, arguments.out)
    say(replay_text(result).rstrip("\n"))
    say(f"Files in {arguments.out}: {', '.join(Path(path).name for path in paths.values())}")
    say("A replay measures the picker on this one table; other tables may gain more or less.")


COMMANDS = {
    "add": Command(_add_add_parser, _command_add),
    "history": Command(_add_history_parser, _command_history),
    "replay": Command(_add_replay_parser, _command_replay),
}
