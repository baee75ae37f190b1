"""The demo: the whole job on an invented table, end to end (minutes on two cores, README).

The table is INVENTED (see ``dopantgap.world``): two hosts, ZnS (two sublattices) and
diamond-structure C, five sites each, a solution energy ``E_sol`` at every site and a
vacancy binding energy ``E_bind``; a cheap level ``gga`` for most elements, an
expensive level ``hyb`` for a fifth of them, and four elements never computed. Because
the world is invented, its truth is known, and the demo shows how close the filled
cells come to it.
"""

from pathlib import Path

import numpy as np

from dopantgap.atomic import write_text_atomic
from dopantgap.elements import element_flags
from dopantgap.explain import explain_model, write_explanation, write_figures
from dopantgap.fill import fill_table, outside_levels
from dopantgap.picker import pick_next, robust_picks_text
from dopantgap.hosts import SiteProperties
from dopantgap.report import build_report
from dopantgap.screening import LowestSite, Window, screen
from dopantgap.sites import site_preference
from dopantgap.store import read_manifest, save_model
from dopantgap.surrogate import Surrogate
from dopantgap.table import write_table
from dopantgap.validate import validation_metrics, validation_text
from dopantgap.world import invent_world, observe

__all__ = ["DEMO_ABSENT", "DEMO_SEED", "demo_table", "demo_world", "run_demo", "screen_for_traps"]

DEMO_SEED = 7
#: Elements of the invented world left out of the demo table entirely.
DEMO_ABSENT = ("Ce", "Gd", "Hg", "Os")

def demo_world():
    """Every cell of the invented demo world with its true value (``truth``)."""
    return invent_world(seed=DEMO_SEED)


def demo_table():
    """The invented table a researcher would hold (what ``data_demo/`` ships)."""
    table = observe(demo_world(), absent=DEMO_ABSENT, seed=DEMO_SEED)
    table["note"] = "invented"
    return table


def screen_for_traps(surrogate):
    """The demo's screen: dopants in ZnS on the Zn site that bind a vacancy by 1 eV or more.

    At the expensive level, 1200 K (an anneal) and a trace dopant site fraction of 1e-5,
    with Z = 12 (the Zn neighbours of a Zn site in zinc blende's fcc sublattice) for the
    vacancy trapping.
    """
    return screen(
        surrogate, [Window("E_bind", -np.inf, -1.0), LowestSite("sub_Zn")], temperature=1200.0,
        concentration=1e-5, site_properties=SiteProperties(coordination={("ZnS", "sub_Zn"): 12}),
        hosts=["ZnS"], methods=["hyb"], cost={"gga": 1.0, "hyb": 30.0},
    )


def run_demo(out_dir="dopantgap_demo", report=print):
    """Run the whole job on the invented table and summarise it.

    Parameters
    ----------
    out_dir : str or Path, default="dopantgap_demo"
        Folder for the table, the model folder and the filled outputs.
    report : callable, default=print
        Receives each line of the summary.

    Returns
    -------
    dict
        Paths written and the figures printed (per-scenario error against the
        invented truth, and interval coverage).
    """
    out_dir = Path(out_dir)
    table_path = out_dir / "invented_table.csv"
    model_dir = out_dir / "model"
    filled_path = out_dir / "filled.csv"
    sites_path = out_dir / "site_preference.csv"
    picks_path = out_dir / "next_hybrid.csv"
    screen_path = out_dir / "screen_traps.csv"
    explain_dir = out_dir / "explained"
    report_path = out_dir / "report.html"
    table = demo_table()
    write_table(table, table_path)
    report(f"Invented demo table (not DFT data): {len(table)} computed cells -> {table_path}")
    surrogate = Surrogate(random_state=0).fit(table)
    validation, _predictions = validation_metrics(surrogate, random_state=0)
    save_model(surrogate, model_dir, source=table_path, validation=validation)
    report(f"Model folder: {model_dir} (learner kept: {surrogate.learner_})")
    report("")
    pooled = validation[validation["quantity"] == "all"]
    shown = pooled[pooled["chosen"] | pooled["model"].str.contains("baseline")]
    for line in validation_text(shown).rstrip("\n").splitlines():
        report(line)
    report("")
    filled = fill_table(surrogate, element_symbols=DEMO_ABSENT)
    write_table(filled, filled_path)
    preference = site_preference(surrogate, element_symbols=list(dict.fromkeys(filled["element"])))
    write_table(preference, sites_path)
    report(f"Filled table: {filled_path}; site preferences: {sites_path}")
    world = demo_world()
    merged = filled.merge(
        world[["element", "host", "site", "method", "quantity", "value"]].rename(columns={"value": "truth"}),
        on=["element", "host", "site", "method", "quantity"],
    )
    predicted = merged[merged["status"] == "predicted"]
    report("")
    report("How the filled cells compare with the invented truth (90 % intervals):")
    report(f"  {'scenario':<12} {'cells':>6} {'mean |error| eV':>16} {'inside interval':>16}")
    figures = {}
    for scenario, part in predicted.groupby("scenario"):
        error = float(np.mean(np.abs(part["value"] - part["truth"])))
        inside = float(np.mean((part["truth"] >= part["lo"]) & (part["truth"] <= part["hi"])))
        figures[scenario] = {"n": len(part), "mae": error, "coverage": inside}
        report(f"  {scenario:<12} {len(part):>6} {error:>16.3f} {inside:>15.0%}")
    report("  (noise of the invented world: 0.05 eV; element term no descriptor explains: 0.15 eV)")
    report("")
    picks = pick_next(surrogate, count=5, goal="table", method="hyb", cost={"gga": 1.0, "hyb": 30.0})
    write_table(picks, picks_path)
    report("The next five hybrid calculations worth their cost (goal: the whole table's uncertainty, summed std):")
    for row in picks.itertuples(index=False):
        report(f"  {row.rank}. {row.element} {row.host} {row.site} {row.quantity}: {row.reason}")
    if robust_picks_text(picks):
        report(f"  ({robust_picks_text(picks)})")
    picked = list(dict.fromkeys(picks["element"]))
    flags = element_flags(picked)
    for symbol in picked:
        if flags.at[symbol, "note"]:
            report(f"  caution: {symbol}: {flags.at[symbol, 'note']}")
    unlike = outside_levels(surrogate, picks)
    if len(unlike):
        names = ", ".join(dict.fromkeys(unlike["element"]))
        report(f"  note: {names} lie outside what was computed at hyb: their hyb estimates extrapolate, "
               f"which is why computing one is worth it.")
    traps = screen_for_traps(surrogate)
    write_table(traps, screen_path)
    report("")
    report(f"Which dopants sit on Zn and bind a vacancy by 1 eV or more in ZnS (hyb level, 1200 K; "
           f"invented) -> {screen_path}:")
    candidates = traps[(traps["verdict"] != "no")].head(8)
    for _index, row in candidates.iterrows():
        estimate = "computed" if row["E_bind@sub_Zn status"] == "computed" else (
            f"[{row['E_bind@sub_Zn lo']:.2f}, {row['E_bind@sub_Zn hi']:.2f}]"
        )
        line = (f"  {row['element']:<3} P = {row['probability']:.2f} {row['verdict']:<9} "
                f"E_bind {row['E_bind@sub_Zn']:.2f} eV {estimate}; vacancies bound: {row['bound_vacancies']:.2f}")
        if row["decisive_cell"]:
            line += f"; settled best by {row['decisive_cell']}"
        report(line)
    # the elements absent from the table are the ones a reader asks about: broken down
    explanation = explain_model(surrogate, element_symbols=DEMO_ABSENT, random_state=0)
    write_explanation(explanation, explain_dir, DEMO_ABSENT)
    write_figures(explanation, explain_dir, DEMO_ABSENT)
    site_choice = explanation.importance[
        explanation.importance["target"].isin(
            explanation.targets.loc[explanation.targets["kind"] == "site-choice", "target"]
        )
    ]
    if len(site_choice):
        top = site_choice.groupby("feature")["importance"].mean().sort_values(ascending=False)
        report("What drives the choice of site (mean |SHAP|, eV): "
               + ", ".join(f"{name} {value:.2f}" for name, value in top.head(3).items()))
    report(f"Explanations: {explain_dir}")
    page = build_report(
        surrogate, read_manifest(model_dir), report_path, element_symbols=DEMO_ABSENT,
        explanation_dir=explain_dir, picks=picks, model_dir=model_dir, screen=traps,
    )
    report(f"Report (open in a browser): {page}")
    report("")
    report("Estimates guide which calculations to run; they do not replace calculation,")
    report("experiment or local safety rules.")
    summary_lines = [f"{s},{v['n']},{v['mae']:.4f},{v['coverage']:.4f}" for s, v in figures.items()]
    write_text_atomic(out_dir / "truth_check.csv", "scenario,n,mae,coverage\n" + "\n".join(summary_lines) + "\n")
    return {
        "screen": screen_path,
        "table": table_path,
        "model": model_dir,
        "filled": filled_path,
        "site_preference": sites_path,
        "next": picks_path,
        "explained": explain_dir,
        "report": report_path,
        "figures": figures,
    }
