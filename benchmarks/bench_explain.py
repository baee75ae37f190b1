"""Benchmark of ``dopantgap explain`` on the shipped demo model (an INVENTED table).

Prints the wall time of

1. ``explain_model`` on ``models/demo`` (a Gaussian-process model of the invented demo
   table, ``dopantgap.demo``): every column and site-choice target, the table's elements;
   the first call in a process includes shap's one-off compilation (numba), so the
   time of a second call is printed too;
2. the command ``dopantgap explain models/demo --out DIR --elements Ti`` in a child
   process (load, explain, CSV files and figures).

Target: the command under 60 s on two cores. Run ``python benchmarks/bench_explain.py``
once (about 1.5 minutes); do not loop it on a shared machine.
"""

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO_MODEL = ROOT / "models" / "demo"


def main():
    from dopantgap.explain import explain_model
    from dopantgap.store import load_model

    print(f"load average at start: {os.getloadavg()[0]:.2f} ({os.cpu_count()} cores)")
    started = time.perf_counter()
    surrogate, _manifest = load_model(DEMO_MODEL)
    print(f"load models/demo (invented demo table): {time.perf_counter() - started:.1f} s")
    for attempt in ("first call (with shap's compilation)", "second call"):
        started = time.perf_counter()
        explanation = explain_model(surrogate)
        elapsed = time.perf_counter() - started
        print(
            f"explain_model, {attempt}: {elapsed:.1f} s for {len(explanation.targets)} targets x "
            f"{explanation.base_values['element'].nunique()} elements"
        )
    with tempfile.TemporaryDirectory() as folder:
        command = [sys.executable, "-m", "dopantgap.cli", "explain", str(DEMO_MODEL), "--out",
                   str(Path(folder) / "explained"), "--elements", "Ti", "--quiet"]
        started = time.perf_counter()
        subprocess.run(command, check=True)
        elapsed = time.perf_counter() - started
        n_files = len(list((Path(folder) / "explained").iterdir()))
    print(f"dopantgap explain models/demo --elements Ti: {elapsed:.1f} s wall, {n_files} files (target < 60 s)")
    print(f"load average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
