"""Read several replays of one world together: issue 16's targets over replay seeds.

Each ``bench_replay.py --out DIR`` run (or ``dopantgap replay --out DIR``) replays one
hiding seed. Issue 16's targets read the median over replay seeds: the table goal's
error over random's median per round (target at most 1.0 every round) and the share of
random's excess error over the floor removed after the last round (target at least
75 %). This script prints both, per seed and as medians, and says how far five seeds
can be trusted:

* the median share's 90 % interval from resampling the replay seeds (percentile
  bootstrap, Efron & Tibshirani, "An Introduction to the Bootstrap", 1993, ch. 13);
* how often a picker no better than random reads a median share as high: in each
  replay one random seed is taken as the picker and read against the median of the
  other seeds (``dopantgap.replay.chance_shares``), one such seed drawn per replay and
  the median taken, many times over (a permutation-style null, common practice, no source).

Run ``python benchmarks/replay_seeds.py DIR [DIR ...]`` with the replays' folders.
"""

import argparse
import json
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.replay import RANDOM, chance_shares

#: Issue 16's targets.
RATIO_TARGET = 1.0
SHARE_TARGET = 0.75
#: Draws of the bootstrap and of the chance distribution (fixed seed: the figures repeat).
DRAWS = 20000


def read_replay(folder, goal="table"):
    """One replay folder -> (settings, per-round ratios, share, random excesses after the last round)."""
    folder = Path(folder)
    missing = [name for name in ("settings.json", "curves.csv", "summary.csv") if not (folder / name).is_file()]
    if missing:
        raise SystemExit(f"{folder}: no {', '.join(missing)}; give folders written by "
                         f"bench_replay.py --out DIR or dopantgap replay --out DIR.")
    settings = json.loads((folder / "settings.json").read_text())
    curves = pd.read_csv(folder / "curves.csv")
    summary = pd.read_csv(folder / "summary.csv")
    randoms = curves[curves["strategy"] == RANDOM]
    random_median = randoms.groupby("round")["error"].median()
    picker = curves[curves["strategy"] == goal].set_index("round")["error"]
    ratios = [float(picker.at[number] / random_median.at[number]) for number in random_median.index[1:]]
    row = summary[(summary["goal"] == goal) & (summary["metric"] == "error")].iloc[0]
    last = randoms[randoms["round"] == randoms["round"].max()]
    excesses = (last["error"] - last["floor_left"]).to_numpy(float)
    return settings, ratios, float(row["share_removed"]), excesses


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folders", nargs="+", help="replay output folders (curves.csv, summary.csv, settings.json)")
    parser.add_argument("--goal", default="table")
    arguments = parser.parse_args()
    rng = np.random.default_rng(16)
    rows, chances = [], []
    for folder in arguments.folders:
        settings, ratios, share, excesses = read_replay(folder, arguments.goal)
        chance = chance_shares(excesses)
        rows.append((settings["random_state"], settings["keep_fraction"], ratios, share, chance))
        chances.append(chance)
    rows.sort(key=lambda row: row[0])
    print(f"{len(rows)} replays of the {arguments.goal} goal (keep fraction "
          f"{', '.join(sorted({f'{row[1]:.0%}' for row in rows}))}); ratio = goal MAE / random's median MAE")
    print(f"  {'seed':>4}  {'ratio per round':<32} {'share':>6}  chance reads")
    for seed, _fraction, ratios, share, chance in rows:
        reads = f"{chance.min():.0%} to {chance.max():.0%}" if len(chance) else "n/a"
        print(f"  {seed:>4}  {' / '.join(f'{ratio:.2f}' for ratio in ratios):<32} {share:>6.0%}  {reads}")
    ratios = np.array([row[2] for row in rows])
    shares = np.array([row[3] for row in rows])
    median_ratios = np.median(ratios, axis=0)
    median_share = float(np.median(shares))
    print(f"  median {' / '.join(f'{ratio:.2f}' for ratio in median_ratios):<32} {median_share:>6.1%}")
    print()
    ratio_met = bool(np.all(median_ratios <= RATIO_TARGET))
    print(f"ratio target (median at most {RATIO_TARGET} every round): {'met' if ratio_met else 'NOT met'}")
    print(f"share target (median at least {SHARE_TARGET:.0%}): {median_share:.1%}, "
          f"{'met' if median_share >= SHARE_TARGET else 'NOT met'}")
    boots = np.median(rng.choice(shares, size=(DRAWS, len(shares))), axis=1)
    low, high = np.quantile(boots, [0.05, 0.95])
    decided = "decides it" if (low >= SHARE_TARGET or high < SHARE_TARGET) else "cannot decide it"
    print(f"  median share's 90 % interval over replay seeds (bootstrap): {low:.0%} to {high:.0%}: "
          f"{len(shares)} seeds {decided}")
    distance = abs(median_share - SHARE_TARGET)
    if decided == "cannot decide it" and distance > 0:
        # the interval narrows as one over the root of the seeds (rough: a median of few seeds)
        needed = len(shares) * ((high - low) / 2 / distance) ** 2
        print(f"  if the median stayed at {median_share:.1%}, about {needed:,.0f} seeds would put {SHARE_TARGET:.0%} "
              f"outside that interval (rough: the interval narrows as one over the root of the seeds)")
    usable = [chance for chance in chances if len(chance)]
    if len(usable) == len(rows):
        drawn = np.array([[chance[rng.integers(len(chance))] for chance in usable] for _ in range(DRAWS // 10)])
        null = np.median(drawn, axis=1)
        p_value = float(np.mean(null >= median_share))
        print(f"  a picker no better than random reads a median share of {np.median(null):.0%} "
              f"(90 % of draws {np.quantile(null, 0.05):.0%} to {np.quantile(null, 0.95):.0%}); "
              f"as high as {median_share:.0%} in {p_value:.1%} of draws")
        print(f"  proposed target: the median share beats chance (in under 5 % of draws): "
              f"{'met' if p_value < 0.05 else 'NOT met'}")
    else:
        print("  chance not read: every replay needs three random seeds or more")


if __name__ == "__main__":
    main()
