"""Benchmark of dopantgap's fill: speed on the demo table, accuracy on invented worlds.

Every world here is INVENTED (``dopantgap.world``): its noise-free value of every cell
is known, so the filled cells can be scored against it. Nothing here is DFT data.

Sections
--------
1. Speed: wall time of ``dopantgap fit`` and ``dopantgap fill`` (command line, in a
   child process) on the demo table, the same fit as a Python call, and the peak
   resident memory of the child processes.
2. Accuracy per scenario (new-cell, new-element, upgrade) on a smooth world (no
   element term) and a rough one (element term of 0.25 eV), several seeds.
3. The same cells filled by two plain baselines: column means, and gradient-boosted
   trees on atomic number plus one-hot column labels.
4. Multi-fidelity: expensive-level cells with and without the correction stage.
5. Element effect: new-cell against new-element error.

Run ``python benchmarks/bench_fill.py`` (about 1.5 minutes on an idle two-core
machine), or ``--quick`` for one seed.
"""

import argparse
import math
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.model_selection import KFold
from threadpoolctl import threadpool_info

from dopantgap.baselines import predict_baseline
from dopantgap.calibration import SCENARIOS
from dopantgap.demo import DEMO_ABSENT, demo_table
from dopantgap.fill import fill_table
from dopantgap.sites import site_preference
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS, write_table
from dopantgap.world import DEMO_ELEMENTS, invent_world, observe

NOISE_SD = 0.05
WORLDS = {"smooth": 0.0, "rough": 0.25}
CHEAP, EXPENSIVE = "gga", "hyb"
LEVEL = 0.9
# Two-sided 90 % quantile of the standard normal distribution.
Z_90 = 1.6448536269514722
# Mean absolute value of N(0, sigma^2) is sqrt(2/pi) sigma (half-normal mean).
NOISE_FLOOR = math.sqrt(2.0 / math.pi) * NOISE_SD

# issue 11 allowed 30 s once every cross-validation fold tunes its own kernel (was 20 s)
TARGET_FIT_SECONDS = 30.0
TARGET_FILL_SECONDS = 5.0
TARGET_MEMORY_MB = 2048.0
TARGET_MAE_FACTOR = 2.0
TARGET_COVERAGE = (0.85, 0.95)

METHOD_NAMES = ("surrogate", "column-mean", "boosted-trees")


# --------------------------------------------------------------------- printing
def print_block(title, headers, rows):
    """Print rows under headers in aligned columns: text left, numbers right."""
    text_rows = [[str(cell) for cell in row] for row in rows]
    widths = [
        max([len(header)] + [len(row[index]) for row in text_rows]) for index, header in enumerate(headers)
    ]
    numeric = [
        all(_looks_numeric(row[index]) for row in text_rows) if text_rows else False
        for index in range(len(headers))
    ]

    def line(cells):
        parts = [
            cell.rjust(width) if is_number else cell.ljust(width)
            for cell, width, is_number in zip(cells, widths, numeric)
        ]
        return "  " + "  ".join(parts).rstrip()

    print()
    print(title)
    print(line(headers))
    print("  " + "  ".join("-" * width for width in widths))
    for row in text_rows:
        print(line(row))
    sys.stdout.flush()


def _looks_numeric(text):
    stripped = text.strip().rstrip("%").replace("x", "")
    try:
        float(stripped)
    except ValueError:
        return stripped in ("", "-")
    return True


def percent(fraction):
    return "-" if fraction is None or np.isnan(fraction) else f"{100.0 * fraction:.1f}%"


def electronvolts(value):
    return "-" if value is None or np.isnan(value) else f"{value:.4f}"


# ------------------------------------------------------------------------ speed
def command_line():
    """The dopantgap command of this interpreter's environment."""
    script = Path(sys.executable).parent / "dopantgap"
    if script.is_file():
        return [str(script)]
    found = shutil.which("dopantgap")
    return [found] if found else [sys.executable, "-m", "dopantgap.cli"]


def run_timed(arguments):
    """Wall time of a command, and the peak summed RSS of its process tree (sampled)."""
    started = time.perf_counter()
    process = subprocess.Popen(arguments, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    tree_peak = 0.0
    while process.poll() is None:
        tree_peak = max(tree_peak, tree_megabytes(process.pid))
        time.sleep(0.05)
    elapsed = time.perf_counter() - started
    _output, errors = process.communicate()
    if process.returncode != 0:
        sys.exit(f"benchmark: {' '.join(arguments)} failed with exit status {process.returncode}:\n{errors}")
    return elapsed, tree_peak


def tree_megabytes(root_pid):
    """Summed resident memory (MB) of a process and its descendants, from /proc (Linux only).

    ru_maxrss reports the largest single process; the fit's worker processes run
    beside the main one, so their sum is what the machine must hold.
    """
    parents, resident = {}, {}
    page_megabytes = os.sysconf("SC_PAGE_SIZE") / 2**20 if hasattr(os, "sysconf") else 0.0
    try:
        entries = [entry for entry in os.listdir("/proc") if entry.isdigit()]
    except OSError:
        return 0.0
    for entry in entries:
        try:
            with open(f"/proc/{entry}/stat") as handle:
                fields = handle.read().rsplit(")", 1)[1].split()
        except OSError:
            continue  # the process ended while we looked
        # after the command name: state, ppid, ... field 24 of stat is rss in pages
        parents[int(entry)] = int(fields[1])
        resident[int(entry)] = int(fields[21]) * page_megabytes
    tree, frontier = {root_pid}, [root_pid]
    while frontier:
        parent = frontier.pop()
        children = [pid for pid, ppid in parents.items() if ppid == parent and pid not in tree]
        tree.update(children)
        frontier.extend(children)
    return sum(resident.get(pid, 0.0) for pid in tree)


def children_peak_megabytes():
    # Linux reports ru_maxrss in kilobytes: the largest of all waited-for children.
    return resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0


def measure_speed():
    table = demo_table()
    dopantgap = command_line()
    with tempfile.TemporaryDirectory(prefix="bench_fill_") as folder:
        folder = Path(folder)
        table_path = folder / "invented_demo_table.csv"
        model_dir = folder / "model"
        filled_path = folder / "filled.csv"
        write_table(table, table_path)
        cli_fit, fit_tree = run_timed(dopantgap + ["fit", str(table_path), "--out", str(model_dir), "--seed", "0", "--quiet"])
        memory_after_fit = children_peak_megabytes()
        cli_fill, fill_tree = run_timed(
            dopantgap
            + ["fill", str(model_dir), "--out", str(filled_path), "--elements", ",".join(DEMO_ABSENT), "--quiet"]
        )
        memory_after_fill = children_peak_megabytes()
        filled_rows = len(pd.read_csv(filled_path))
    started = time.perf_counter()
    surrogate = Surrogate(random_state=0).fit(table)
    python_fit = time.perf_counter() - started
    started = time.perf_counter()
    filled = fill_table(surrogate, element_symbols=DEMO_ABSENT)
    site_preference(surrogate, element_symbols=list(dict.fromkeys(filled["element"])))
    python_fill = time.perf_counter() - started
    print(
        f"Demo table (invented): {len(table)} computed cells, {table['element'].nunique()} elements; "
        f"filled table {filled_rows} cells incl. {len(DEMO_ABSENT)} new elements; "
        f"learner kept: {surrogate.learner_}"
    )
    rows = [
        ("fit, command line", f"{cli_fit:.1f}", f"< {TARGET_FIT_SECONDS:.0f}", "s"),
        ("fit, Python call", f"{python_fit:.1f}", f"< {TARGET_FIT_SECONDS:.0f}", "s"),
        ("fill + site preference, command line", f"{cli_fill:.1f}", f"< {TARGET_FILL_SECONDS:.0f}", "s"),
        ("fill + site preference, Python call", f"{python_fill:.1f}", "-", "s"),
        ("peak memory of children after fit", f"{memory_after_fit:.0f}", f"< {TARGET_MEMORY_MB:.0f}", "MB"),
        ("peak memory of children after fill", f"{memory_after_fill:.0f}", f"< {TARGET_MEMORY_MB:.0f}", "MB"),
        ("fit: summed RSS of its process tree (sampled)", f"{fit_tree:.0f}", f"< {TARGET_MEMORY_MB:.0f}", "MB"),
        ("fill: summed RSS of its process tree (sampled)", f"{fill_tree:.0f}", f"< {TARGET_MEMORY_MB:.0f}", "MB"),
    ]
    print_block("1. Speed on the demo table (command-line times include start-up and imports; "
                "ru_maxrss is the largest single child process)",
                ["measure", "measured", "target", "unit"], rows)
    return {
        "cli_fit": cli_fit,
        "python_fit": python_fit,
        "cli_fill": cli_fill,
        "memory": memory_after_fill,
        "tree_memory": max(fit_tree, fill_tree),
    }


# -------------------------------------------------------------------- scenarios
def label_scenarios(observed, cells):
    """Scenario of each cell given what was observed ("" for an observed cell).

    new-element: the element has no observed cell of that quantity; upgrade: an
    expensive-level cell whose cheap-level twin was observed; new-cell: the rest.
    """
    with_quantity = set(zip(observed["element"], observed["quantity"]))
    computed = set(observed[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    labels = []
    for element, host, site, method, quantity in cells[list(KEY_COLUMNS)].itertuples(index=False, name=None):
        if (element, host, site, method, quantity) in computed:
            labels.append("")
        elif (element, quantity) not in with_quantity:
            labels.append("new-element")
        elif method != CHEAP and (element, host, site, CHEAP, quantity) in computed:
            labels.append("upgrade")
        else:
            labels.append("new-cell")
    return np.array(labels, dtype=object)


# -------------------------------------------------------------------- baselines
def column_mean_baseline(observed, cells):
    """Means of ``dopantgap.baselines``' column-mean rule.

    Interval: +/- 1.645 x the column's standard deviation around its mean (a Gaussian
    90 % interval). A column with fewer than two computed cells takes the pooled
    spread of all columns.
    """
    columns = ["host", "site", "method", "quantity"]
    grouped = observed.groupby(columns)["value"]
    summary = grouped.agg(column_std="std").reset_index()
    pooled = float(np.sqrt(np.mean((observed["value"] - grouped.transform("mean")) ** 2)))
    merged = cells[list(KEY_COLUMNS)].merge(summary, on=columns, how="left")
    spread = merged["column_std"].fillna(pooled).to_numpy()
    mean = predict_baseline("column-mean baseline", observed, cells, [CHEAP, EXPENSIVE])
    return mean, mean - Z_90 * spread, mean + Z_90 * spread


def boosted_trees_baseline(observed, cells, seed):
    """Means of ``dopantgap.baselines``' boosted-trees rule (atomic number + one-hot labels).

    Interval: +/- 1.645 x the standard deviation of its 5-fold cross-validated
    residuals on the observed cells.
    """
    observed = observed.reset_index(drop=True)
    levels = [CHEAP, EXPENSIVE]
    target = observed["value"].to_numpy()
    out_of_fold = np.empty(len(observed))
    folds = KFold(n_splits=5, shuffle=True, random_state=seed)
    for kept, held_out in folds.split(observed):
        out_of_fold[held_out] = predict_baseline(
            "boosted-trees baseline", observed.iloc[kept], observed.iloc[held_out][list(KEY_COLUMNS)], levels,
            random_state=seed,
        )
    residual_std = float(np.std(target - out_of_fold, ddof=1))
    mean = predict_baseline("boosted-trees baseline", observed, cells, levels, random_state=seed)
    return mean, mean - Z_90 * residual_std, mean + Z_90 * residual_std


# ------------------------------------------------------------------- accuracy
def score(world, scenarios, mean, lo, hi):
    """Per scenario: n, MAE against truth and against the noisy value, coverage of the value."""
    figures = {}
    for scenario in SCENARIOS:
        rows = scenarios == scenario
        if not rows.any():
            figures[scenario] = {"n": 0, "mae_truth": np.nan, "mae_value": np.nan, "coverage": np.nan}
            continue
        truth = world["truth"].to_numpy()[rows]
        value = world["value"].to_numpy()[rows]
        figures[scenario] = {
            "n": int(rows.sum()),
            "mae_truth": float(np.mean(np.abs(mean[rows] - truth))),
            "mae_value": float(np.mean(np.abs(mean[rows] - value))),
            "coverage": float(np.mean((lo[rows] <= value) & (value <= hi[rows]))),
        }
    return figures


def absent_elements(seed):
    rng = np.random.default_rng(10_000 + seed)
    count = int(rng.integers(4, 7))  # 4, 5 or 6 elements never computed
    return tuple(sorted(rng.choice(DEMO_ELEMENTS, size=count, replace=False)))


def run_world(world_name, element_sd, seed):
    """Fit the surrogate and baselines on one observed world; score every unobserved cell."""
    world = invent_world(noise_sd=NOISE_SD, element_sd=element_sd, seed=seed)
    absent = absent_elements(seed)
    observed = observe(world, absent=absent, seed=seed)
    cells = world[list(KEY_COLUMNS)]
    scenarios = label_scenarios(observed, cells)
    started = time.perf_counter()
    surrogate = Surrogate(random_state=seed).fit(observed)
    fit_seconds = time.perf_counter() - started
    predicted = surrogate.predict(cells, level=LEVEL)
    mismatched = int(
        np.sum((predicted["scenario"].to_numpy() != scenarios) & (predicted["status"].to_numpy() == "predicted"))
    )
    results = {
        "surrogate": score(
            world, scenarios, predicted["value"].to_numpy(), predicted["lo"].to_numpy(), predicted["hi"].to_numpy()
        ),
        "column-mean": score(world, scenarios, *column_mean_baseline(observed, cells)),
        "boosted-trees": score(world, scenarios, *boosted_trees_baseline(observed, cells, seed)),
    }
    run = {
        "world": world_name,
        "seed": seed,
        "absent": absent,
        "observed": len(observed),
        "learner": surrogate.learner_,
        "fit_seconds": fit_seconds,
        "mismatched": mismatched,
        "results": results,
    }
    if world_name == "smooth":
        run["fidelity"] = fidelity_check(world, observed, scenarios, predicted, seed)
    return run


def fidelity_check(world, observed, scenarios, predicted_with, seed):
    """MAE against truth of predicted expensive-level cells, with and without the correction."""
    cells = world[list(KEY_COLUMNS)]
    without = Surrogate(correction=False, random_state=seed).fit(observed).predict(cells, level=LEVEL)
    expensive = (world["method"] == EXPENSIVE).to_numpy() & (scenarios != "")
    upgrade = expensive & (scenarios == "upgrade")
    truth = world["truth"].to_numpy()

    def mae(prediction, rows):
        return float(np.mean(np.abs(prediction["value"].to_numpy()[rows] - truth[rows])))

    return {
        "n": int(expensive.sum()),
        "n_upgrade": int(upgrade.sum()),
        "with": mae(predicted_with, expensive),
        "without": mae(without, expensive),
        "with_upgrade": mae(predicted_with, upgrade),
        "without_upgrade": mae(without, upgrade),
    }


def mean_over_seeds(runs, world_name, method, scenario, key):
    values = [run["results"][method][scenario][key] for run in runs if run["world"] == world_name]
    values = [value for value in values if not np.isnan(value)]
    return float(np.mean(values)) if values else np.nan


def report_accuracy(runs, seeds):
    print()
    print("Observed tables (element term sd: smooth 0.00 eV, rough 0.25 eV; noise sd 0.05 eV):")
    for run in runs:
        note = "" if run["mismatched"] == 0 else f"  ({run['mismatched']} cells labelled differently by the surrogate!)"
        print(
            f"  {run['world']:<6} seed {run['seed']}: {run['observed']} observed cells, never computed: "
            f"{', '.join(run['absent'])}; learner kept: {run['learner']}; fit {run['fit_seconds']:.1f} s{note}"
        )
    per_seed = []
    for run in runs:
        for method in METHOD_NAMES:
            for scenario in SCENARIOS:
                figure = run["results"][method][scenario]
                per_seed.append(
                    (run["world"], run["seed"], method, scenario, figure["n"],
                     electronvolts(figure["mae_truth"]), electronvolts(figure["mae_value"]),
                     percent(figure["coverage"]))
                )
    print_block(
        "2/3. Per seed: error of the filled cells (eV) and 90 % interval coverage of the noisy value",
        ["world", "seed", "method", "scenario", "n", "MAE truth", "MAE value", "coverage"],
        per_seed,
    )
    averaged = []
    for world_name in WORLDS:
        for method in METHOD_NAMES:
            for scenario in SCENARIOS:
                n_total = sum(run["results"][method][scenario]["n"] for run in runs if run["world"] == world_name)
                averaged.append(
                    (world_name, method, scenario, n_total,
                     electronvolts(mean_over_seeds(runs, world_name, method, scenario, "mae_truth")),
                     electronvolts(mean_over_seeds(runs, world_name, method, scenario, "mae_value")),
                     percent(mean_over_seeds(runs, world_name, method, scenario, "coverage")),
                     electronvolts(NOISE_FLOOR))
                )
    print_block(
        f"2/3. Mean over {len(seeds)} seed(s) (n summed over seeds); noise floor = sqrt(2/pi) sigma ~ 0.8 sigma",
        ["world", "method", "scenario", "n", "MAE truth", "MAE value", "coverage", "floor"],
        averaged,
    )


def report_fidelity(runs):
    smooth = [run for run in runs if run["world"] == "smooth"]
    rows = []
    for run in smooth:
        figure = run["fidelity"]
        rows.append(
            (run["seed"], figure["n"], electronvolts(figure["with"]), electronvolts(figure["without"]),
             f"{figure['without'] / figure['with']:.2f}x", figure["n_upgrade"],
             electronvolts(figure["with_upgrade"]), electronvolts(figure["without_upgrade"]))
        )
    with_mean = float(np.mean([run["fidelity"]["with"] for run in smooth]))
    without_mean = float(np.mean([run["fidelity"]["without"] for run in smooth]))
    with_upgrade = float(np.mean([run["fidelity"]["with_upgrade"] for run in smooth]))
    without_upgrade = float(np.mean([run["fidelity"]["without_upgrade"] for run in smooth]))
    rows.append(
        ("mean", sum(run["fidelity"]["n"] for run in smooth), electronvolts(with_mean), electronvolts(without_mean),
         f"{without_mean / with_mean:.2f}x", sum(run["fidelity"]["n_upgrade"] for run in smooth),
         electronvolts(with_upgrade), electronvolts(without_upgrade))
    )
    print_block(
        f"4. Multi-fidelity, smooth world: MAE against truth (eV) of predicted '{EXPENSIVE}' cells "
        "(ratio = without / with correction)",
        ["seed", "n hyb", "with corr.", "without", "ratio", "n upgrade", "upgr. with", "upgr. without"],
        rows,
    )
    return with_mean, without_mean


def report_element_effect(runs):
    rows = []
    for world_name in WORLDS:
        for method in METHOD_NAMES:
            new_cell = mean_over_seeds(runs, world_name, method, "new-cell", "mae_truth")
            new_element = mean_over_seeds(runs, world_name, method, "new-element", "mae_truth")
            rows.append(
                (world_name, method, electronvolts(new_cell), electronvolts(new_element),
                 f"{new_element / new_cell:.2f}x")
            )
    print_block(
        "5. Element effect: MAE against truth (eV), new-cell versus new-element (mean over seeds)",
        ["world", "method", "new-cell", "new-element", "ratio"],
        rows,
    )


def report_targets(speed, runs, fidelity, n_seeds):
    rows = []

    def add(target, measured, met):
        rows.append((target, measured, "met" if met else "NOT met"))

    add(f"fit (command line) < {TARGET_FIT_SECONDS:.0f} s", f"{speed['cli_fit']:.1f} s",
        speed["cli_fit"] < TARGET_FIT_SECONDS)
    add(f"fit (Python call) < {TARGET_FIT_SECONDS:.0f} s", f"{speed['python_fit']:.1f} s",
        speed["python_fit"] < TARGET_FIT_SECONDS)
    add(f"fill incl. site preference (command line) < {TARGET_FILL_SECONDS:.0f} s", f"{speed['cli_fill']:.1f} s",
        speed["cli_fill"] < TARGET_FILL_SECONDS)
    add("peak memory (children, ru_maxrss) < 2 GB", f"{speed['memory']:.0f} MB", speed["memory"] < TARGET_MEMORY_MB)
    add("(extra) peak summed RSS of fit/fill process tree < 2 GB", f"{speed['tree_memory']:.0f} MB",
        speed["tree_memory"] < TARGET_MEMORY_MB)
    limit = TARGET_MAE_FACTOR * NOISE_FLOOR
    for scenario in SCENARIOS:
        mae = mean_over_seeds(runs, "smooth", "surrogate", scenario, "mae_truth")
        add(f"smooth, {scenario}: MAE vs truth <= 2 x 0.8 sigma = {limit:.4f} eV", f"{mae:.4f} eV", mae <= limit)
    low, high = TARGET_COVERAGE
    for scenario in SCENARIOS:
        coverage = mean_over_seeds(runs, "smooth", "surrogate", scenario, "coverage")
        add(f"smooth, {scenario}: coverage {low:.0%}-{high:.0%}", percent(coverage), low <= coverage <= high)
    for scenario in SCENARIOS:
        coverage = mean_over_seeds(runs, "rough", "surrogate", scenario, "coverage")
        add(f"(extra) rough, {scenario}: coverage {low:.0%}-{high:.0%}", percent(coverage), low <= coverage <= high)
    with_mean, without_mean = fidelity
    add("smooth, hyb cells: MAE with correction < without", f"{with_mean:.4f} vs {without_mean:.4f} eV",
        with_mean < without_mean)
    new_cell = mean_over_seeds(runs, "rough", "surrogate", "new-cell", "mae_truth")
    new_element = mean_over_seeds(runs, "rough", "surrogate", "new-element", "mae_truth")
    add("rough: MAE new-cell < new-element", f"{new_cell:.4f} vs {new_element:.4f} eV", new_cell < new_element)
    print_block(
        f"Targets (accuracy figures: surrogate, mean over {n_seeds} seed(s))",
        ["target", "measured", "verdict"],
        rows,
    )
    return rows


def load_text():
    return " / ".join(f"{value:.2f}" for value in os.getloadavg())


def machine_line():
    """Cores, BLAS threads and load: timings mean little if other work shares the cores."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:
        cores = os.cpu_count()
    blas = ", ".join(
        f"{pool['internal_api']} {pool['num_threads']} thread(s)" for pool in threadpool_info()
    ) or "none found"
    return (
        f"Cores available: {cores}; BLAS/OpenMP pools: {blas}; "
        f"load average before start (1/5/15 min): {load_text()}"
    )


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one seed only (a smoke run)")
    parser.add_argument("--seeds", type=int, default=3, help="number of world/observe seeds (default: 3)")
    arguments = parser.parse_args(argv)
    n_seeds = 1 if arguments.quick else arguments.seeds
    if n_seeds < 1:
        parser.error("--seeds must be at least 1")
    seeds = list(range(n_seeds))
    started = time.perf_counter()
    print("dopantgap fill benchmark. All worlds and tables are INVENTED (dopantgap.world), not DFT data.")
    print(machine_line())
    speed = measure_speed()
    runs = [run_world(name, element_sd, seed) for seed in seeds for name, element_sd in WORLDS.items()]
    report_accuracy(runs, seeds)
    fidelity = report_fidelity(runs)
    report_element_effect(runs)
    report_targets(speed, runs, fidelity, n_seeds)
    print()
    print(f"Benchmark finished in {time.perf_counter() - started:.0f} s ({n_seeds} seed(s)).")
    print(f"Load average at the end (1/5/15 min, includes this benchmark): {load_text()}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
