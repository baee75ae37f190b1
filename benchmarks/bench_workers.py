"""Fit the invented demo table with the candidate learners in processes, threads or one by one.

`Surrogate.fit` runs its two candidate learners side by side (`workers.worker_pool`,
joblib's loky processes). Threads would end with their process by themselves; this
measures what they would cost. Each mode runs in its own child process, so no worker
or BLAS setting carries over. Timings depend on what else runs on the cores: the load
average is printed. The filled values must agree across modes (same seed).
"""

import argparse
import os
import subprocess
import sys

MODES = ("processes", "threads", "one-by-one")

_CHILD = """
import sys, time
from joblib import parallel_config
from threadpoolctl import threadpool_limits
from dopantgap.demo import demo_table
from dopantgap.surrogate import Surrogate
from dopantgap.validate import validation_metrics

mode = sys.argv[1]
table = demo_table()
settings = {"processes": {}, "threads": {"backend": "threading"}, "one-by-one": {"n_jobs": 1}}[mode]
started = time.perf_counter()
with parallel_config(**settings), threadpool_limits(None if mode == "processes" else 1):
    model = Surrogate(random_state=0).fit(table)
    fitted = time.perf_counter()
    validation_metrics(model, random_state=0)
checksum = model.predict(table[["element", "host", "site", "method", "quantity"]])["value"].sum()
print(f"{mode:<11} fit {fitted - started:6.1f} s   validation {time.perf_counter() - fitted:5.1f} s   "
      f"sum of predictions {checksum:.9f}")
"""


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--modes", default=",".join(MODES), help=f"comma-separated, of {', '.join(MODES)}")
    arguments = parser.parse_args(argv)
    print("Fit of the INVENTED demo table (not DFT data), learner auto, seed 0.")
    print("Load average before start (1/5/15 min): " + " / ".join(f"{v:.2f}" for v in os.getloadavg()))
    for mode in arguments.modes.split(","):
        subprocess.run([sys.executable, "-c", _CHILD, mode.strip()], check=True)
    print("Load average after (1/5/15 min): " + " / ".join(f"{v:.2f}" for v in os.getloadavg()))


if __name__ == "__main__":
    main()
