"""Suspect values: how often the rule flags a right value, how often it finds a planted slip.

``table.suspect_values`` flags a value when it lies beyond a modified z-score of 3.5
(Iglewicz & Hoaglin 1993) against its column or against the same element's other method,
*and* reading it as meV, as kJ/mol or with its sign flipped brings it back inside. This
script prints, per table:

* false flags: values flagged in a table taken as right, beside the count of values that a
  plain |z| > 3.5 against their column would mark (the rule without a reading);
* found slips: one value at a time multiplied by 1000 (meV; only values whose meV form
  stays within the reader's 1000 limit), and one element's whole quantity negated at a time
  (flipped sign), and the share of those slips the rule flags at the planted rows.

Tables: the invented demo table, invented worlds (``world.invent_world`` and
``invent_second_world``, seeds 0..N-1; INVENTED data), and the real published tables in
``../shared/real/`` when present (read at run time, never copied into the repository):

* ``diffusion_Qrel.csv``: H. Wu, T. Mayeshiba, D. Morgan, "High-throughput ab-initio
  dilute solute diffusion database", Scientific Data 3, 160054 (2016).
* ``segregation_ruban1999.csv``: A. V. Ruban, H. L. Skriver, J. K. Norskov, "Surface
  segregation energies in transition-metal alloys", Phys. Rev. B 59, 15990 (1999).

Run ``python benchmarks/bench_suspects.py`` (about a minute) or ``--worlds 5``.
"""

import argparse
from pathlib import Path

import numpy as np

from dopantgap.demo import demo_table
from dopantgap.table import KEY_COLUMNS, MAX_ABS_VALUE, SUSPECT_THRESHOLD, read_table, suspect_values
from dopantgap.world import invent_second_world, invent_world, observe

REAL = Path(__file__).resolve().parents[2] / "shared" / "real"
REAL_TABLES = ("diffusion_Qrel.csv", "segregation_ruban1999.csv")


def plain_outliers(table):
    """Values beyond |z| > 3.5 against their own column (host/site/method/quantity)."""
    grouped = table.groupby(["quantity", "site", "method", "host"], sort=False)["value"]
    centre = grouped.transform("median")
    deviation = (table["value"] - centre).abs()
    spread = deviation.groupby([table[c] for c in ("quantity", "site", "method", "host")]).transform("median")
    z = 0.6745 * deviation / spread.where(spread > 0)
    return int((z > SUSPECT_THRESHOLD).sum())


def flagged_rows(table):
    found = suspect_values(table)
    keys = set(map(tuple, found[list(KEY_COLUMNS)].to_numpy()))
    return keys


def planted(table, rng, n_unit, n_sign):
    """(unit slips found, tried), (sign flips found, tried)."""
    unit_found = unit_tried = 0
    fits = np.flatnonzero(np.abs(table["value"].to_numpy()) * 1000 <= MAX_ABS_VALUE)
    for position in rng.choice(fits, size=min(n_unit, len(fits)), replace=False):
        slipped = table.copy()
        slipped.loc[slipped.index[position], "value"] *= 1000
        key = tuple(slipped[list(KEY_COLUMNS)].iloc[position])
        unit_tried += 1
        unit_found += key in flagged_rows(slipped)
    sign_found = sign_tried = 0
    pairs = table[["element", "quantity"]].drop_duplicates().to_numpy()
    for index in rng.choice(len(pairs), size=min(n_sign, len(pairs)), replace=False):
        element, quantity = pairs[index]
        rows = (table["element"] == element) & (table["quantity"] == quantity)
        slipped = table.copy()
        slipped.loc[rows, "value"] *= -1
        keys = set(map(tuple, slipped.loc[rows, list(KEY_COLUMNS)].to_numpy()))
        sign_tried += len(keys)
        sign_found += len(keys & flagged_rows(slipped))
    return (unit_found, unit_tried), (sign_found, sign_tried)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--worlds", type=int, default=20, help="seeds of each invented world (default 20)")
    parser.add_argument("--plants", type=int, default=40, help="slips planted per table and kind (default 40)")
    arguments = parser.parse_args()
    tables = {"demo (invented)": demo_table()}
    for seed in range(arguments.worlds):
        tables[f"world {seed} (invented)"] = observe(invent_world(seed=seed), seed=seed)
        tables[f"second world {seed} (invented)"] = observe(invent_second_world(seed=seed), seed=seed)
    for name in REAL_TABLES:
        if (REAL / name).exists():
            tables[f"{name} (real)"] = read_table(REAL / name)
        else:
            print(f"{REAL / name} not found: the real table is skipped")
    rng = np.random.default_rng(0)
    totals = np.zeros(7, dtype=np.int64)
    print(f"{'table':<34} {'values':>6} {'false flags':>11} {'plain |z|>3.5':>13} "
          f"{'meV found':>10} {'sign found':>11}")
    for name, table in tables.items():
        false_flags = len(suspect_values(table))
        plain = plain_outliers(table)
        (unit_found, unit_tried), (sign_found, sign_tried) = planted(table, rng, arguments.plants, arguments.plants)
        totals += [len(table), false_flags, plain, unit_found, unit_tried, sign_found, sign_tried]
        if not name.startswith(("world", "second world")) or arguments.worlds <= 3:
            print(f"{name:<34} {len(table):>6} {false_flags:>11} {plain:>13} "
                  f"{unit_found:>4}/{unit_tried:<5} {sign_found:>5}/{sign_tried:<5}")
    n, false_flags, plain, unit_found, unit_tried, sign_found, sign_tried = totals
    print(f"{'all tables':<34} {n:>6} {false_flags:>11} {plain:>13} "
          f"{unit_found:>4}/{unit_tried:<5} {sign_found:>5}/{sign_tried:<5}")
    print(f"false-flag rate {false_flags / n:.2%} (plain |z| > 3.5: {plain / n:.2%}); "
          f"planted meV slips found {unit_found / unit_tried:.0%}, flipped signs found {sign_found / sign_tried:.0%}")


if __name__ == "__main__":
    main()
