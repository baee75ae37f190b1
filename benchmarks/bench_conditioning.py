"""Conditioning a Gaussian process with its kernel fixed: scikit-learn's fit against
``ConditionedGPR`` (one kernel matrix and one Cholesky factor instead of two).

What every stage of a fit does once its hyperparameters are tuned, on all its rows; past
about 10,000 rows it is most of a fit. The rows are random (8 standard-normal columns,
a smooth target with noise: INVENTED); each size runs in a fresh process, held to one
BLAS thread as the fit's workers are, so that its peak memory is its own.

Run ``python benchmarks/bench_conditioning.py`` (sizes 2000 and 8000) or ``--sizes
2000,8000,16000``. Times depend on the load of the machine (printed).
"""

import argparse
import os
import resource
import subprocess
import sys
import time

import numpy as np


def _one(which, n_rows):
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import RBF, ConstantKernel, WhiteKernel
    from threadpoolctl import threadpool_limits

    from dopantgap.learners.conditioned import ConditionedGPR

    rng = np.random.default_rng(0)
    X = rng.normal(size=(n_rows, 8))
    y = np.sin(X[:, 0]) + 0.3 * X[:, 1] + 0.1 * rng.normal(size=n_rows)
    kernel = ConstantKernel(1.3) * RBF(np.full(8, 1.5)) + WhiteKernel(0.01)
    process = GaussianProcessRegressor if which == "scikit-learn" else ConditionedGPR
    with threadpool_limits(limits=1):
        started = time.perf_counter()
        process(kernel=kernel, optimizer=None, normalize_y=True).fit(X, y)
        seconds = time.perf_counter() - started
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6  # kB on Linux
    print(f"{seconds:.2f} {peak:.2f}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="2000,8000")
    parser.add_argument("--one", nargs=2, help=argparse.SUPPRESS)
    arguments = parser.parse_args(argv)
    if arguments.one:
        _one(arguments.one[0], int(arguments.one[1]))
        return
    print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores")
    print(f"{'rows':>6}  {'scikit-learn s':>14}  {'ConditionedGPR s':>16}  {'speed-up':>8}  {'peak GB (both)':>15}")
    for n_rows in [int(size) for size in arguments.sizes.split(",")]:
        found = {}
        for which in ("scikit-learn", "ConditionedGPR"):
            out = subprocess.run([sys.executable, __file__, "--one", which, str(n_rows)],
                                 capture_output=True, text=True, check=True).stdout.split()
            found[which] = (float(out[0]), float(out[1]))
        (a, peak_a), (b, peak_b) = found["scikit-learn"], found["ConditionedGPR"]
        print(f"{n_rows:>6}  {a:>14.2f}  {b:>16.2f}  {a / b:>7.2f}x  {peak_a:>6.2f} / {peak_b:.2f}")


if __name__ == "__main__":
    main()
