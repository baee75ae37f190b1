"""Commands that use a model folder: fill, next, explain, report."""

import argparse
import os
import time
from pathlib import Path

from dopantgap.cli.common import _CAUTION, Command, _load_model, _say_outside_levels, _seed, add_version_option
from dopantgap.errors import DopantgapError


def _add_fill_parser(commands):
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
        "--hosts-new", default=None, metavar="MgO,CaO",
        help="hosts with no computed cell to fill too, comma-separated (formulas, or labels of --hosts); "
             "needs a table of three or more hosts",
    )
    fill.add_argument(
        "--hosts", default=None, metavar="HOST_FILE",
        help="host file for --hosts-new: host,formula, and site,site_kind rows naming each new host's "
             "sites and the table sites they are like (without them only sites naming no host atom are filled)",
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
    add_version_option(fill)


def _add_next_parser(commands):
    pick = commands.add_parser(
        "next",
        help="rank the missing cells worth calculating next",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "Rank cells not yet computed by what calculating them would teach, per unit\n"
            "cost. The K picks are chosen as a batch: after each pick its result is taken\n"
            "as known at the predicted mean and the others are scored again.\n\n"
            "goals:\n"
            "  table   expected drop of the predictive std (eV) summed over every missing\n"
            "          cell j of the method(s) when cell i is computed:\n"
            "          sum_j sqrt(C[j,j]) - sqrt(C[j,j] - C[j,i]^2 / C[i,i]) for the joint\n"
            "          calibrated covariance C (Rasmussen & Williams 2006, eq. 2.24); the\n"
            "          expected summed absolute error falls by sqrt(2/pi) times as much\n"
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
        "--host", default=None, metavar="HOST",
        help="propose and count only this host's cells; a host with no computed cell (a formula, "
             "or a label of --hosts) asks which first calculations teach most about the rest of it",
    )
    pick.add_argument(
        "--hosts", default=None, metavar="HOST_FILE",
        help="host file for a new --host: host,formula and site,site_kind rows (as for 'fill --hosts-new')",
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
    add_version_option(pick)


def _add_explain_parser(commands):
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
    add_version_option(explain)


def _add_report_parser(commands):
    report = commands.add_parser("report", help="write one self-contained HTML page about a model")
    report.add_argument("model", metavar="MODEL_DIR", help="model folder written by 'fit'")
    report.add_argument("--out", default="report.html", metavar="REPORT.html", help="page to write (default: report.html)")
    report.add_argument("--elements", default=None, metavar="Ti,V,Cr", help="elements to add to those of the table")
    report.add_argument("--explanations", default=None, metavar="DIR", help="folder written by 'explain'")
    report.add_argument("--picks", default=None, metavar="NEXT.csv", help="picks written by 'next'")
    report.add_argument("--rounds-dir", default=None, metavar="DIR", help="rounds folder (from 'add') or replay folder")
    report.add_argument("--screen", default=None, metavar="SCREEN.csv",
                        help="screen written by 'screen': probability map and ranked candidates")
    report.add_argument(
        "--columns", default=None, metavar="HOST/SITE/METHOD/QUANTITY,...",
        help="table columns to draw on the periodic table, e.g. ZnS/sub_Zn/hyb/E_sol (default: per host "
             "and quantity, the site computed for the most elements, at the dearest level)",
    )
    report.add_argument("--quiet", action="store_true", help="print nothing but errors")
    add_version_option(report)


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
        check_fill_format, fill_table, host_outside_note, outside_levels, parse_element_list,
        unfamiliar_elements, wide_filled,
    )
    from dopantgap.new_hosts import parse_host_list, plan_new_hosts
    from dopantgap.progress import bar
    from dopantgap.sites import site_preference
    from dopantgap.table import check_output_suffix, write_table

    layout = check_fill_format(arguments.format)
    check_output_suffix(arguments.out, "--out")
    if arguments.sites_out:
        check_output_suffix(arguments.sites_out, "--sites-out")
    extra = parse_element_list(arguments.elements) if arguments.elements else []
    if arguments.hosts and not arguments.hosts_new:
        raise DopantgapError("--hosts describes new hosts; name them with --hosts-new (e.g. --hosts-new MgO,CaO).")
    new_labels = parse_host_list(arguments.hosts_new) if arguments.hosts_new else []
    surrogate, manifest = _load_model(arguments, arguments.model, say)
    sites_out = _fill_outputs(arguments, surrogate, manifest, say)
    plan = plan_new_hosts(surrogate, new_labels, arguments.hosts) if new_labels else None
    with bar(1, "filled cells", quiet=arguments.quiet) as progress:
        filled = fill_table(surrogate, element_symbols=extra, level=arguments.level, new_hosts=plan)
        write_table(wide_filled(filled) if layout == "wide" else filled, arguments.out)
        progress.update()
    with bar(1, "site preferences (host, method, quantity)", quiet=arguments.quiet) as progress:
        preference = site_preference(
            surrogate if plan is None else plan.surrogate, element_symbols=list(dict.fromkeys(filled["element"])),
            extra_columns=None if plan is None else plan.columns, progress=progress,
        )
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
    if plan is not None:
        for note in plan.notes:
            say(f"note: {note}")
        for host in new_labels:
            if host in plan.outside:
                say(
                    f"caution: host {host} lies outside the table's hosts ({plan.outside[host]}): its cells "
                    "are extrapolations; they do not replace calculation, experiment or local safety rules."
                )
        say(
            f"new host(s) {', '.join(new_labels)}: estimates from the other hosts alone, with the new-host "
            "scenario's intervals (hosts left out in turn); a few computed cells narrow them ('next --host')."
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
    # a new host's caution was said once above; the file repeats it on each of its cells
    said = set() if plan is None else {host_outside_note(host, reason) for host, reason in plan.outside.items()}
    flagged = filled.loc[filled["caution"] != "", ["element", "caution"]]
    for element, caution in dict.fromkeys(
        (row.element, "; ".join(part for part in row.caution.split("; ") if part not in said))
        for row in flagged.itertuples(index=False)
    ):
        if caution:
            say(f"caution: {element}: {caution}")
    say(_CAUTION)


def _command_next(arguments, say):
    from dopantgap.fill import outside_levels, parse_element_list, unfamiliar_elements
    from dopantgap.new_hosts import plan_new_hosts
    from dopantgap.progress import bar
    from dopantgap.picker import (
        benefit_text, joint_groups_text, parse_cost, parse_window, pick_next, robust_picks_text,
    )
    from dopantgap import elements
    from dopantgap.table import write_table

    extra = parse_element_list(arguments.elements) if arguments.elements else []
    costs = parse_cost(arguments.cost)
    window = parse_window(arguments.window) if arguments.window is not None else None
    goal = arguments.goal if arguments.goal is not None else ("window" if window else "table")
    surrogate, _manifest = _load_model(arguments, arguments.model, say)
    if arguments.hosts and not arguments.host:
        raise DopantgapError("--hosts describes a new host; name it with --host (e.g. --host MgO).")
    plan = None
    if arguments.host and arguments.host not in set(surrogate.table_["host"]):
        plan = plan_new_hosts(surrogate, [arguments.host], arguments.hosts)
        for note in plan.notes:
            say(f"note: {note}")
    with bar(1, "next (model versions, joints, picks)", quiet=arguments.quiet) as progress:
        picks = pick_next(
            surrogate,
            count=arguments.count,
            goal=goal,
            method=arguments.method,
            cost=costs,
            window=window,
            element_symbols=extra,
            random_state=arguments.seed,
            host=arguments.host,
            new_hosts=plan,
            progress=progress,
        )
    write_table(picks, arguments.out)
    candidates = int(picks.attrs.get("candidates", 0))
    if len(picks) == 0 and candidates == 0:
        say(f"No missing cell to propose for goal {goal}: every candidate cell is computed -> {arguments.out}")
    elif len(picks) == 0:
        say(f"No pick for goal {goal}: none of the {candidates} missing cells would teach anything noticeable "
            f"for it (the list is left empty rather than padded) -> {arguments.out}")
    else:
        unit = picks["benefit_unit"].iat[0]
        say(f"{len(picks)} picks for goal {goal} (benefit in {unit}, ranked by benefit / cost) -> {arguments.out}")
        if len(picks) < int(arguments.count) and candidates > len(picks):
            say(f"  only {len(picks)} of the {arguments.count} asked would teach anything noticeable for this goal; "
                "the list is not padded with the others")
        if robust_picks_text(picks):
            say(f"  {robust_picks_text(picks)}")
        if joint_groups_text(picks):
            say(f"  {joint_groups_text(picks)}")
        say(f"  {'#':>2} {'element':<7} {'host':<6} {'site':<12} {'method':<6} {'quantity':<8} "
            f"{'value eV':>9} {'std':>5} {'cost':>5} {'benefit':>8}  reason")
        for row in picks.itertuples(index=False):
            say(f"  {row.rank:>2} {row.element:<7} {row.host:<6} {row.site:<12} {row.method:<6} "
                f"{row.quantity:<8} {row.value:>9.3f} {row.std:>5.2f} {row.cost:>5g} {benefit_text(row.benefit):>8}  {row.reason}")
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
    if plan is not None:
        say(f"{arguments.host} has no computed cell: the picks are the first calculations that teach most "
            "about the rest of it (benefit counted over its cells only).")
        if arguments.host in plan.outside:
            say(f"caution: host {arguments.host} lies outside the table's hosts ({plan.outside[arguments.host]}): "
                "its estimates are extrapolations.")
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


def _file_stamp(path):
    """(inode, modification time in ns) of a file, or None when there is none."""
    try:
        stat = Path(path).stat()
    except OSError:
        return None
    return stat.st_ino, stat.st_mtime_ns


def _command_report(arguments, say):
    from dopantgap.fill import parse_element_list
    from dopantgap.progress import bar
    from dopantgap.report import (
        REPORT_STEPS, build_report, filled_csv_path, map_columns, read_rounds_folder, read_screen,
    )

    extra = parse_element_list(arguments.elements) if arguments.elements else []
    started = time.perf_counter()
    # a large table's CSV beside the page: said only when this report wrote it
    csv_before = _file_stamp(filled_csv_path(arguments.out))
    surrogate, manifest = _load_model(arguments, arguments.model, say)
    columns = None
    if arguments.columns is not None:
        columns = [label.strip() for label in arguments.columns.split(",") if label.strip()]
        map_columns(surrogate.table_, columns)  # an unknown label is refused before any work
    history = replay_curves = None
    if arguments.rounds_dir:
        history, replay_curves = read_rounds_folder(arguments.rounds_dir, surrogate=surrogate)
    screened = read_screen(arguments.screen) if arguments.screen else None  # refused before any work
    with bar(REPORT_STEPS, "report", quiet=arguments.quiet) as progress:
        path = build_report(
            surrogate, manifest, arguments.out, element_symbols=extra,
            explanation_dir=arguments.explanations, picks=arguments.picks, history=history,
            replay_curves=replay_curves, progress=progress, model_dir=arguments.model, columns=columns,
            screen=screened,
        )
    size = path.stat().st_size / 1e6
    say(f"Report written: {path} ({size:.1f} MB, {time.perf_counter() - started:.1f} s); open it in a browser.")
    if _file_stamp(filled_csv_path(path)) not in (None, csv_before):
        say(f"  the filled table is too large to show whole in the page: all of it is in {filled_csv_path(path)} "
            "(keep it beside the page; the page links it)")
    say(_CAUTION)


COMMANDS = {
    "fill": Command(_add_fill_parser, _command_fill),
    "next": Command(_add_next_parser, _command_next),
    "explain": Command(_add_explain_parser, _command_explain),
    "report": Command(_add_report_parser, _command_report),
}
