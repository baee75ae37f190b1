"""How fit, fill and next grow with the table: wall time, CPU time, peak memory, accuracy.

The tables are INVENTED (not DFT data): ``world.invent_second_world`` over 73 elements
(``SCALE_ELEMENTS``) and a growing list of binary hosts ``AB`` (``scale_hosts``: every
cation of ``CATIONS`` with every anion of ``ANIONS``, MgO and GaN first, each with the
sites sub_A, sub_B, int_oct and int_tet; only MgO and GaN carry a binding energy).
``world.observe`` keeps what a researcher would have: the expensive level (hyb) for a
seeded 20 % of the elements, the cheap level (gga) with 10 % of its cells left out. A
host adds about 330 computed cells; the number of hosts is the smallest that reaches
each size asked for.

Each step runs as the command a user types (``dopantgap fit``, ``fill``, ``next
--count 10``) in a child process. Printed per size and step:

* wall time; CPU time of the child and of every process it waited for
  (``resource.getrusage(RUSAGE_CHILDREN)``: joblib's worker processes included);
* peak resident memory of the whole process tree (the child and its descendants,
  summed, read from ``/proc`` every 0.2 s; Linux only);
* after ``fill``: the MAE against the invented truth of the cells the table lacks
  (new-cell: cheap-level cells left out; upgrade: hyb cells of elements computed at gga
  only) and the coverage of the 90 % intervals: the share of the world's noisy values
  (what a calculation would return, which is what the intervals describe) inside
  lo..hi, over all those cells and per kind. Read against the noise-free truth the
  intervals look wider than they are (0.976 instead of 0.961 at 10,000 cells).

With ``--dask-workers 1,2,4`` the fit is run again on a Dask ``LocalCluster`` of that
many worker processes (one thread each; ``fit --scheduler``, needs ``pip install
"dopantgap[cluster]"``): wall time and speed-up over the local fit. The cluster's
workers are not children of the fit, so only the wall time is printed.

A step that outlives ``--timeout`` is stopped (its whole process tree) and printed as
"> T s"; the sizes after it are skipped for that step and what depends on it.

Run ``python benchmarks/bench_scale.py`` (800 and 3,000 cells, the default learner), or
e.g. ``--sizes 800,3000,10000,30000,100000 --learner gp --timeout 1800``. Times depend on
the machine and its load (printed in the header).
"""

import argparse
import math
import os
import resource
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd

from dopantgap.world import DEMO_ELEMENTS, SECOND_ELEMENTS, invent_second_world, observe

#: The elements of the scale tables: both invented worlds' elements and eleven
#: lanthanides (73; no element without a stable isotope).
SCALE_ELEMENTS = tuple(dict.fromkeys(DEMO_ELEMENTS + SECOND_ELEMENTS + tuple(
    "Pr Nd Sm Eu Tb Dy Ho Er Tm Yb Lu".split()
)))
CATIONS = tuple(
    "Mg Ga Li Na K Rb Cs Be Ca Sr Ba Sc Y La Ti Zr Hf V Nb Ta Cr Mo W Mn Fe Co Ni Cu Ag Zn Cd Al In "
    "Tl Sn Pb Bi".split()
)
ANIONS = ("O", "N", "S", "Se", "Te", "P", "As", "F", "Cl", "Br", "I")
CELLS_PER_HOST = 340
KEYS = ["element", "host", "site", "method", "quantity"]


def scale_hosts(n_hosts):
    """The first ``n_hosts`` invented binary hosts, MgO and GaN first (docstring)."""
    formulas = ["MgO", "GaN"] + [
        cation + anion for anion in ANIONS for cation in CATIONS if cation + anion not in ("MgO", "GaN")
    ]
    if n_hosts > len(formulas):
        raise SystemExit(f"at most {len(formulas)} hosts are invented here, not {n_hosts}")
    hosts = {}
    for formula in formulas[:n_hosts]:
        cation = next(c for c in CATIONS if formula.startswith(c) and formula[len(c):] in ANIONS)
        anion = formula[len(cation):]
        hosts[formula] = (f"sub_{cation}", f"sub_{anion}", "int_oct", "int_tet")
    return hosts


def scale_table(n_cells, seed=0):
    """The invented world and the observed table of about ``n_cells`` computed cells."""
    # a guess from below, then one host more at a time until the size is reached
    n_hosts = max(1, math.floor(n_cells / CELLS_PER_HOST))
    while True:
        world = invent_second_world(element_symbols=SCALE_ELEMENTS, hosts=scale_hosts(n_hosts), seed=seed)
        table = observe(world, expensive_fraction=0.2, missing_fraction=0.1, seed=seed)
        if len(table) >= n_cells:
            return world, table, n_hosts
        n_hosts += 1


class TreeMemory:
    """Peak summed resident memory (bytes) of a process and its descendants, sampled."""

    def __init__(self, pid, every=0.2):
        self.pid, self.every, self.peak = pid, every, 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _tree(self):
        children = {}
        for entry in os.listdir("/proc"):
            if not entry.isdigit():
                continue
            try:
                with open(f"/proc/{entry}/stat") as handle:
                    fields = handle.read().rsplit(")", 1)[1].split()
            except OSError:
                continue
            children.setdefault(int(fields[1]), []).append(int(entry))
        found, todo = [], [self.pid]
        while todo:
            pid = todo.pop()
            found.append(pid)
            todo.extend(children.get(pid, []))
        return found

    def _rss(self, pid):
        try:
            with open(f"/proc/{pid}/status") as handle:
                for line in handle:
                    if line.startswith("VmRSS:"):
                        return int(line.split()[1]) * 1024
        except OSError:
            pass
        return 0

    def _run(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, sum(self._rss(pid) for pid in self._tree()))
            self._stop.wait(self.every)

    def stop(self):
        self._stop.set()
        self._thread.join()
        return self.peak


def run_step(arguments, timeout):
    """Run a dopantgap command; (wall s, CPU s, peak bytes, finished, stderr tail)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    started = time.perf_counter()
    child = subprocess.Popen(
        [sys.executable, "-m", "dopantgap", *arguments], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
        text=True, start_new_session=True,
    )
    memory = TreeMemory(child.pid)
    finished = True
    try:
        _, error = child.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        finished = False
        os.killpg(child.pid, signal.SIGTERM)
        try:
            _, error = child.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            os.killpg(child.pid, signal.SIGKILL)
            _, error = child.communicate()
    wall = time.perf_counter() - started
    peak = memory.stop()
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    if finished and child.returncode != 0:
        raise SystemExit(f"dopantgap {' '.join(arguments)} failed:\n{error[-2000:]}")
    return wall, cpu, peak, finished, error[-500:]


def accuracy(world, table, filled_path):
    """New-cell and upgrade MAE against the truth, and the 90 % intervals' coverage of
    the world's noisy values (all cells, new-cell, upgrade)."""
    filled = pd.read_csv(filled_path)
    filled = filled[filled["status"] != "computed"]
    scored = filled.merge(world[KEYS + ["truth", "value"]], on=KEYS, suffixes=("", "_world"))
    cheap_elements = set(table.loc[table["method"] == "gga", "element"])
    expensive_elements = set(table.loc[table["method"] == "hyb", "element"])
    upgrade = (scored["method"] == "hyb") & scored["element"].isin(cheap_elements - expensive_elements)
    new_cell = scored["method"] == "gga"
    # the intervals describe a new calculation, noise included (as bench_honesty scores them)
    inside = (scored["value_world"] >= scored["lo"]) & (scored["value_world"] <= scored["hi"])
    return {
        "new-cell MAE": float(np.mean(np.abs(scored.loc[new_cell, "value"] - scored.loc[new_cell, "truth"]))),
        "upgrade MAE": float(np.mean(np.abs(scored.loc[upgrade, "value"] - scored.loc[upgrade, "truth"]))),
        "coverage": float(inside.mean()),
        "new-cell coverage": float(inside[new_cell].mean()),
        "upgrade coverage": float(inside[upgrade].mean()),
        "cells scored": int(len(scored)),
    }


def dask_fit(n_workers, command, timeout, local_wall):
    """Wall time of ``command`` (a fit) sent to a LocalCluster of ``n_workers``, printed
    with its speed-up over ``local_wall``."""
    from distributed import LocalCluster

    with LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        wall, _cpu, _peak, finished, error = run_step(command + ["--scheduler", cluster.scheduler_address], timeout)
    shown = _seconds(wall, finished, timeout)
    speed_up = f"{local_wall / wall:.2f}x the local fit" if finished else "stopped"
    print(f"  fit on {n_workers} Dask worker(s): wall {shown:>8}  ({speed_up})")
    return shown


def _seconds(value, finished, timeout):
    return f"{value:.0f} s" if finished else f"> {timeout:.0f} s"


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="800,3000", help="computed cells, comma-separated (default 800,3000)")
    parser.add_argument("--learner", choices=("auto", "gp", "boost"), default="auto")
    parser.add_argument("--timeout", type=float, default=900.0, help="seconds before a step is stopped")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--keep", metavar="DIR", default=None, help="keep tables, models and outputs in DIR")
    parser.add_argument("--dask-workers", default="", metavar="N,...",
                        help="also fit on a Dask LocalCluster of each of these many workers (e.g. 1,2,4)")
    arguments = parser.parse_args(argv)
    dask_workers = [int(n) for n in arguments.dask_workers.split(",") if n.strip()]
    sizes = [int(size) for size in arguments.sizes.split(",")]
    print("Scale benchmark on INVENTED tables (world.invent_second_world over growing hosts; not DFT data)")
    print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores; "
          f"learner {arguments.learner}; timeout {arguments.timeout:.0f} s per step")
    folder = Path(arguments.keep or tempfile.mkdtemp(prefix="dopantgap_scale_"))
    folder.mkdir(parents=True, exist_ok=True)
    stopped = set()
    rows = []
    for size in sizes:
        world, table, n_hosts = scale_table(size, arguments.seed)
        here = folder / f"cells_{size}"
        here.mkdir(exist_ok=True)
        table_path = here / "table.csv"
        table.to_csv(table_path, index=False)
        row = {"asked": size, "cells": len(table), "hosts": n_hosts}
        print(f"\n{len(table)} computed cells ({n_hosts} hosts, {table['element'].nunique()} elements) -> {here}")
        steps = [
            ("fit", ["fit", str(table_path), "--out", str(here / "model"), "--learner", arguments.learner,
                     "--suspect-values", "warn", "--quiet", "--seed", str(arguments.seed)]),
            ("fill", ["fill", str(here / "model"), "--out", str(here / "filled.csv"), "--quiet"]),
            ("next", ["next", str(here / "model"), "--count", "10", "--out", str(here / "next.csv"), "--quiet"]),
        ]
        for name, command in steps:
            if name in stopped or (name != "fit" and "fit" in stopped):
                print(f"  {name:<5} skipped (stopped at a smaller size)")
                row[name] = "skipped"
                continue
            wall, cpu, peak, finished, error = run_step(command, arguments.timeout)
            row[name] = _seconds(wall, finished, arguments.timeout)
            row[f"{name} CPU"] = f"{cpu:.0f} s"
            row[f"{name} peak"] = f"{peak / 2**30:.2f} GB"
            print(f"  {name:<5} wall {row[name]:>8}  CPU {cpu:7.0f} s ({cpu / max(wall, 1e-9):.2f} cores)  "
                  f"peak memory of the tree {peak / 2**30:.2f} GB")
            if not finished:
                stopped.add(name)
                print(f"        stopped after {arguments.timeout:.0f} s; last words: {error.strip()[-200:]!r}")
                if name == "fit":
                    break
                continue
            if name == "fill":
                scores = accuracy(world, table, here / "filled.csv")
                row.update(scores)
                print(f"        new-cell MAE {scores['new-cell MAE']:.3f} eV, upgrade MAE {scores['upgrade MAE']:.3f} eV, "
                      f"coverage of 90 % intervals {scores['coverage']:.3f} ({scores['cells scored']} cells; "
                      f"new-cell {scores['new-cell coverage']:.3f}, upgrade {scores['upgrade coverage']:.3f})")
        if "fit" not in stopped:
            local_wall = float(row["fit"].split()[0])
            for n_workers in dask_workers:
                row[f"fit, {n_workers} Dask workers"] = dask_fit(
                    n_workers, steps[0][1] + ["--out", str(here / f"model_dask{n_workers}")], arguments.timeout,
                    local_wall,
                )
        rows.append(row)
    print("\nsummary:")
    print(pd.DataFrame(rows).to_string(index=False))


if __name__ == "__main__":
    main()
