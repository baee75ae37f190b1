"""A host with no computed cell, then its first few: dopantgap on the INVENTED host family.

What: on the third INVENTED world (``world.invent_host_family``: eight rock-salt-like
hosts MgO CaO SrO BaO MgS CaS SrS BaS, each with a cation site, an anion site and an
octahedral interstitial, energies that follow two host descriptors plus a per-host term
no descriptor explains; no DFT data), each host named by ``--held-out`` is left out in
turn. A surrogate is fitted on the other seven (one full fit per held-out host, with the
family's site kinds, exactly as ``dopantgap fit --hosts`` would), and the held-out host
is filled as ``dopantgap fill --hosts-new`` fills it (``new_hosts.plan_new_hosts``).
Then k of its cells are "computed" (their noisy invented values added to the table),
chosen either by ``picker.pick_next(host=..., new_hosts=...)`` or at random, the model
is relearned with ``Surrogate.refreshed`` (no new calibration) and the remaining cells
of the host are predicted.

Why: a new host is where a user has least to go on; this says how far the k = 0 fill
can be trusted (error and the share of the noise-free truth inside the 90 % intervals),
how quickly the first calculations pay back, and whether the picked ones pay back
faster than random ones. Two rules a researcher could apply by hand are printed beside
the k = 0 fill: the impurity's mean over the other hosts (``baselines.other_hosts_baseline``)
and its value in the nearest host by host descriptors (``baselines.nearest_host_baseline``).

Scores are against the noise-free invented ``truth``: RMSE and MAE (eV), the share of
truths inside the 90 % interval, and the median interval width (eV). Random choices are
averaged over ``--draws`` draws (each draw scored, then the scores averaged).

How to run::

    python benchmarks/bench_new_host_family.py --ks ""          # k = 0 only: one fit per held-out host
    python benchmarks/bench_new_host_family.py                   # k = 0, 1, 5, 10, 5 random draws
    python benchmarks/bench_new_host_family.py --held-out SrO --ks 1,5 --draws 2 --learner gp

A ``refreshed`` model keeps its kernels when a host's first rows arrive (they get no
indicator of their own below ten cells), so each k > 0 step costs seconds; the three full
fits dominate the run time.

It saves ``benchmarks/figures/new_host_family.png`` (``--figure`` to change).
"""

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.baselines import nearest_host_baseline, other_hosts_baseline
from dopantgap.fill import fill_table
from dopantgap.new_hosts import plan_new_hosts
from dopantgap.picker import pick_next
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS
from dopantgap.world import FAMILY_HOSTS, FAMILY_SITE_KINDS, family_host_file_text, invent_host_family

#: A modest, mixed set of impurities (alkali, alkaline-earth, main-group, transition
#: metals and a few non-metals) so that three full fits stay within minutes.
ELEMENTS = "Li Na K Rb Be Ca Ba Al Ga In Sc Y Ti Zr Mn Fe Co Ni Cu Zn Sn N F Se"
FIGURE = Path(__file__).resolve().parent / "figures" / "new_host_family.png"
LABEL = "INVENTED data (world.invent_host_family), not DFT"
# Okabe-Ito colours, each line also with its own marker and dash for greyscale prints.
STYLE = {
    "next-picked": ("#0072B2", "o", "-"),
    "random": ("#E69F00", "s", "--"),
    "other-hosts mean (k=0)": ("#009E73", None, ":"),
    "nearest host (k=0)": ("#CC79A7", None, "-."),
}


def load_average():
    return " ".join(f"{value:.2f}" for value in os.getloadavg())


def score(cells, truth, predicted=None, mean=None):
    """Error and interval scores of predictions against the invented truth.

    ``predicted``: a frame with the cell keys and value, lo, hi (the model's); ``mean``:
    bare means in the order of ``cells`` (a hand rule, no interval).
    """
    if predicted is not None:
        merged = cells.merge(predicted, on=list(KEY_COLUMNS), how="left", validate="one_to_one")
        mean = merged["value"].to_numpy()
    error = np.asarray(mean, dtype=float) - truth
    result = {
        "n": len(truth),
        "rmse": float(np.sqrt(np.mean(error**2))),
        "mae": float(np.mean(np.abs(error))),
        "coverage": np.nan,
        "width": np.nan,
        "scenario": "",
    }
    if predicted is not None:
        lo, hi = merged["lo"].to_numpy(), merged["hi"].to_numpy()
        result["coverage"] = float(np.mean((truth >= lo) & (truth <= hi)))
        result["width"] = float(np.median(hi - lo))
        result["scenario"] = "/".join(sorted(set(merged["scenario"].dropna())))
    return result


def held_out_run(world, host, host_file, ks, draws, learner, seed):
    """Scores for one held-out host: k = 0 (model and two hand rules), then k picked/random."""
    keys = list(KEY_COLUMNS)
    training = world[world["host"] != host].drop(columns="truth").reset_index(drop=True)
    rows = world[world["host"] == host].reset_index(drop=True)
    records = []
    start = time.perf_counter()
    model = Surrogate(site_kinds=FAMILY_SITE_KINDS, learner=learner, random_state=seed).fit(training)
    fit_seconds = time.perf_counter() - start
    plan = plan_new_hosts(model, [host], host_file)
    filled = fill_table(model, new_hosts=plan)
    cells, truth = rows[keys], rows["truth"].to_numpy()
    records.append({"host": host, "k": 0, "chooser": "dopantgap", **score(cells, truth, predicted=filled)})
    rule = other_hosts_baseline(training, cells, site_kinds=FAMILY_SITE_KINDS)
    records.append({"host": host, "k": 0, "chooser": "other-hosts mean", **score(cells, truth, mean=rule)})
    # the plan's model knows the new host's descriptors; the fitted model's do not include it
    rule = nearest_host_baseline(
        training, cells, host_values=plan.surrogate.host_values_, site_kinds=FAMILY_SITE_KINDS
    )
    records.append({"host": host, "k": 0, "chooser": "nearest host", **score(cells, truth, mean=rule)})
    if plan.outside:
        print(f"  {host}: outside the table's hosts: {plan.outside[host]}")

    def grown_scores(chosen, chooser, k):
        given = rows.merge(chosen[keys], on=keys, how="inner")
        if len(given) != k:
            raise RuntimeError(f"{chooser} gave {len(given)} of the {k} cells asked for in {host}")
        rest = rows.merge(given[keys], on=keys, how="left", indicator=True)
        rest = rest[rest["_merge"] == "left_only"].drop(columns="_merge").reset_index(drop=True)
        grown = model.refreshed(pd.concat([training, given.drop(columns="truth")], ignore_index=True))
        return score(rest[keys], rest["truth"].to_numpy(), predicted=grown.predict(rest[keys]))

    pick_seconds = []
    for k in ks:
        started = time.perf_counter()
        picks = pick_next(model, count=k, host=host, new_hosts=plan)
        pick_seconds.append(time.perf_counter() - started)
        records.append({"host": host, "k": k, "chooser": "next-picked", **grown_scores(picks, "pick_next", k)})
        rng = np.random.default_rng(seed * 1000 + k)
        drawn = [grown_scores(rows.iloc[rng.choice(len(rows), size=k, replace=False)], "random", k) for _ in range(draws)]
        averaged = {name: float(np.mean([d[name] for d in drawn])) for name in ("n", "rmse", "mae", "coverage", "width")}
        averaged["scenario"] = "/".join(sorted({part for d in drawn for part in d["scenario"].split("/") if part}))
        records.append({"host": host, "k": k, "chooser": "random", **averaged})
    return records, fit_seconds, pick_seconds


def pooled(frame):
    """Mean over held-out hosts of each (k, chooser) score (every host has the same cell count)."""
    columns = ["n", "rmse", "mae", "coverage", "width"]
    return frame.groupby(["k", "chooser"], sort=False)[columns].mean().reset_index()


def print_table(frame, title):
    print(title)
    print(f"  {'k':>3} {'chosen by':<17} {'n':>5} {'RMSE':>7} {'MAE':>7} {'cover90':>8} {'width':>7}  scenario")
    for row in frame.itertuples(index=False):
        coverage = "" if np.isnan(row.coverage) else f"{row.coverage:.2f}"
        width = "" if np.isnan(row.width) else f"{row.width:.3f}"
        scenario = getattr(row, "scenario", "")
        print(
            f"  {row.k:>3} {row.chooser:<17} {row.n:>5.0f} {row.rmse:>7.3f} {row.mae:>7.3f} "
            f"{coverage:>8} {width:>7}  {scenario}"
        )


def draw_figure(summary, held_out, path):
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib import pyplot

    figure, (left, right) = pyplot.subplots(1, 2, figsize=(10, 4.2), layout="constrained")
    model_k0 = summary[(summary["k"] == 0) & (summary["chooser"] == "dopantgap")].iloc[0]
    for chooser in ("next-picked", "random"):
        colour, marker, dash = STYLE[chooser]
        part = summary[summary["chooser"] == chooser]
        ks = np.concatenate([[0], part["k"].to_numpy()]).astype(int)
        mae = np.concatenate([[model_k0["mae"]], part["mae"].to_numpy()])
        width = np.concatenate([[model_k0["width"]], part["width"].to_numpy()])
        coverage = np.concatenate([[model_k0["coverage"]], part["coverage"].to_numpy()])
        left.plot(ks, mae, color=colour, marker=marker, linestyle=dash, label=f"dopantgap, {chooser} cells")
        right.plot(ks, width, color=colour, marker=marker, linestyle=dash, label=f"dopantgap, {chooser} cells")
        offset = 8 if chooser == "next-picked" else -14
        for x, y, share in zip(ks, width, coverage):
            right.annotate(f"{share:.0%}", (x, y), textcoords="offset points", xytext=(4, offset),
                           fontsize=8, color=colour)
    for chooser, name in (("other-hosts mean", "other-hosts mean (k=0)"), ("nearest host", "nearest host (k=0)")):
        colour, _, dash = STYLE[name]
        value = summary[(summary["k"] == 0) & (summary["chooser"] == chooser)]["mae"].iloc[0]
        left.axhline(value, color=colour, linestyle=dash, label=f"hand rule: {name}")
    left.set_xlabel("cells of the held-out host computed, k")
    left.set_ylabel("MAE on its other cells (eV)")
    left.set_title("error against the invented truth")
    left.set_ylim(bottom=0)
    left.legend(fontsize=8)
    right.set_xlabel("cells of the held-out host computed, k")
    right.set_ylabel("median width of the 90 % interval (eV)")
    right.set_title("interval width (labels: share of truths inside)")
    right.set_ylim(0, 1.15 * summary["width"].max())  # room for the coverage labels
    right.legend(fontsize=8, loc="lower left")
    figure.suptitle(f"New host, {LABEL}; mean over held-out hosts {', '.join(held_out)}", fontsize=10)
    path.parent.mkdir(parents=True, exist_ok=True)
    figure.savefig(path, dpi=150)
    pyplot.close(figure)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--held-out", default="SrO,BaS,MgO", help="hosts left out in turn (default: SrO,BaS,MgO)")
    parser.add_argument("--ks", default="1,5,10", help="cells of the held-out host computed, comma-separated")
    parser.add_argument("--draws", type=int, default=5, help="random choices averaged per k (default: 5)")
    parser.add_argument("--elements", default=ELEMENTS, help="impurities, space-separated")
    parser.add_argument("--learner", default="auto", help="Surrogate learner (default: auto, as 'dopantgap fit')")
    parser.add_argument("--seed", type=int, default=0, help="seed of the invented world and of the fits")
    parser.add_argument("--figure", type=Path, default=FIGURE, help="where to save the figure")
    arguments = parser.parse_args()
    held_out = [host.strip() for host in arguments.held_out.split(",")]
    unknown = [host for host in held_out if host not in FAMILY_HOSTS]
    if unknown:
        parser.error(f"--held-out: {', '.join(unknown)} not in the family ({', '.join(FAMILY_HOSTS)})")
    ks = [int(text) for text in arguments.ks.split(",") if text.strip()]  # empty: k = 0 only
    wall = time.perf_counter()
    print(f"New host benchmark on {LABEL}.")
    print(f"load average at start: {load_average()} (2-core machine; other jobs move the timings)")
    world = invent_host_family(element_symbols=arguments.elements.split(), methods=("gga", "hyb"), seed=arguments.seed)
    world = world[world["method"] == "gga"].reset_index(drop=True)  # the cheap level only, to keep it fast
    print(
        f"{world['element'].nunique()} impurities x {world['host'].nunique()} hosts, cheap level 'gga': "
        f"{len(world)} cells ({len(world) // world['host'].nunique()} per host); held out in turn: {', '.join(held_out)}"
    )
    records, fits, picks = [], [], []
    with tempfile.TemporaryDirectory() as folder:
        host_file = Path(folder) / "hosts.csv"
        host_file.write_text(family_host_file_text(FAMILY_HOSTS))
        for position, host in enumerate(held_out):
            found, fit_seconds, pick_seconds = held_out_run(
                world, host, host_file, ks, arguments.draws, arguments.learner, arguments.seed + position
            )
            records += found
            fits.append(fit_seconds)
            picks += pick_seconds
            print(f"  {host} done: fit {fit_seconds:.0f} s", flush=True)
    frame = pd.DataFrame(records)
    for host in held_out:
        print_table(frame[frame["host"] == host], f"\nHeld-out host {host} (k cells of it computed; scored on the rest):")
    summary = pooled(frame)
    print_table(summary.assign(scenario=""), f"\nMean over the {len(held_out)} held-out hosts:")
    print(
        "\nRMSE, MAE and width in eV, against the noise-free invented truth; cover90 = share of truths inside "
        "the 90 % interval. Hand rules give no interval."
    )
    draw_figure(summary, held_out, arguments.figure)
    print(f"figure: {arguments.figure}")
    print(f"fits: {', '.join(f'{s:.0f}' for s in fits)} s; pick_next at most {max(picks, default=0.0):.1f} s")
    print(f"load average at end: {load_average()}")
    print(f"wall time: {time.perf_counter() - wall:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
