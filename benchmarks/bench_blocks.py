"""How much blocked conditioning costs in accuracy and saves in memory.

A stage with more rows than ``--block-rows`` is conditioned in blocks of whole hosts
(``learners.blocks.BlockedGPR``): each host's cells are predicted by the Gaussian process
of its own block, with the hyperparameters tuned as before. This benchmark fits the same
INVENTED table (``bench_scale.scale_table``: not DFT data) with the exact conditioning
(one block: ``--block-rows`` above the largest stage) and with smaller blocks, each as
the commands a user types (``dopantgap fit --learner gp --block-rows N``, ``fill``), and
prints per block size: wall time, CPU time, peak memory of the process tree, the
new-cell and upgrade MAE against the invented truth, the coverage of the 90 % intervals,
and the MAE and coverage relative to the exact conditioning.

Run ``python benchmarks/bench_blocks.py`` (3,000 cells; blocks of 100000 = exact, 1000
and 500 rows), or e.g. ``--cells 10000 --block-rows 100000,4000,2000``.
"""

import argparse
import os
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_scale import accuracy, run_step, scale_table  # noqa: E402


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=3000, help="computed cells of the invented table")
    parser.add_argument("--block-rows", default="100000,1000,500", help="block sizes, the first the reference")
    parser.add_argument("--timeout", type=float, default=1800.0)
    parser.add_argument("--seed", type=int, default=0)
    arguments = parser.parse_args(argv)
    sizes = [int(text) for text in arguments.block_rows.split(",")]
    world, table, n_hosts = scale_table(arguments.cells, seed=arguments.seed)
    stages = table.groupby(["quantity", "method"]).size()
    print(f"INVENTED table: {len(table)} computed cells, {n_hosts} hosts; largest stage {stages.max()} rows")
    print(f"machine load (1 min) at start: {os.getloadavg()[0]:.1f}")
    results = []
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "table.csv"
        table.to_csv(path, index=False)
        for rows in sizes:
            model = Path(folder) / f"model_{rows}"
            filled = Path(folder) / f"filled_{rows}.csv"
            wall, cpu, peak, finished, error = run_step(
                ["fit", str(path), "--out", str(model), "--learner", "gp", "--block-rows", str(rows),
                 "--suspect-values", "warn", "--quiet", "--seed", str(arguments.seed)],
                arguments.timeout,
            )
            if not finished:
                print(f"block rows {rows}: fit stopped after {arguments.timeout:.0f} s")
                continue
            run_step(["fill", str(model), "--out", str(filled)], arguments.timeout)
            scores = accuracy(world, table, filled)
            results.append((rows, wall, cpu, peak, scores))
            reference = results[0][4]
            print(
                f"block rows {rows:>6}: fit wall {wall:7.1f} s  cpu {cpu:7.1f} s  peak {peak / 2**30:5.2f} GB  "
                f"new-cell MAE {scores['new-cell MAE']:.4f}  upgrade MAE {scores['upgrade MAE']:.4f}  "
                f"coverage {scores['coverage']:.3f}  |  against the first: new-cell MAE "
                f"{scores['new-cell MAE'] / reference['new-cell MAE']:.3f}x, upgrade MAE "
                f"{scores['upgrade MAE'] / reference['upgrade MAE']:.3f}x, coverage "
                f"{scores['coverage'] - reference['coverage']:+.3f}",
                flush=True,
            )


if __name__ == "__main__":
    main()
