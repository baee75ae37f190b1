"""Time `dopantgap next --count 10` for each goal on the shipped demo model (invented data).

Each goal runs once as a child process (what a user waits for, including Python start-up
and loading the model folder) and once as a Python call on a loaded model (the picking
alone). Target: `next models/demo --count 10 --method hyb --cost gga=1,hyb=30` under 10 s
on 2 cores. Timings depend on what else runs on the cores: the load average is printed.
"""

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from dopantgap.picker import pick_next
from dopantgap.store import load_model

TARGET_SECONDS = 10.0
RUNS = (
    ("table, --method hyb --cost gga=1,hyb=30", ["--method", "hyb", "--cost", "gga=1,hyb=30"], {"method": "hyb", "cost": "gga=1,hyb=30"}),
    ("table, every method", [], {}),
    ("site", ["--goal", "site"], {"goal": "site"}),
    ("window E_bind:-1.2:-0.4", ["--window", "E_bind:-1.2:-0.4"], {"goal": "window", "window": "E_bind:-1.2:-0.4"}),
)


def load_text():
    return " / ".join(f"{value:.2f}" for value in os.getloadavg())


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--model", default=str(Path(__file__).resolve().parents[1] / "models" / "demo"))
    parser.add_argument("--count", type=int, default=10)
    arguments = parser.parse_args(argv)
    print("dopantgap next benchmark on an INVENTED demo model (not DFT data).")
    print(f"Load average before start (1/5/15 min): {load_text()}")
    started = time.perf_counter()
    surrogate, _manifest = load_model(arguments.model)
    print(f"Loading the model folder in Python: {time.perf_counter() - started:.2f} s")
    print(f"{'goal':<42} {'command line':>13} {'Python call':>12}")
    verdict = None
    with tempfile.TemporaryDirectory() as folder:
        for label, options, kwargs in RUNS:
            out = Path(folder) / "next.csv"
            command = [sys.executable, "-m", "dopantgap.cli", "next", arguments.model,
                       "--count", str(arguments.count), "--quiet", "--out", str(out)] + options
            started = time.perf_counter()
            subprocess.run(command, check=True)
            command_seconds = time.perf_counter() - started
            started = time.perf_counter()
            pick_next(surrogate, count=arguments.count, **kwargs)
            call_seconds = time.perf_counter() - started
            print(f"{label:<42} {command_seconds:>11.2f} s {call_seconds:>10.2f} s")
            if verdict is None:
                verdict = command_seconds
    print(
        f"Target: the first line's command under {TARGET_SECONDS:.0f} s: "
        f"{'met' if verdict < TARGET_SECONDS else 'NOT met'} ({verdict:.2f} s)."
    )
    print(f"Load average at the end (1/5/15 min): {load_text()}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
