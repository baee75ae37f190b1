"""Benchmark of the picker in replayed rounds on the INVENTED demo world.

The demo world (``dopantgap.demo.demo_world()``: every cell of an invented function,
not DFT data) is taken as a completed table: its noisy ``value`` column, the
``truth`` column dropped. ``dopantgap.replay.replay`` hides the expensive level
(``hyb``) of all but a seeded 20 % of the elements (the cheap level ``gga`` stays known
everywhere, as in real rounds of calculations), fits a surrogate once on the rest and reveals
hidden ``hyb`` cells round by round: with the picker's ``table`` and ``site`` goals,
and at random among the same hidden cells (median over the random seeds).

Printed, after the same number of ``hyb`` calculations:

* ``table`` goal: MAE of the remaining hidden ``hyb`` cells, picker / random median
  per round (issue 16's target: at most 1.0 every round), and the share of random's
  excess over the measured floor removed (target at least 75 %), with the range a
  picker no better than random reads (``replay_text``); both targets read the median
  over replay seeds: ``python benchmarks/replay_seeds.py DIR ...`` reads the ``--out``
  folders of several seeds together;
* ``site`` goal: decided site preferences (p_lowest > 0.9 and the completed table's
  lowest site), picker against random median (target: more);
* the calculations saved versus random to reach the same figure, and timings.

Scoring (``--against``): by default the figures are scored against the world's
noise-free ``truth`` (``replay(reference=...)``): the picker and random both see only
the noisy values, but an error measured against noisy numbers carries their noise
(two levels, sd 0.05 eV each) whatever the strategy, which squeezes every ratio toward 1
(an oracle knowing the true correction scores ~0.90x random that way). ``--against
table`` scores against the noisy completed table, as ``dopantgap replay`` does on a
user's own table.

``--world second`` replays the second invented world instead
(``world.invent_second_world``: hosts MgO and GaN, cation and anion sites, interstitials
and dumbbells; energies driven by electronegativity, ionisation energy and valence more
than size; an expensive-level correction that jumps for strongly electronegative
elements; INVENTED too). ``--world close-sites`` replays the demo world with the site preference of a third of
its elements made nearly undecided (``world.close_site_gaps``: the two lowest sites
within about 0.05 eV, INVENTED too), so that the site goal has something to decide;
``--world second-close-sites`` does the same to the second world.

After each round the model is fitted in full on the grown table, as a user does between
rounds (``--relearn fit``, the default: 28.5 minutes for ``--goals table`` on two cores,
measured beside other work at a load of about 3; the strategies and the floor's groups
run side by side in the workers); ``--relearn refresh`` relearns it with
``Surrogate.refreshed`` instead (about 2 minutes alone), which keeps
the learner, the correction form and the hyperparameters and can tell another story.

Run ``python benchmarks/bench_replay.py`` (defaults: 4 rounds of 10 picks, 5 random
seeds), ``--quick`` for 2 rounds of 5 and 2 seeds. Timings depend on the load of the
machine (printed in the header).
"""

import argparse
import math
import os
import time

import numpy as np

from dopantgap.demo import demo_world
from dopantgap.replay import FLOOR_GROUPS, replay, replay_text, write_replay
from dopantgap.surrogate import Surrogate
from dopantgap.world import close_site_gaps, invent_second_world


def noise_floor(world, hidden, against="truth"):
    """MAE of an oracle that knows the true correction hyb - gga but only the noisy gga
    value, against the hyb truth or the noisy hyb value: what no model of the visible
    table can beat."""
    keys = ["element", "host", "site", "quantity"]
    gga = world[world["method"] == "gga"][keys + ["value", "truth"]]
    gga = gga.rename(columns={"value": "gga_value", "truth": "gga_truth"})
    hyb = world[world["method"] == "hyb"][keys + ["truth"]].rename(columns={"truth": "hyb_truth"})
    cells = hidden.merge(gga, on=keys).merge(hyb, on=keys)
    oracle = cells["gga_value"] + cells["hyb_truth"] - cells["gga_truth"]
    scored = cells["hyb_truth"] if against == "truth" else cells["value"]
    return float(np.mean(np.abs(oracle.to_numpy() - scored.to_numpy())))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=4)
    parser.add_argument("--per-round", type=int, default=10)
    parser.add_argument("--seeds", type=int, default=5)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--keep-fraction", type=float, default=0.2,
                        help="share of elements whose hyb cells stay visible (default 0.2)")
    parser.add_argument("--quick", action="store_true", help="2 rounds of 5 picks, 2 random seeds")
    parser.add_argument("--against", choices=("truth", "table"), default="truth",
                        help="score against the noise-free truth (default) or the noisy completed table")
    parser.add_argument("--world", choices=("demo", "close-sites", "second", "second-close-sites"), default="demo",
                        help="the demo world, the second invented world (other hosts, sites and drivers), or "
                             "either with a third of its site preferences nearly undecided")
    parser.add_argument("--goals", default="table,site", help="picker goals replayed (default: table,site)")
    parser.add_argument("--relearn", choices=("fit", "refresh"), default="fit",
                        help="fit the model in full after each round, as a user does (default), or refresh it")
    parser.add_argument("--out", metavar="DIR", default=None,
                        help="also write the replay's files (curves, learning_curves.png) into DIR")
    arguments = parser.parse_args(argv)
    if arguments.quick:
        arguments.rounds, arguments.per_round, arguments.seeds = 2, 5, 2
    if arguments.world.startswith("second"):
        world = invent_second_world()
        label = "the second INVENTED world (world.invent_second_world)"
    else:
        world = demo_world()
        label = "the INVENTED demo world"
    if arguments.world.endswith("close-sites"):
        world = close_site_gaps(world)
        label += f" with close sites for {len(world.attrs['close_elements'])} elements (world.close_site_gaps)"
    suspect_values = "refuse"
    if arguments.world.startswith("second"):
        # the correction's jump for F makes F's hyb binding energy in GaN look like a
        # flipped sign to the table check; by construction it is right
        suspect_values = "warn"
        label += "; its suspect values kept (suspect_values='warn': the jump of the correction for F)"
    print(f"Replay benchmark on {label} (not DFT data)")
    print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores")
    table = world.drop(columns="truth")
    print(f"completed table: {len(table)} cells, {table['element'].nunique()} elements, methods "
          f"{', '.join(sorted(set(table['method'])))}")
    reference = None
    if arguments.against == "truth":
        reference = world.drop(columns="value").rename(columns={"truth": "value"})
    print(f"figures scored against: {'noise-free truth of the invented world' if reference is not None else 'the noisy completed table'}")
    steps = []

    class Clock:
        def update(self, n=1):
            steps.append(time.perf_counter())

    started = time.perf_counter()
    result = replay(
        table, goal=tuple(arguments.goals.split(",")), rounds=arguments.rounds, per_round=arguments.per_round,
        method="hyb", n_random_seeds=arguments.seeds, random_state=arguments.seed,
        progress=Clock(), estimator=Surrogate(random_state=arguments.seed, suspect_values=suspect_values),
        keep_fraction=arguments.keep_fraction,
        reference=reference, relearn=arguments.relearn,
    )
    elapsed = time.perf_counter() - started
    fit_seconds = steps[0] - started
    n_strategies = len(result.settings["goals"]) + arguments.seeds
    n_relearned = n_strategies * arguments.rounds + FLOOR_GROUPS
    print(f"wall time {elapsed:.0f} s: initial fit "
          f"{fit_seconds:.1f} s, then {n_strategies} strategies of {arguments.rounds} rounds and the floor's "
          f"{FLOOR_GROUPS} groups side by side in the workers, {n_relearned} models relearned by "
          f"{arguments.relearn} in {elapsed - fit_seconds:.0f} s")
    if arguments.out:
        written = write_replay(result, arguments.out)
        print(f"files written: {', '.join(str(path) for path in written.values())}")
    print()
    print(replay_text(result))
    curves = result.curves
    goals = list(dict.fromkeys(curves.loc[curves["strategy"] != "random", "strategy"]))
    print("learning curves (random: median over seeds):")
    randoms = curves[curves["strategy"] == "random"].groupby("round")[["n_revealed", "error", "decided"]].median()
    by_goal = {goal: curves[curves["strategy"] == goal].set_index("round") for goal in goals}
    header = f"  {'round':>5} {'picks':>5} {'random MAE':>11} {'random decided':>15}"
    for goal in goals:
        header += f" {goal + ' MAE':>10} {goal + ' decided':>13}"
    print(header)
    for number in randoms.index:
        line = (f"  {number:>5} {int(randoms.at[number, 'n_revealed']):>5} {randoms.at[number, 'error']:>11.4f} "
                f"{randoms.at[number, 'decided']:>15.1f}")
        for goal in goals:
            line += f" {by_goal[goal].at[number, 'error']:>10.4f} {int(by_goal[goal].at[number, 'decided']):>13}"
        print(line)
    summary = result.summary.set_index(["goal", "metric"])
    print()
    if "table" in goals:
        random_final = summary.at[("table", "error"), "random_median_final"]
        picker_final = summary.at[("table", "error"), "picker_final"]
        floor = noise_floor(world, result.hidden, arguments.against)
        levels_of_noise = 1 if arguments.against == "truth" else 2
        print(f"(extra) true oracle: {floor:.4f} eV = MAE of gga value + TRUE correction against the hyb")
        print(f"        {arguments.against} of the hidden cells (independent noise of sd 0.05 eV on {levels_of_noise} "
              f"level(s) cannot be learned;")
        print(f"        sqrt(2/pi) * 0.05 * sqrt({levels_of_noise}) = "
              f"{math.sqrt(2 / math.pi) * 0.05 * math.sqrt(levels_of_noise):.4f} eV)")
        gap = (random_final - picker_final) / (random_final - floor) if random_final > floor else float("nan")
        print(f"(extra) share of the random median's excess error over the true oracle removed by the table goal: "
              f"{gap:.0%}")
        ratios = []
        for number in randoms.index[1:]:
            ratios.append(by_goal["table"].at[number, "error"] / randoms.at[number, "error"])
        share = summary.at[("table", "error"), "share_removed"]
        print()
        print("issue 16 targets (this replay seed; the targets read the median over replay seeds):")
        print(f"  table goal / random median MAE per round: {', '.join(f'{r:.3f}' for r in ratios)} "
              f"(target <= 1.0 every round): {'met' if max(ratios) <= 1.0 else 'NOT met'}")
        print(f"  share of random's excess over the measured floor removed: {share:.0%} (target >= 75 %): "
              f"{'met' if share >= 0.75 else 'NOT met'}")
        low = summary.at[("table", "error"), "chance_share_low"]
        high = summary.at[("table", "error"), "chance_share_high"]
        if not (math.isnan(low) or math.isnan(high)):
            beyond = "above" if share > high else "inside" if share >= low else "below"
            print(f"  a picker no better than random reads {low:.0%} to {high:.0%} here; this seed's share is "
                  f"{beyond} that range (over seeds: python benchmarks/replay_seeds.py with the --out folders)")
    if "site" in goals:
        site_picker = summary.at[("site", "decided"), "picker_final"]
        site_random = summary.at[("site", "decided"), "random_median_final"]
        print(f"  site goal decided {site_picker:.0f} vs random median {site_random:.1f} after "
              f"{int(summary.at[('site', 'decided'), 'picks'])} picks (the 1.5x target is read on "
              f"--world close-sites after 20 picks, counting new decisions)")


if __name__ == "__main__":
    main()
