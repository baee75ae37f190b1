"""Benchmark of honesty where it is hardest: elements never computed, upgrades, strangers, another period.

Every world here is INVENTED (``dopantgap.world``); nothing is DFT data. Two worlds
are used: the demo world (``invent_world``: ZnS and C hosts, energies driven mostly by
size) and the second world (``invent_second_world``: MgO and GaN hosts, energies driven
mostly by electronegativity, ionisation energy and valence mismatch, and an
expensive-level correction that jumps for strongly electronegative elements). Each is
observed as a researcher would hold it (``world.observe``), a ``Surrogate`` is fitted
and ``fill_table`` fills it; the filled values are scored against the world.

Sections
--------
1. Never-computed elements: 6 elements have no cell at all; the share of their cells
   whose noisy world value lies inside the 90 % interval (target 87-93 % pooled per
   world), and their mean |error| against the noisy value and the noise-free truth.
2. Upgrade cells: with exactly 6, then 15 elements computed at the expensive level
   (nested: the 15 include the 6, and the cheap cells are the same), the expensive
   cells that are missing while their cheap cell is computed (fill's ``upgrade``
   scenario). Mean |error| against the truth of the model and of the level-shift rule
   (``baselines.level_shift_baseline``: cheap value plus the column's mean shift).
   Targets: model never above the rule with 6 elements; at most 0.8x the rule with 15
   or more. Sections 1 and 2 share their fits: each fit leaves 6 elements out and
   computes the expensive level for 6 or 15 of the others.
3. A stranger at the expensive level: F and Cl computed at the cheap level only, while
   every element computed at the expensive level is a metal (Pauling electronegativity
   below 2.0, not f-block). Their expensive-level cells should carry ``outside_domain``
   True in the fill output and be covered by their intervals (target: flag on every
   such cell, coverage at least the nominal 90 %). The flag on their cheap-level cells
   is shown beside it: the cheap level knows F and Cl, so there it should stay False.
4. Another period at the expensive level: only the 3d metals (Sc to Zn) computed there;
   the expensive cells of the 4d and 5d transition metals of the world (upgrade cells:
   their cheap level is computed) are scored. The cross-validated calibration only sees
   3d metals held out from 3d metals, so this is where intervals fitted on interpolation
   are most tempted to be too narrow (target: coverage at least 87 %, the floor of
   section 1's target; common practice, no source).

Run ``python benchmarks/bench_honesty.py`` (3 seeds, about 6-8 minutes on two idle
cores before section 4, which adds two fits per seed; ``--quick`` took 7 minutes beside
CI and a replay), ``--quick`` for one seed, ``--counts 6 15 24`` to add a third count.
"""

import argparse
import os
import sys
import time

import numpy as np
import pandas as pd

from dopantgap import elements
from dopantgap.baselines import level_shift_baseline
from dopantgap.fill import fill_table
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS
from dopantgap.world import (
    DEMO_ELEMENTS,
    SECOND_ELEMENTS,
    invent_second_world,
    invent_world,
    observe,
)

# the sibling benchmark's table printer (the script's folder is on sys.path when run)
from bench_validate import print_block

LEVELS = ["gga", "hyb"]
INTERVAL_LEVEL = 0.9
N_ABSENT = 6
STRANGERS = ("F", "Cl")
N_METALS = 6
# Below this Pauling electronegativity every element of either world is a metal
# (common practice, no source: the metal / non-metal line runs near 2).
METAL_ELECTRONEGATIVITY = 2.0
TARGET_NEW_ELEMENT_COVERAGE = (0.87, 0.93)
TARGET_PERIOD_COVERAGE = TARGET_NEW_ELEMENT_COVERAGE[0]
THREE_D = ("Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn")
OTHER_TRANSITION = ("Y", "Zr", "Nb", "Mo", "Tc", "Ru", "Rh", "Pd", "Ag", "Cd",
                    "La", "Hf", "Ta", "W", "Re", "Os", "Ir", "Pt", "Au", "Hg")
TARGET_RATIO_FEW = 1.0   # model / level-shift rule with 6 expensive elements
TARGET_RATIO_MANY = 0.8  # with 15 or more
FEW = 6
WORLDS = {
    "demo": (invent_world, DEMO_ELEMENTS),
    "second": (invent_second_world, SECOND_ELEMENTS),
}


def not_f_block(symbols):
    """The symbols outside the f block (a block of one or two elements teaches nothing)."""
    table = elements.descriptor_table(list(symbols))
    return [symbol for symbol in symbols if table.at[symbol, "block_index"] != 3]


def absent_elements(symbols, seed):
    """Elements left out of the observed table, drawn per seed."""
    rng = np.random.default_rng(1000 + seed)
    candidates = not_f_block(symbols)
    return tuple(rng.choice(candidates, size=N_ABSENT, replace=False))


def expensive_order(symbols, absent, seed):
    """Present elements in a random order; the first n get the expensive level (nested)."""
    rng = np.random.default_rng(2000 + seed)
    present = [symbol for symbol in symbols if symbol not in set(absent)]
    return list(rng.permutation(present))


def metals(symbols, seed):
    """``N_METALS`` metals drawn per seed: the only elements computed at the expensive level."""
    table = elements.descriptor_table(list(symbols))
    candidates = [
        symbol for symbol in not_f_block(symbols)
        if table.at[symbol, "electronegativity_pauling"] < METAL_ELECTRONEGATIVITY
    ]
    rng = np.random.default_rng(3000 + seed)
    return list(rng.choice(candidates, size=N_METALS, replace=False))


def with_world(filled, world):
    """The filled rows with the world's noisy value and truth beside them."""
    revealed = filled[list(KEY_COLUMNS)].merge(
        world[list(KEY_COLUMNS) + ["value", "truth"]], on=list(KEY_COLUMNS), how="left", validate="one_to_one"
    )
    frame = filled.reset_index(drop=True).copy()
    frame["world_value"] = revealed["value"].to_numpy()
    frame["world_truth"] = revealed["truth"].to_numpy()
    return frame


def fit_and_fill(observed, extra_elements, seed):
    """Fit a surrogate on the observed table and fill it; returns (filled, seconds)."""
    start = time.perf_counter()
    model = Surrogate(random_state=seed).fit(observed)
    filled = fill_table(model, element_symbols=list(extra_elements), level=INTERVAL_LEVEL)
    return model, filled, time.perf_counter() - start


def covered(frame):
    return (frame["world_value"] >= frame["lo"]) & (frame["world_value"] <= frame["hi"])


def run_counts(world_name, seed, counts):
    """Sections 1 and 2: one fit per count of expensive elements, 6 elements absent."""
    invent, symbols = WORLDS[world_name]
    world = invent(seed=seed)
    absent = absent_elements(symbols, seed)
    order = expensive_order(symbols, absent, seed)
    new_element_rows, upgrade_rows = [], []
    for count in counts:
        observed = observe(world, absent=absent, expensive_elements=order[:count], seed=seed)
        _, filled, seconds = fit_and_fill(observed, absent, seed)
        frame = with_world(filled, world)
        print(f"  {world_name} world, seed {seed}, {count} expensive elements: fit + fill {seconds:.0f} s", flush=True)

        hidden = frame[frame["element"].isin(absent)].copy()
        hidden["count"], hidden["seed"], hidden["world"] = count, seed, world_name
        hidden["covered"] = covered(hidden)
        new_element_rows.append(hidden)

        upgrade = frame[(frame["status"] == "predicted") & (frame["scenario"] == "upgrade")].copy()
        upgrade["rule"] = level_shift_baseline(observed, upgrade[list(KEY_COLUMNS)], LEVELS)
        upgrade["count"], upgrade["seed"], upgrade["world"] = count, seed, world_name
        upgrade["covered"] = covered(upgrade)
        upgrade_rows.append(upgrade)
    return pd.concat(new_element_rows, ignore_index=True), pd.concat(upgrade_rows, ignore_index=True)


def run_strangers(world_name, seed):
    """Section 3: F and Cl cheap only, every expensive element a metal."""
    invent, symbols = WORLDS[world_name]
    world = invent(seed=seed)
    chosen = metals(symbols, seed)
    observed = observe(world, expensive_elements=chosen, seed=seed)
    _, filled, seconds = fit_and_fill(observed, (), seed)
    print(f"  {world_name} world, seed {seed}, metals {' '.join(chosen)} at hyb: fit + fill {seconds:.0f} s", flush=True)
    frame = with_world(filled, world)
    frame = frame[frame["element"].isin(STRANGERS)].copy()
    # the level shift each cell implies: its value minus the filled cheap value (computed or
    # predicted), against the world's true shift
    twin = ["element", "host", "site", "quantity"]
    cheap = frame[frame["method"] == LEVELS[0]][twin + ["value", "world_truth"]]
    frame = frame.merge(cheap, on=twin, how="left", suffixes=("", "_cheap"), validate="many_to_one")
    frame["shift"] = frame["value"] - frame["value_cheap"]
    frame["true_shift"] = frame["world_truth"] - frame["world_truth_cheap"]
    frame = frame[frame["status"] == "predicted"].copy()
    frame["seed"], frame["world"] = seed, world_name
    frame["covered"] = covered(frame)
    frame["rule"] = level_shift_baseline(observed, frame[list(KEY_COLUMNS)], LEVELS)
    return frame


def run_period(world_name, seed):
    """Section 4: the expensive level for the 3d metals only; the other transition metals'
    expensive cells scored."""
    invent, symbols = WORLDS[world_name]
    world = invent(seed=seed)
    chosen = [symbol for symbol in THREE_D if symbol in symbols]
    observed = observe(world, expensive_elements=chosen, seed=seed)
    _, filled, seconds = fit_and_fill(observed, (), seed)
    print(f"  {world_name} world, seed {seed}, 3d metals only at hyb: fit + fill {seconds:.0f} s", flush=True)
    frame = with_world(filled, world)
    frame = frame[
        frame["element"].isin(OTHER_TRANSITION) & (frame["method"] == LEVELS[1]) & (frame["status"] == "predicted")
    ].copy()
    frame["seed"], frame["world"] = seed, world_name
    frame["covered"] = covered(frame)
    frame["rule"] = level_shift_baseline(observed, frame[list(KEY_COLUMNS)], LEVELS)
    return frame


def report_period(frame):
    """Section 4: coverage and error of the other transition metals at the expensive level."""
    rows, met = [], {}
    for (world_name, seed), part in frame.groupby(["world", "seed"], sort=False):
        rows.append(_period_row(f"{world_name} (INVENTED)", seed, part))
    for world_name, part in frame.groupby("world", sort=False):
        rows.append(_period_row(f"{world_name} (INVENTED)", "pooled", part))
        met[world_name] = float(part["covered"].mean())
    print_block(
        "4. Only the 3d metals computed at the expensive level: the 4d and 5d transition metals' "
        "expensive cells, coverage of the noisy value, mean |error| against the truth of the model and "
        "the level-shift rule, mean interval half-width and share flagged outside_domain",
        ["world", "seed", "cells", "elements", "coverage", "model MAE", "rule MAE", "half-width", "flagged"],
        rows,
    )
    return met


def _period_row(world_label, seed, part):
    return [
        world_label, seed, len(part), part["element"].nunique(), f"{part['covered'].mean():.0%}",
        f"{mae(part, 'value', 'world_truth'):.3f}", f"{mae(part, 'rule', 'world_truth'):.3f}",
        f"{(part['hi'] - part['lo']).mean() / 2:.3f}", f"{part['outside_domain'].mean():.0%}",
    ]


def mae(frame, column, against):
    return float(np.mean(np.abs(frame[column] - frame[against]))) if len(frame) else float("nan")


def report_new_elements(frame):
    """Section 1: coverage and error on the never-computed elements, per world."""
    rows, met = [], {}
    for (world_name, count, seed), part in frame.groupby(["world", "count", "seed"], sort=False):
        rows.append([
            f"{world_name} (INVENTED)", count, seed, len(part), f"{part['covered'].mean():.1%}",
            f"{mae(part, 'value', 'world_value'):.3f}", f"{mae(part, 'value', 'world_truth'):.3f}",
            " ".join(sorted(part["element"].unique())),
        ])
    for world_name, part in frame.groupby("world", sort=False):
        coverage = float(part["covered"].mean())
        met[world_name] = TARGET_NEW_ELEMENT_COVERAGE[0] <= coverage <= TARGET_NEW_ELEMENT_COVERAGE[1]
        rows.append([
            f"{world_name} (INVENTED)", "pooled", "all", len(part), f"{coverage:.1%}",
            f"{mae(part, 'value', 'world_value'):.3f}", f"{mae(part, 'value', 'world_truth'):.3f}", "",
        ])
    print_block(
        f"1. Never-computed elements ({N_ABSENT} per seed, every cell new-element): coverage of the "
        f"noisy value by the {INTERVAL_LEVEL:.0%} interval, mean |error| (eV)",
        ["world", "expensive", "seed", "cells", "coverage", "MAE vs value", "MAE vs truth", "absent"], rows,
    )
    return met


def report_upgrades(frame):
    """Section 2: model against the level-shift rule on the upgrade cells."""
    rows, ratios, worst = [], {}, {}
    for (world_name, count, seed), part in frame.groupby(["world", "count", "seed"], sort=False):
        model_error, rule_error = mae(part, "value", "world_truth"), mae(part, "rule", "world_truth")
        key = (world_name, count)
        worst[key] = max(worst.get(key, 0.0), model_error / rule_error)
        rows.append([
            f"{world_name} (INVENTED)", count, seed, len(part), f"{model_error:.3f}", f"{rule_error:.3f}",
            f"{model_error / rule_error:.2f}", f"{part['covered'].mean():.0%}",
        ])
    n_seeds = frame["seed"].nunique()
    for (world_name, count), part in frame.groupby(["world", "count"], sort=False):
        model_error, rule_error = mae(part, "value", "world_truth"), mae(part, "rule", "world_truth")
        ratios[(world_name, count)] = (model_error / rule_error, worst[(world_name, count)])
        if n_seeds == 1:
            continue  # the pooled row would repeat the seed's row
        rows.append([
            f"{world_name} (INVENTED)", count, "pooled", len(part), f"{model_error:.3f}", f"{rule_error:.3f}",
            f"{model_error / rule_error:.2f}", f"{part['covered'].mean():.0%}",
        ])
    print_block(
        "2. Upgrade cells (expensive missing, cheap computed): mean |error| against the truth (eV), "
        "model and level-shift rule, and the model's interval coverage of the noisy value (extra)",
        ["world", "expensive", "seed", "cells", "model MAE", "rule MAE", "ratio", "coverage"], rows,
    )
    return ratios


def report_strangers(frame):
    """Section 3: the domain flag and coverage of F and Cl at both levels."""
    rows, met = [], {}
    for (world_name, method), part in frame.groupby(["world", "method"], sort=False):
        scenarios = ", ".join(f"{name} {n}" for name, n in part["scenario"].value_counts().items())
        is_expensive = method == LEVELS[1]
        rows.append([
            f"{world_name} (INVENTED)", method, len(part), scenarios,
            f"{part['outside_domain'].mean():.0%}", f"{part['covered'].mean():.0%}",
            f"{mae(part, 'value', 'world_truth'):.3f}", f"{mae(part, 'rule', 'world_truth'):.3f}",
            f"{(part['hi'] - part['lo']).mean() / 2:.3f}",
            f"{part['shift'].mean():.2f}" if is_expensive else "-",
            f"{part['true_shift'].mean():.2f}" if is_expensive else "-",
        ])
        if method == LEVELS[1]:
            met[world_name] = (bool(part["outside_domain"].all()), float(part["covered"].mean()))
    print_block(
        f"3. {' and '.join(STRANGERS)} computed at the cheap level only, {N_METALS} metals at the "
        "expensive level (all seeds pooled): share flagged outside_domain, coverage of the noisy "
        "value, mean |error| against the truth of the model and the level-shift rule, mean "
        "interval half-width, and the mean hyb - gga shift the model implies against the true one (eV)",
        ["world", "method", "cells", "scenarios", "flagged", "coverage", "model MAE", "rule MAE",
         "half-width", "model shift", "true shift"],
        rows,
    )
    for world_name, part in frame[frame["method"] == LEVELS[1]].groupby("world", sort=False):
        by_element = part.groupby("element")
        shown = ", ".join(
            f"{symbol}: flagged {group['outside_domain'].mean():.0%}, covered {group['covered'].mean():.0%}, "
            f"domain distance {group['domain_distance'].mean():.2f}"
            for symbol, group in by_element
        )
        print(f"  {world_name} (INVENTED), {LEVELS[1]} cells: {shown}")
    return met


def load_text():
    return " / ".join(f"{value:.2f}" for value in os.getloadavg())


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one seed instead of three")
    parser.add_argument(
        "--counts", type=int, nargs="+", default=[6, 15],
        help="numbers of elements computed at the expensive level in sections 1-2 (default: 6 15)",
    )
    arguments = parser.parse_args(argv)
    seeds = [0] if arguments.quick else [0, 1, 2]
    counts = sorted(set(arguments.counts))
    print(f"command: {' '.join([os.path.basename(sys.executable)] + sys.argv)}")
    print(f"cores: {os.cpu_count()}, load average at start (1/5/15 min): {load_text()}")
    print(f"seeds: {seeds}, expensive counts: {counts}, worlds: INVENTED ({', '.join(WORLDS)})")
    start = time.perf_counter()
    new_elements, upgrades, strangers, periods = [], [], [], []
    for seed in seeds:
        for world_name in WORLDS:
            hidden, upgrade = run_counts(world_name, seed, counts)
            new_elements.append(hidden)
            upgrades.append(upgrade)
            strangers.append(run_strangers(world_name, seed))
            periods.append(run_period(world_name, seed))
    coverage_met = report_new_elements(pd.concat(new_elements, ignore_index=True))
    ratios = report_upgrades(pd.concat(upgrades, ignore_index=True))
    stranger_met = report_strangers(pd.concat(strangers, ignore_index=True))
    period_coverage = report_period(pd.concat(periods, ignore_index=True))

    print("\nTargets")
    for world_name, met in coverage_met.items():
        print(
            f"  {world_name} world: never-computed coverage within {TARGET_NEW_ELEMENT_COVERAGE[0]:.0%}-"
            f"{TARGET_NEW_ELEMENT_COVERAGE[1]:.0%} pooled: {'met' if met else 'NOT met'}"
        )
    for (world_name, count), (ratio, worst_ratio) in ratios.items():
        if count <= FEW:
            # "never above": every seed, not only the pooled cells
            met = worst_ratio <= TARGET_RATIO_FEW
            label = (
                f"model never above the level-shift rule with {count} expensive elements "
                f"(worst seed {worst_ratio:.2f}, pooled {ratio:.2f})"
            )
        else:
            met = ratio <= TARGET_RATIO_MANY
            label = f"model at most {TARGET_RATIO_MANY}x the rule with {count} (pooled ratio {ratio:.2f})"
        print(f"  {world_name} world: {label}: {'met' if met else 'NOT met'}")
    for world_name, (flagged, coverage) in stranger_met.items():
        print(
            f"  {world_name} world: {'/'.join(STRANGERS)} expensive cells flagged outside_domain: "
            f"{'met' if flagged else 'NOT met'}; covered {coverage:.0%} (target >= {INTERVAL_LEVEL:.0%}): "
            f"{'met' if coverage >= INTERVAL_LEVEL else 'NOT met'}"
        )
    for world_name, coverage in period_coverage.items():
        print(
            f"  {world_name} world: 4d/5d expensive cells from 3d metals covered {coverage:.0%} "
            f"(target >= {TARGET_PERIOD_COVERAGE:.0%}): {'met' if coverage >= TARGET_PERIOD_COVERAGE else 'NOT met'}"
        )
    print(f"\nwall time {time.perf_counter() - start:.0f} s; load average at end: {load_text()}")


if __name__ == "__main__":
    main()
