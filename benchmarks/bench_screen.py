"""Screening verdicts against known truth: precision of `yes`, misses, calibration and speed.

``dopantgap.screening.screen`` gives, per element, host and method, the probability P
that every condition holds and a verdict (``yes`` when P >= 0.9, ``no`` when P <= 0.1,
else ``undecided``). This script checks those verdicts where the answer is known.

Sections
--------
1. INVENTED worlds (``dopantgap.world``: the demo world and the second world; nothing
   here is DFT data), several seeds. Each world is observed as a researcher would hold
   it (``world.observe``: 6 elements never computed, the expensive level for a share of
   the elements, a share of the cheap cells missing), a ``Surrogate`` is fitted and every
   host is screened at the cheap and at the expensive method with three condition sets:
   ``window`` (the vacancy binding energy at most the median of the world's values in
   that host and method, so about half the elements sit on either side), ``lowest``
   (the binding site, a substitutional site, is the lowest-energy site of E_sol) and
   ``both`` (their AND). Truth is each condition evaluated on the world's NOISY value
   (what a calculation would return; the headline) and, beside it, on the noise-free
   value. Only rows where at least one cell the conditions read is predicted are
   scored ("open" rows); rows whose cells are all computed are right by construction
   and only counted.
   Measures: precision of ``yes`` (share of yes rows that truly meet the conditions,
   target >= 0.90), share of truly qualifying rows called ``no`` (target <= 0.10),
   share undecided, and the calibration of P in 5 bins (mean P against the observed
   frequency).
2. REAL tables in ``../shared/real/`` (read at run time, never copied into this
   repository; skipped with a message when absent): about 15 % of the elements are
   removed entirely (``bench_real.hold_out_splits``), a surrogate is fitted on the rest
   (``learner="auto"``, as ``fit``), and the held-out elements (``element_symbols=``)
   are screened with a window "value <= the training table's median" and "value <=
   its lower quartile"; the verdicts are scored against the published values.
   Sources: Wu, Mayeshiba & Morgan, "High-throughput ab-initio dilute solute diffusion
   database", Sci. Data 3, 160054 (2016); Ruban, Skriver & Norskov, "Surface
   segregation energies in transition-metal alloys", Phys. Rev. B 59, 15990 (1999).
3. Speed: ``load_model`` + ``screen`` of ``models/demo`` with two conditions and a
   temperature, in a fresh Python process as a user would run it, and the command
   ``dopantgap screen`` when it exists. Target: under 5 s on 2 cores.

Run ``python benchmarks/bench_screen.py`` (3 seeds, 7 real splits per table; about
10 minutes on two idle cores), ``--quick`` (1 seed, 3 real splits per table),
``--seeds N``, ``--repeats N`` (times every real element is held out),
``--skip-real``, ``--speed-repeats N``.
"""

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.screening import LowestSite, Window, screen
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS, read_table
from dopantgap.world import DEMO_ELEMENTS, SECOND_ELEMENTS, invent_second_world, invent_world, observe

# sibling benchmarks (the script's folder is on sys.path when run)
from bench_honesty import absent_elements, load_text
from bench_real import REAL, TABLES, hold_out_splits
from bench_validate import print_block

ROOT = Path(__file__).resolve().parents[1]
DEMO_MODEL = ROOT / "models" / "demo"
WORLDS = {
    "demo": (invent_world, DEMO_ELEMENTS),
    "second": (invent_second_world, SECOND_ELEMENTS),
}
CONFIDENCE = 0.9
EXPENSIVE_FRACTION = 0.25
MISSING_FRACTION = 0.1
BINDING = "E_bind"
SITE_QUANTITY = "E_sol"
CONDITION_SETS = ("window", "lowest", "both")
TARGET_PRECISION = 0.90
TARGET_MISS = 0.10
TARGET_SECONDS = 5.0
BIN_EDGES = np.linspace(0.0, 1.0, 6)
QUICK_REAL_SPLITS = 3


# ------------------------------------------------------------------ scoring
def score(frame, truth_column):
    """Counts and shares over the open rows of ``frame`` (all rows counted too)."""
    open_rows = frame[frame["open"]]
    truth = open_rows[truth_column].to_numpy(bool)
    verdict = open_rows["verdict"].to_numpy()
    yes, no = verdict == "yes", verdict == "no"
    n_yes, n_true = int(yes.sum()), int(truth.sum())
    return {
        "rows": len(frame),
        "open": len(open_rows),
        "true": n_true,
        "yes": n_yes,
        "precision": float(truth[yes].mean()) if n_yes else math.nan,
        "miss": float(no[truth].mean()) if n_true else math.nan,
        "undecided": float((verdict == "undecided").mean()) if len(open_rows) else math.nan,
        "wrong_no": int((no & truth).sum()),
        "wrong_yes": int((yes & ~truth).sum()),
    }


def figure(value, digits=2):
    return "-" if value is None or (isinstance(value, float) and math.isnan(value)) else f"{value:.{digits}f}"


def score_row(label, frame, truth_column):
    s = score(frame, truth_column)
    return label + [
        s["rows"], s["open"], s["true"], s["yes"], figure(s["precision"]), s["wrong_yes"],
        figure(s["miss"]), s["wrong_no"], figure(s["undecided"]),
    ]


SCORE_HEADERS = ["rows", "open", "true", "yes", "prec(yes)", "false yes", "no|true", "missed", "undecided"]


def calibration_rows(label, frame, truth_column):
    """Mean P against the observed frequency in 5 bins of P, open rows."""
    open_rows = frame[frame["open"]]
    p = open_rows["probability"].to_numpy(float)
    truth = open_rows[truth_column].to_numpy(bool)
    which = np.clip(np.digitize(p, BIN_EDGES[1:-1]), 0, len(BIN_EDGES) - 2)
    rows = []
    for b in range(len(BIN_EDGES) - 1):
        inside = which == b
        rows.append(label + [
            f"{BIN_EDGES[b]:.1f}-{BIN_EDGES[b + 1]:.1f}", int(inside.sum()),
            figure(float(p[inside].mean()) if inside.any() else math.nan, 3),
            figure(float(truth[inside].mean()) if inside.any() else math.nan, 3),
        ])
    brier = float(np.mean((p - truth) ** 2)) if len(p) else math.nan
    return rows, brier


# ------------------------------------------------------------------ invented worlds
def world_truth(world, host, method, binding_site, threshold):
    """Per element: does each condition hold on the noisy value and on the noise-free one."""
    part = world[(world["host"] == host) & (world["method"] == method)]
    result = {}
    for column, suffix in (("value", "noisy"), ("truth", "clean")):
        binding = part[(part["quantity"] == BINDING) & (part["site"] == binding_site)].set_index("element")[column]
        sites = part[part["quantity"] == SITE_QUANTITY].pivot(index="element", columns="site", values=column)
        others = sites.drop(columns=[binding_site]).min(axis=1)
        window = binding <= threshold
        # the same test as the screen: the named site at or below every other site
        lowest = sites[binding_site] <= others
        result[f"window_{suffix}"] = window
        result[f"lowest_{suffix}"] = lowest
        result[f"both_{suffix}"] = window & lowest
    return pd.DataFrame(result)


def open_flags(frame):
    """True where at least one cell the conditions read is predicted (not computed)."""
    status = [column for column in frame.columns if column.endswith(" status")]
    return (frame[status] != "computed").any(axis=1).to_numpy()


def run_world(world_name, seed):
    """Fit one observed world and screen every host and method with the three condition sets."""
    invent, symbols = WORLDS[world_name]
    world = invent(seed=seed)
    absent = list(absent_elements(symbols, seed))
    observed = observe(
        world, expensive_fraction=EXPENSIVE_FRACTION, missing_fraction=MISSING_FRACTION, absent=absent, seed=seed
    )
    start = time.perf_counter()
    model = Surrogate(random_state=seed).fit(observed)
    fit_seconds = time.perf_counter() - start
    levels = list(model.levels_)
    parts, screen_seconds = [], 0.0
    for host in dict.fromkeys(world["host"]):
        binding_sites = world.loc[(world["host"] == host) & (world["quantity"] == BINDING), "site"].unique()
        binding_site = str(binding_sites[0])
        for method in levels:
            values = world[(world["host"] == host) & (world["method"] == method) & (world["quantity"] == BINDING)]
            threshold = float(values["value"].median())
            window = Window(BINDING, -math.inf, threshold, site=binding_site)
            lowest = LowestSite(binding_site, quantity=SITE_QUANTITY)
            truth = world_truth(world, host, method, binding_site, threshold)
            for name, conditions in (("window", [window]), ("lowest", [lowest]), ("both", [window, lowest])):
                tick = time.perf_counter()
                frame = screen(
                    model, conditions, element_symbols=absent, hosts=[host], methods=[method],
                    confidence=CONFIDENCE, random_state=seed,
                )
                screen_seconds += time.perf_counter() - tick
                rows = frame[["element", "probability", "verdict"]].copy()
                rows["open"] = open_flags(frame)
                rows["never_computed"] = rows["element"].isin(absent).to_numpy()
                rows["outside_domain"] = frame["outside_domain"].to_numpy(bool)
                rows["truth_noisy"] = truth.loc[rows["element"], f"{name}_noisy"].to_numpy(bool)
                rows["truth_clean"] = truth.loc[rows["element"], f"{name}_clean"].to_numpy(bool)
                rows["world"], rows["seed"], rows["host"], rows["method"] = world_name, seed, host, method
                rows["condition"], rows["threshold"] = name, threshold
                rows["method_kind"] = "cheap" if method == levels[0] else "expensive"
                parts.append(rows)
    print(
        f"  {world_name} world (INVENTED), seed {seed}: fit {fit_seconds:.0f} s, {len(parts)} screens "
        f"{screen_seconds:.0f} s, never computed: {' '.join(absent)}",
        flush=True,
    )
    return pd.concat(parts, ignore_index=True)


def report_invented(frame):
    """Section 1 tables; returns per-world (precision, miss) on the noisy truth."""
    rows = []
    for keys, part in frame.groupby(["world", "host", "method", "condition"], sort=False):
        threshold = part["threshold"].mean() if keys[3] != "lowest" else math.nan
        rows.append(score_row([f"{keys[0]} (INVENTED)", keys[1], keys[2], keys[3], figure(threshold)], part,
                              "truth_noisy"))
    for world_name, part in frame.groupby("world", sort=False):
        rows.append(score_row([f"{world_name} (INVENTED)", "all", "all", "pooled", ""], part, "truth_noisy"))
    rows.append(score_row(["both worlds", "all", "all", "pooled", ""], frame, "truth_noisy"))
    print_block(
        "1a. Verdicts against the world's NOISY value (seeds and hosts pooled; 'open' rows have at least "
        "one predicted cell and are the only ones scored; 'thr' is the mean window bound over seeds, eV)",
        ["world", "host", "method", "condition", "thr"] + SCORE_HEADERS, rows,
    )

    rows = []
    for keys, part in frame.groupby(["world", "method_kind", "condition"], sort=False):
        rows.append(score_row([f"{keys[0]} (INVENTED)", keys[1], keys[2]], part, "truth_clean"))
    for world_name, part in frame.groupby("world", sort=False):
        rows.append(score_row([f"{world_name} (INVENTED)", "all", "pooled"], part, "truth_clean"))
    print_block(
        "1b. The same verdicts against the world's NOISE-FREE value (hosts and seeds pooled)",
        ["world", "method", "condition"] + SCORE_HEADERS, rows,
    )

    rows = []
    for keys, part in frame.groupby(["world", "seed"], sort=False):
        rows.append(score_row([f"{keys[0]} (INVENTED)", keys[1]], part, "truth_noisy"))
    for keys, part in frame.groupby(["world", "never_computed"], sort=False):
        rows.append(score_row([f"{keys[0]} (INVENTED)", "never computed" if keys[1] else "in table"], part,
                              "truth_noisy"))
    for keys, part in frame.groupby(["world", "outside_domain"], sort=False):
        rows.append(score_row([f"{keys[0]} (INVENTED)", "outside domain" if keys[1] else "inside domain"], part,
                              "truth_noisy"))
    print_block(
        "1c. Per seed; never-computed elements apart from the table's; rows screen flags outside_domain apart "
        "(noisy truth, all conditions pooled)",
        ["world", "seed / elements"] + SCORE_HEADERS, rows,
    )

    rows, briers = [], []
    for world_name, part in frame.groupby("world", sort=False):
        for truth_column in ("truth_noisy", "truth_clean"):
            block, brier = calibration_rows([f"{world_name} (INVENTED)", truth_column[6:]], part, truth_column)
            rows += block
            briers.append(f"{world_name} {truth_column[6:]} {brier:.3f}")
    print_block(
        "1d. Calibration of P (open rows, all conditions, methods, hosts and seeds): mean P against the "
        "observed frequency",
        ["world", "truth", "P bin", "n", "mean P", "observed"], rows,
    )
    print("  Brier score (lower is better): " + "; ".join(briers))

    results = {}
    for world_name, part in frame.groupby("world", sort=False):
        s = score(part, "truth_noisy")
        results[world_name] = (s["precision"], s["miss"])
    cells = []
    for keys, part in frame.groupby(["world", "host", "method", "condition"], sort=False):
        s = score(part, "truth_noisy")
        if s["yes"]:
            cells.append((s["precision"], -s["yes"], " ".join(map(str, keys)), s))
    if cells:
        precision, _, label, s = min(cells)
        print(f"  lowest precision of one world x host x method x condition: {label}: {precision:.2f} "
              f"({s['yes'] - s['wrong_yes']} of {s['yes']} yes rows true, noisy truth)")
    return results


# ------------------------------------------------------------------ real tables
def run_real(name, repeats, quick):
    """Section 2 for one published table; returns the scored rows or None when absent."""
    file_name, source, _ = TABLES[name]
    path = REAL / file_name
    if not path.exists():
        print(f"  {name}: skipped, {path} is absent")
        return None
    table = read_table(path)
    quantity = table["quantity"].iloc[0]
    site = table["site"].value_counts().index[0]
    method = table["method"].iloc[0]
    splits = hold_out_splits(table, repeats)
    if quick:
        splits = splits[:QUICK_REAL_SPLITS]
    print(f"  {name}: {path.name}, {len(table)} rows, {table['element'].nunique()} elements, window on "
          f"{quantity}@{site} (REAL data: {source}); {len(splits)} splits", flush=True)
    parts = []
    for split, hidden in enumerate(splits):
        training = table[~table["element"].isin(hidden)].reset_index(drop=True)
        start = time.perf_counter()
        model = Surrogate(learner="auto", random_state=split).fit(training)
        fit_seconds = time.perf_counter() - start
        known = training.loc[training["site"] == site, "value"]
        truth = table[table["element"].isin(hidden) & (table["site"] == site)]
        truth = truth[list(KEY_COLUMNS) + ["value"]]
        tick = time.perf_counter()
        for bound_name, bound in (("median", float(known.median())), ("lower quartile", float(known.quantile(0.25)))):
            frame = screen(model, [Window(quantity, -math.inf, bound, site=site)], element_symbols=hidden,
                           methods=[method], confidence=CONFIDENCE, random_state=split)
            frame = frame[frame["element"].isin(hidden)]
            scored = truth.merge(frame[["element", "host", "probability", "verdict"]], on=["element", "host"],
                                 how="inner", validate="one_to_one")
            scored["truth_real"] = scored["value"] <= bound
            scored["open"] = True  # held-out elements have no computed cell
            scored["table"], scored["split"], scored["bound_name"], scored["bound"] = name, split, bound_name, bound
            parts.append(scored)
        print(f"    split {split}: held out {' '.join(hidden)}; fit {fit_seconds:.0f} s, screens "
              f"{time.perf_counter() - tick:.1f} s", flush=True)
    return pd.concat(parts, ignore_index=True)


def report_real(frame):
    rows = []
    for keys, part in frame.groupby(["table", "bound_name"], sort=False):
        source = TABLES[keys[0]][1]
        label = [f"{keys[0]} (REAL: {source})", keys[1], f"{part['bound'].mean():+.3f}"]
        rows.append(score_row(label, part, "truth_real"))
    print_block(
        "2a. Held-out elements of the real tables, window 'value <= bound' (bound: the training table's "
        "median or lower quartile, mean over splits, eV); truth: the published value",
        ["table", "bound", "eV"] + SCORE_HEADERS, rows,
    )
    rows = []
    worst = {}
    for keys, part in frame.groupby(["table", "split"], sort=False):
        s = score(part, "truth_real")
        rows.append(score_row([keys[0], keys[1]], part, "truth_real"))
        if not math.isnan(s["precision"]):
            worst[keys[0]] = min(worst.get(keys[0], 1.0), s["precision"])
    print_block("2b. Per split (both bounds pooled)", ["table", "split"] + SCORE_HEADERS, rows)
    rows, briers = [], []
    for name, part in frame.groupby("table", sort=False):
        block, brier = calibration_rows([name], part, "truth_real")
        rows += block
        briers.append(f"{name} {brier:.3f}")
    print_block("2c. Calibration of P on the held-out elements (both bounds pooled)",
                ["table", "P bin", "n", "mean P", "observed"], rows)
    print("  Brier score: " + "; ".join(briers))
    results = {}
    for name, part in frame.groupby("table", sort=False):
        s = score(part, "truth_real")
        results[name] = (s["precision"], s["miss"], worst.get(name, math.nan))
    return results


# ------------------------------------------------------------------ speed
API_CODE = """
import json, math, sys, time
start = time.perf_counter()
from dopantgap.store import load_model
from dopantgap.screening import LowestSite, Window, screen
imported = time.perf_counter()
model, _ = load_model(sys.argv[1])
loaded = time.perf_counter()
cpu = time.process_time()
frame = screen(model, [Window("E_bind", -math.inf, -1.0), LowestSite("sub_Zn")], temperature=900, coordination=12)
done = time.perf_counter()
print(json.dumps({"import": imported - start, "load": loaded - imported, "screen": done - loaded,
                  "screen_cpu": time.process_time() - cpu, "rows": len(frame)}))
"""
CLI_ARGUMENTS = [
    "--window", "E_bind:-inf:-1", "--lowest-site", "sub_Zn", "--temperature", "900", "--coordination", "12",
]


def cli_command():
    found = shutil.which("dopantgap")
    return [found] if found else [sys.executable, "-m", "dopantgap.cli"]


def run_speed(repeats):
    """Section 3: the API in a fresh process, and the command when it exists; returns the slowest median."""
    if not (DEMO_MODEL / "surrogate.joblib").exists():
        print(f"  skipped: {DEMO_MODEL} has no model (run `dopantgap demo` first)")
        return None
    api = []
    for _ in range(repeats):
        tick = time.perf_counter()
        done = subprocess.run([sys.executable, "-c", API_CODE, str(DEMO_MODEL)], capture_output=True, text=True,
                              check=True)
        wall = time.perf_counter() - tick
        api.append(dict(json.loads(done.stdout.strip().splitlines()[-1]), wall=wall))
    rows = []
    for key in ("wall", "import", "load", "screen", "screen_cpu"):
        values = [run[key] for run in api]
        rows.append([f"Python: {key}", f"{np.median(values):.2f}", " ".join(f"{v:.2f}" for v in values)])
    medians = {"api": float(np.median([run["load"] + run["screen"] for run in api]))}
    rows.append(["Python: load_model + screen", f"{medians['api']:.2f}",
                 " ".join(f"{run['load'] + run['screen']:.2f}" for run in api)])
    helped = subprocess.run(cli_command() + ["screen", "--help"], capture_output=True, text=True, check=False)
    if helped.returncode == 0:
        times = []
        with tempfile.TemporaryDirectory() as folder:
            out = str(Path(folder) / "screen.csv")
            command = cli_command() + ["screen", str(DEMO_MODEL), "--out", out] + CLI_ARGUMENTS
            for _ in range(repeats):
                tick = time.perf_counter()
                done = subprocess.run(command, capture_output=True, text=True, check=False)
                times.append(time.perf_counter() - tick)
                if done.returncode != 0:
                    print(f"  dopantgap screen failed ({done.returncode}): {done.stderr.strip()[-400:]}")
                    break
            else:
                medians["cli"] = float(np.median(times))
                runs = " ".join(f"{t:.2f}" for t in times)
                rows.append(["dopantgap screen (command)", f"{medians['cli']:.2f}", runs])
        print("  command: dopantgap screen models/demo --out SCREEN.csv " + " ".join(CLI_ARGUMENTS))
    else:
        print("  `dopantgap screen --help` failed: the command does not exist yet; the Python call alone is timed")
    print_block(
        f"3. Speed on {DEMO_MODEL.relative_to(ROOT)} (INVENTED demo table): window E_bind <= -1, sub_Zn lowest, "
        f"900 K, Z = 12 (seconds, median of {repeats}; 'wall' includes starting Python and the imports)",
        ["what", "median", "runs"], rows,
    )
    return medians


# ------------------------------------------------------------------ main
def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="1 seed and 3 real splits per table")
    parser.add_argument("--seeds", type=int, default=3, help="seeds per invented world (default 3)")
    parser.add_argument("--repeats", type=int, default=1,
                        help="times every real element is held out (7 splits each; default 1)")
    parser.add_argument("--skip-real", action="store_true", help="leave out section 2")
    parser.add_argument("--speed-repeats", type=int, default=3, help="timed runs in section 3 (default 3)")
    parser.add_argument("--speed-only", action="store_true", help="section 3 alone")
    arguments = parser.parse_args(argv)
    if arguments.seeds < 1 or arguments.repeats < 1 or arguments.speed_repeats < 1:
        parser.error("--seeds, --repeats and --speed-repeats must be at least 1")
    seeds = [0] if arguments.quick else list(range(arguments.seeds))
    print(f"command: {' '.join([os.path.basename(sys.executable)] + sys.argv)}")
    print(f"cores: {os.cpu_count()}, load average at start (1/5/15 min): {load_text()}")
    print(f"confidence {CONFIDENCE}: yes when P >= {CONFIDENCE}, no when P <= {1 - CONFIDENCE:.1f}")
    print("columns: rows (all), open (scored: a cell read is predicted), true (open rows truly meeting the "
          "conditions), yes, prec(yes) (share of yes that are true), false yes, no|true (share of true rows "
          "called no), missed (their count), undecided (share of open rows)")
    start = time.perf_counter()
    if arguments.speed_only:
        speed = run_speed(arguments.speed_repeats)
        report_targets({}, {}, speed)
        print(f"\nwall time {time.perf_counter() - start:.0f} s; load average at end: {load_text()}")
        return 0

    print(f"\nSection 1: INVENTED worlds ({', '.join(WORLDS)}), seeds {seeds}; observed with 6 elements never "
          f"computed, the expensive level for {EXPENSIVE_FRACTION:.0%} of the others, {MISSING_FRACTION:.0%} of "
          f"cheap cells missing")
    invented = pd.concat([run_world(w, seed) for seed in seeds for w in WORLDS], ignore_index=True)
    invented_results = report_invented(invented)
    print(f"  (load average after section 1: {load_text()})")

    real_results = {}
    if arguments.skip_real:
        print("\nSection 2: skipped (--skip-real)")
    elif not REAL.is_dir():
        print(f"\nSection 2: skipped, the folder of real tables {REAL} is absent "
              "(it sits beside the project, never in it)")
    else:
        print("\nSection 2: REAL tables, held-out elements")
        parts = [run_real(name, arguments.repeats, arguments.quick) for name in TABLES]
        parts = [part for part in parts if part is not None]
        if parts:
            real_results = report_real(pd.concat(parts, ignore_index=True))
        print(f"  (load average after section 2: {load_text()})")

    print(f"\nSection 3: speed (load average now {load_text()})")
    speed = run_speed(arguments.speed_repeats)
    report_targets(invented_results, real_results, speed)
    print(f"\nwall time {time.perf_counter() - start:.0f} s; load average at end: {load_text()}")
    return 0


def report_targets(invented_results, real_results, speed):
    """The final block: each target with the measured figure and met / NOT met."""
    print("\nTargets")
    for world_name, (precision, miss) in invented_results.items():
        print(f"  {world_name} world (INVENTED): precision of yes {figure(precision)} (target >= {TARGET_PRECISION}): "
              f"{'met' if precision >= TARGET_PRECISION else 'NOT met'}; qualifying called no {figure(miss)} "
              f"(target <= {TARGET_MISS}): {'met' if miss <= TARGET_MISS else 'NOT met'}")
    if invented_results:
        worst = min(invented_results, key=lambda w: invented_results[w][0])
        most_missed = max(invented_results, key=lambda w: invented_results[w][1])
        misses = {figure(miss) for _, miss in invented_results.values()}
        by_misses = f"misses equal ({misses.pop()})" if len(misses) == 1 else (
            f"{most_missed} by misses ({figure(invented_results[most_missed][1])})")
        print(f"  worst world: {worst} by precision ({figure(invented_results[worst][0])}); {by_misses}")
    for name, (precision, miss, worst_split) in real_results.items():
        print(f"  {name} (REAL: {TABLES[name][1]}): precision of yes {figure(precision)} (worst split "
              f"{figure(worst_split)}): {'met' if precision >= TARGET_PRECISION else 'NOT met'}; qualifying called no "
              f"{figure(miss)}: {'met' if miss <= TARGET_MISS else 'NOT met'}")
    if speed:
        for what, seconds in speed.items():
            label = "load_model + screen (Python)" if what == "api" else "dopantgap screen (command, whole process)"
            print(f"  {label}: {seconds:.2f} s (target < {TARGET_SECONDS:g} s): "
                  f"{'met' if seconds < TARGET_SECONDS else 'NOT met'}")


if __name__ == "__main__":
    sys.exit(main())
