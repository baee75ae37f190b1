"""How fast the command line answers when it has no work to do.

``dopantgap --help``, a subcommand's ``--help`` and a mistyped command should answer at
once: the heavy libraries (numpy, pandas, scipy, scikit-learn, matplotlib, shap,
mendeleev) are imported only inside the commands that use them. Each case is run as a
child process, as a user types it, several times; the median wall time is printed with
the target (0.5 s) and the load average, since a busy machine slows every start.

    python benchmarks/bench_startup.py            # 5 runs per case
    python benchmarks/bench_startup.py --runs 11

For comparison the last line times ``python -c "import dopantgap; dopantgap.Surrogate"``,
which does load the libraries a fit needs.
"""

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time

TARGET_SECONDS = 0.5


def _command():
    """The installed ``dopantgap`` script, else the module run by this interpreter."""
    script = shutil.which("dopantgap")
    return [script] if script else [sys.executable, "-m", "dopantgap.cli"]


def _median_seconds(argv, runs, cwd, expected_status):
    times = []
    for _ in range(runs):
        started = time.perf_counter()
        done = subprocess.run(argv, cwd=cwd, capture_output=True, text=True, check=False)
        times.append(time.perf_counter() - started)
        if done.returncode != expected_status:
            raise SystemExit(f"{' '.join(argv)}: exit status {done.returncode}, expected "
                             f"{expected_status}\n{done.stderr}")
    return statistics.median(times), min(times), max(times)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5, help="runs per case (default: 5)")
    options = parser.parse_args()
    command = _command()
    cases = [
        ("dopantgap --help", ["--help"], 0),
        ("dopantgap fit --help", ["fit", "--help"], 0),
        ("argument error (fit without --out)", ["fit", "table.csv"], 2),
        ("option refused by a command (replay --rounds 0)", ["replay", "table.csv", "--rounds", "0"], 2),
    ]
    print(f"command: {' '.join(command)}; {options.runs} runs per case; "
          f"load average at start {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    with tempfile.TemporaryDirectory() as folder:
        for label, arguments, status in cases:
            median, fastest, slowest = _median_seconds(command + arguments, options.runs, folder, status)
            verdict = "ok" if median < TARGET_SECONDS else "SLOW"
            print(f"  {label:<50} median {median:.3f} s (min {fastest:.3f}, max {slowest:.3f}) "
                  f"target < {TARGET_SECONDS} s {verdict}")
        median, fastest, slowest = _median_seconds(
            [sys.executable, "-c", "import dopantgap; dopantgap.Surrogate"], options.runs, folder, 0
        )
        print(f"  {'for comparison: import with the fit libraries':<50} median {median:.3f} s "
              f"(min {fastest:.3f}, max {slowest:.3f})")
    print(f"load average at the end {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
