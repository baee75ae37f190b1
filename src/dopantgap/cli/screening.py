"""The screen command: which elements meet the researcher's conditions, with what probability."""

import argparse

from dopantgap.cli.common import (
    _CAUTION,
    Command,
    _load_model,
    _number_option,
    _say_outside_levels,
    _seed,
    add_version_option,
)

_SCREEN_CAUTION = (
    "A screen ranks candidates for calculation and experiment; it never replaces them."
)
# Rows printed per host and method (the file holds them all).
_SHOWN = 12


def _add_screen_parser(commands):
    screen = commands.add_parser(
        "screen",
        help="probability that each element meets conditions (windows, lowest site, site gap), with verdicts",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "For every element, host and method: the probability that ALL conditions hold,\n"
            "from joint draws of the model (an element's sites move together; computed\n"
            "cells are exact), a verdict (yes / undecided / no at --confidence), and for\n"
            "undecided elements the one calculation that would settle it most.\n\n"
            "conditions (eV; repeat any of them; all are combined with AND):\n"
            "  --window E_bind:-inf:-0.3          value of a quantity in LOW..HIGH (-inf/inf\n"
            "                                     for an open side); QUANTITY@SITE when the\n"
            "                                     quantity has several sites in a host\n"
            "  --lowest-site sub_Zn               that site lowest among the host's sites\n"
            "  --site-gap sub_Zn:int_tet_Zn:0.5   the first site at least 0.5 eV below the second\n\n"
            "with --temperature K: Boltzmann site populations (multiplicities from --hosts,\n"
            "default 1) and the share of vacancies bound to a dopant (Lomer's relation,\n"
            "c_v/c_v0 = 1 - Zx + Zx exp(E_b/kT), Z from --coordination or --hosts)."
        ),
    )
    screen.add_argument("model", metavar="MODEL_DIR", help="model folder written by 'fit'")
    screen.add_argument("--out", required=True, metavar="SCREEN.csv", help="screen to write (.csv or .xlsx)")
    screen.add_argument("--window", action="append", default=[], metavar="QUANTITY[@SITE]:LOW:HIGH",
                        help="value window in eV, e.g. E_bind:-inf:-0.3")
    screen.add_argument("--lowest-site", action="append", default=[], metavar="[QUANTITY@]SITE",
                        help="this site is the lowest in energy, e.g. sub_Zn")
    screen.add_argument("--site-gap", action="append", default=[], metavar="[QUANTITY@]FIRST:SECOND:GAP",
                        help="FIRST at least GAP eV below SECOND, e.g. sub_Zn:int_tet_Zn:0.5")
    screen.add_argument("--host", default=None, metavar="NAME[,NAME]",
                        help="hosts to screen (default: every host where the conditions can be read)")
    screen.add_argument("--method", default=None, metavar="NAME[,NAME]", help="methods to screen (default: all)")
    screen.add_argument("--elements", default=None, metavar="Ti,V,Cr",
                        help="elements to add to those of the table, comma-separated")
    screen.add_argument("--confidence", default="0.9", metavar="C",
                        help="verdict yes when P >= C, no when P <= 1 - C (default: 0.9)")
    screen.add_argument("--level", default="0.9", metavar="L",
                        help="content of the intervals shown (default: 0.9)")
    screen.add_argument("--temperature", default=None, metavar="K",
                        help="kelvin: add site populations and bound vacancies at this temperature")
    screen.add_argument("--concentration", default="1e-3", metavar="X",
                        help="dopant site fraction for trapping (default: 1e-3)")
    screen.add_argument("--coordination", default=None, metavar="Z",
                        help="neighbour sites from which a vacancy binds to the dopant (overrides --hosts)")
    screen.add_argument("--hosts", default=None, metavar="HOST_FILE",
                        help="CSV with host,site and multiplicity (sites per formula unit) and/or coordination")
    screen.add_argument("--binding", default=None, metavar="QUANTITY[@SITE]",
                        help="the vacancy binding energy (default: the one quantity named like 'bind')")
    sign = screen.add_mutually_exclusive_group()
    sign.add_argument("--binding-positive", action="store_true", help="positive binding energy = bound pair")
    sign.add_argument("--binding-negative", action="store_true",
                      help="negative binding energy = bound pair (the default; say it to confirm)")
    screen.add_argument("--cost", default=None, metavar="gga=1,hyb=30",
                        help="cost per method, to choose the deciding calculation (default: 1 each)")
    screen.add_argument("--draws", default="20000", metavar="N", help="joint draws per element (default: 20000)")
    screen.add_argument("--seed", type=_seed, default=0, help="seed of the draws (default: 0)")
    screen.add_argument("--quiet", action="store_true", help="print nothing but errors")
    add_version_option(screen)
    return screen


def _names(text):
    return None if text is None else [name.strip() for name in text.split(",") if name.strip()]


def _interval(row, label):
    value, low, high = row[label], row[f"{label} lo"], row[f"{label} hi"]
    mark = "c" if row[f"{label} status"] == "computed" else "p"
    if mark == "c":
        return f"{value:6.2f} computed"
    return f"{value:6.2f} [{low:.2f}, {high:.2f}]"


def _predicted_cells(frame):
    """The predicted cells a screen read, one row each (element, host, site, method, quantity)."""
    import pandas as pd

    parts = []
    for column in frame.columns:
        if not column.endswith(" status") or "@" not in column:
            continue
        quantity, site = column.removesuffix(" status").split("@", 1)
        rows = frame[frame[column] == "predicted"]
        parts.append(pd.DataFrame({"element": rows["element"], "host": rows["host"], "site": site,
                                   "method": rows["method"], "quantity": quantity}))
    columns = ["element", "host", "site", "method", "quantity"]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=columns)


def _command_screen(arguments, say):
    import pandas as pd

    from dopantgap.fill import outside_levels, parse_element_list, unfamiliar_elements
    from dopantgap.hosts import SiteProperties, read_site_properties
    from dopantgap.picker import parse_cost
    from dopantgap.screening import parse_lowest_site, parse_site_gap, parse_window_condition, screen
    from dopantgap.screening.conditions import Window
    from dopantgap.table import write_table

    conditions = (
        [parse_window_condition(text) for text in arguments.window]
        + [parse_lowest_site(text) for text in arguments.lowest_site]
        + [parse_site_gap(text) for text in arguments.site_gap]
    )
    extra = parse_element_list(arguments.elements) if arguments.elements else []
    confidence = _number_option(arguments.confidence, "--confidence", 0.0, kind=float)
    level = _number_option(arguments.level, "--level", 0.0, kind=float)
    draws = _number_option(arguments.draws, "--draws", 100)
    concentration = _number_option(arguments.concentration, "--concentration", 0.0, kind=float)
    coordination = (
        None if arguments.coordination is None else _number_option(arguments.coordination, "--coordination", 1, kind=float)
    )
    properties = read_site_properties(arguments.hosts) if arguments.hosts else SiteProperties()
    sign = "positive" if arguments.binding_positive else ("negative" if arguments.binding_negative else None)
    costs = parse_cost(arguments.cost)
    surrogate, _manifest = _load_model(arguments, arguments.model, say)
    frame = screen(
        surrogate, conditions, temperature=arguments.temperature, concentration=concentration,
        site_properties=properties, coordination=coordination, binding=arguments.binding, binding_sign=sign,
        element_symbols=extra, hosts=_names(arguments.host), methods=_names(arguments.method),
        confidence=confidence, level=level, cost=costs, n_draws=draws, random_state=arguments.seed,
    )
    write_table(frame, arguments.out)
    say(f"Screen: {frame['conditions'].iat[0]} -> {arguments.out}")
    say(f"verdict: yes when P >= {confidence:g}, no when P <= {1 - confidence:g}; intervals {level:.0%}")
    windows = [c for c in conditions if isinstance(c, Window)]
    probability_columns = [column for column in frame.columns if column.startswith("P: ")]
    for (host, method), part in frame.groupby(["host", "method"], sort=False):
        counts = part["verdict"].value_counts()
        say("")
        say(f"{host} at {method}: {counts.get('yes', 0)} yes, {counts.get('undecided', 0)} undecided, "
            f"{counts.get('no', 0)} no")
        shown = part[part["verdict"] != "no"].head(_SHOWN)
        asked = part[part["element"].isin(extra) & ~part.index.isin(shown.index)]
        if len(shown) == 0:
            best = part.iloc[0]
            say(f"  no element is a candidate here (highest: {best['element']}, P = {best['probability']:.2f}).")
            if len(asked) == 0:
                continue
        shown = pd.concat([shown, asked])
        window_labels = []
        for condition in windows:
            site = condition.site
            if site is None:
                site = next(c.split("@", 1)[1] for c in frame.columns
                            if c.startswith(f"{condition.quantity}@") and c.endswith(" status")
                            and part[c].notna().any()).removesuffix(" status")
            window_labels.append(f"{condition.quantity}@{site}")
        header = f"  {'#':>3} {'element':<9} {'P':>5}  {'verdict':<9}"
        for label in window_labels:
            header += f" {label + ' eV':<24}"
        site_probabilities = [c for c in probability_columns if "lowest" in c or "below" in c]
        for column in site_probabilities:
            header += f" {column[3:]:>18}"
        if "bound_vacancies" in part.columns:
            header += f" {'bound vacancies':>22}"
        say(header + "  calculation that settles it best")
        for _index, row in shown.iterrows():
            marks = ("!" if row["outside_domain"] else "") + ("*" if row["caution"] else "")
            line = f"  {row['rank']:>3} {row['element'] + marks:<9} {row['probability']:>5.2f}  {row['verdict']:<9}"
            for label in window_labels:
                line += f" {_interval(row, label):<24}"
            for column in site_probabilities:
                line += f" {row[column]:>18.2f}"
            if "bound_vacancies" in part.columns:
                line += f" {row['bound_vacancies']:>6.2f} [{row['bound_vacancies lo']:.2f}, {row['bound_vacancies hi']:.2f}]"
            if row["decisive_cell"] and row["verdict_note"]:
                line += f"  {row['decisive_cell']} (to confirm an extrapolation)"
            elif row["decisive_cell"]:
                line += f"  {row['decisive_cell']} (-{row['decisive_gain_bits']:.2f} bit)"
            elif row["element"] in extra and row["verdict"] == "no":
                line += "  (asked with --elements)"
            say(line)
        rest = len(part[part["verdict"] != "no"]) - len(shown) + len(asked)
        if rest > 0:
            say(f"  ... {rest} more candidates in {arguments.out}")
    say("")
    say("marks: ! outside what the model has seen (domain_note in the file); * radioactive or toxic (caution)")
    for note in frame.attrs.get("notes", []):
        say(f"note: {note}")
    listed = frame[(frame["verdict"] != "no") | frame["element"].isin(extra)]
    flagged = listed.loc[listed["caution"] != "", ["element", "caution"]].drop_duplicates("element")
    for row in flagged.itertuples(index=False):
        say(f"caution: {row.element}: {row.caution}")
    # the same domain cautions, worded as fill and next word them: one line per level
    unfamiliar = unfamiliar_elements(surrogate, list(dict.fromkeys(listed["element"])))
    for symbol, reason in unfamiliar.items():
        say(f"caution: {symbol} lies outside the training data ({reason}): its probabilities rest on an "
            f"extrapolation.")
    _say_outside_levels(say, outside_levels(surrogate, _predicted_cells(listed), skip=unfamiliar))
    say(_SCREEN_CAUTION)
    say(_CAUTION)


COMMANDS = {"screen": Command(_add_screen_parser, _command_screen)}
