"""Benchmark of ``dopantgap validate``: honest error, calibrated coverage, baselines, speed.

Every world here is INVENTED (``dopantgap.world``); nothing is DFT data. A smooth world
(no element term) and a rough one (an element term of 0.25 eV that no descriptor
carries, standing in for the chemistry of its own every real element has) are observed
as a researcher would hold them (``world.observe``), with a few elements left out, and
``dopantgap.validate.validate`` scores every learner and baseline out of fold.

Sections
--------
1. Per world and scenario (new-element, new-cell, upgrade): the mean absolute
   out-of-fold error of the learner ``fit`` keeps, the noise floor (no model can beat
   it: the hidden values carry noise of 0.05 eV), the coverage of the 90 % interval
   (target 85-95 % in every scenario, rough world included), and each baseline's
   error and coverage beside it. Means over seeds.
2. Honesty of the self-report: the new-element error ``validate`` reports against the
   error the fitted model really makes, against the noise-free truth, on the elements
   left out of the table (target: within a factor 2).
3. Speed: wall time of ``dopantgap validate`` on the demo table, in a child process
   (target under 3 minutes on two cores).

Run ``python benchmarks/bench_validate.py`` (about 5 minutes on an idle two-core
machine), or ``--quick`` for one seed.
"""

import argparse
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

from dopantgap.baselines import BASELINES
from dopantgap.calibration import SCENARIOS
from dopantgap.demo import demo_table
from dopantgap.fill import fill_table
from dopantgap.table import KEY_COLUMNS, write_table
from dopantgap.validate import validate
from dopantgap.world import DEMO_ELEMENTS, invent_world, observe

NOISE_SD = 0.05
# Mean absolute value of N(0, sigma^2) is sqrt(2/pi) sigma (half-normal mean).
NOISE_FLOOR = math.sqrt(2.0 / math.pi) * NOISE_SD
WORLDS = {"smooth": 0.0, "rough": 0.25}
N_ABSENT = 6
TARGET_COVERAGE = (0.85, 0.95)
TARGET_HONESTY_FACTOR = 2.0
TARGET_VALIDATE_SECONDS = 180.0


def absent_elements(seed):
    """Elements left out of the observed table (drawn per seed, lanthanides excluded)."""
    rng = np.random.default_rng(1000 + seed)
    candidates = [symbol for symbol in DEMO_ELEMENTS if symbol not in {"La", "Ce", "Nd", "Gd"}]
    return tuple(rng.choice(candidates, size=N_ABSENT, replace=False))


def run_world(world_name, element_sd, seed):
    """Validate one observed world; score the fitted model on its absent elements."""
    world = invent_world(noise_sd=NOISE_SD, element_sd=element_sd, seed=seed)
    absent = absent_elements(seed)
    observed = observe(world, absent=absent, seed=seed)
    result = validate(observed, random_state=seed)
    pooled = result.metrics[result.metrics["quantity"] == "all"].copy()
    pooled["world"], pooled["seed"] = world_name, seed

    filled = fill_table(result.surrogate, element_symbols=list(absent))
    hidden = filled[filled["element"].isin(absent) & (filled["status"] != "computed")]
    revealed = hidden[list(KEY_COLUMNS)].merge(world, on=list(KEY_COLUMNS), how="left")
    estimate = hidden["value"].to_numpy()
    real_error = float(np.mean(np.abs(estimate - revealed["value"].to_numpy())))
    truth_error = float(np.mean(np.abs(estimate - revealed["truth"].to_numpy())))
    kept = pooled[pooled["chosen"] & (pooled["scenario"] == "new-element")]
    honesty = {
        "world": world_name, "seed": seed, "learner": result.surrogate.learner_,
        "reported": float(kept["mae"].iloc[0]), "real": real_error, "truth": truth_error,
    }
    return pooled, honesty


def print_block(title, headers, rows):
    """Print rows under headers in aligned columns."""
    widths = [max([len(h)] + [len(str(r[i])) for r in rows]) for i, h in enumerate(headers)]
    print(f"\n{title}")
    print("  " + "  ".join(h.rjust(w) for h, w in zip(headers, widths)))
    for row in rows:
        print("  " + "  ".join(str(c).rjust(w) for c, w in zip(row, widths)))


def report_scenarios(metrics):
    """Section 1: per world and scenario, kept learner and baselines side by side."""
    kept = metrics[metrics["chosen"]].assign(model="kept learner")
    combined = pd.concat([kept, metrics[metrics["model"].isin(BASELINES)]], ignore_index=True)
    means = combined.groupby(["world", "scenario", "model"], sort=False)[["mae", "coverage", "n"]].mean()
    models = ["kept learner"] + list(BASELINES)
    short = {name: name.replace(" baseline", "") for name in models}
    headers = ["world", "scenario", "floor"]
    for model in models:
        headers += [f"{short[model]} MAE", f"{short[model]} cov"]
    rows, coverage_met = [], True
    for world_name in WORLDS:
        for scenario in SCENARIOS:
            row = [world_name, scenario, f"{NOISE_FLOOR:.3f}"]
            for model in models:
                key = (world_name, scenario, model)
                if key not in means.index:
                    row += ["-", "-"]
                    continue
                mae, coverage = means.loc[key, "mae"], means.loc[key, "coverage"]
                row += [f"{mae:.3f}", f"{coverage:.0%}"]
                if model == "kept learner":
                    coverage_met &= TARGET_COVERAGE[0] <= coverage <= TARGET_COVERAGE[1]
            rows.append(row)
    print_block(
        "1. Out-of-fold mean |error| (eV) and 90 % interval coverage, means over seeds "
        "(floor: the noise no model can beat)", headers, rows,
    )
    return coverage_met


def report_honesty(honesty):
    """Section 2: reported new-element MAE against the real error on absent elements."""
    frame = pd.DataFrame(honesty)
    rows = []
    for row in frame.itertuples(index=False):
        ratio = row.reported / row.real
        rows.append([
            row.world, row.seed, row.learner, f"{row.reported:.3f}", f"{row.real:.3f}", f"{ratio:.2f}",
            f"{row.truth:.3f}",
        ])
    print_block(
        f"2. new-element error: reported by validate against the real error on {N_ABSENT} elements "
        "left out of the table (eV; real = against their noisy values, as validate scores; "
        "vs truth = against the noise-free truth)",
        ["world", "seed", "learner", "reported", "real", "ratio", "vs truth"], rows,
    )
    ratios = frame["reported"] / frame["real"]
    return bool(((ratios <= TARGET_HONESTY_FACTOR) & (ratios >= 1.0 / TARGET_HONESTY_FACTOR)).all())


def time_validate_cli():
    """Section 3: wall time of ``dopantgap validate`` on the demo table."""
    work = Path(tempfile.mkdtemp(prefix="dopantgap-bench-validate-"))
    try:
        table_path = work / "table.csv"
        write_table(demo_table(), table_path)
        command = [sys.executable, "-m", "dopantgap", "validate", str(table_path), "--out", str(work / "v"), "--quiet"]
        start = time.perf_counter()
        subprocess.run(command, check=True, env=dict(os.environ))
        seconds = time.perf_counter() - start
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print(f"\n3. dopantgap validate on the demo table: {seconds:.1f} s (target < {TARGET_VALIDATE_SECONDS:.0f} s)")
    return seconds


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one seed instead of three")
    arguments = parser.parse_args(argv)
    seeds = [0] if arguments.quick else [0, 1, 2]
    print(f"cores: {os.cpu_count()}, seeds: {seeds}, worlds: INVENTED ({', '.join(WORLDS)})")
    parts, honesty = [], []
    for seed in seeds:
        for world_name, element_sd in WORLDS.items():
            start = time.perf_counter()
            pooled, checked = run_world(world_name, element_sd, seed)
            parts.append(pooled)
            honesty.append(checked)
            print(f"  {world_name} world, seed {seed}: {time.perf_counter() - start:.0f} s", flush=True)
    metrics = pd.concat(parts, ignore_index=True)
    coverage_met = report_scenarios(metrics)
    honest = report_honesty(honesty)
    seconds = time_validate_cli()
    print("\nTargets")
    print(f"  coverage 85-95 % in every scenario and world: {'met' if coverage_met else 'NOT met'}")
    print(f"  reported new-element MAE within 2x of the real error: {'met' if honest else 'NOT met'}")
    print(f"  validate on the demo table < 3 min: {'met' if seconds < TARGET_VALIDATE_SECONDS else 'NOT met'}")


if __name__ == "__main__":
    main()
