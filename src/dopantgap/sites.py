"""Which site does an impurity prefer? Probabilities from joint samples.

For one element, host, method and quantity, the energies of its sites are drawn
together from the surrogate's calibrated joint distribution (so the correlation
between an element's sites, through its shared element offset, is kept) and the
share of draws in which each site is lowest is that site's probability. Computed
sites enter with their own value and no spread.

Energies are compared as the table gives them: the user's quantity must be one in
which sites are comparable (for example a solution energy with a common reference).
"""

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from dopantgap.progress import expect_steps, step
from dopantgap.reproducible import seed_integer

__all__ = ["site_quantities", "site_preference"]


def site_quantities(table):
    """Quantities that have at least two sites in some host (where a choice exists)."""
    counts = table.groupby(["quantity", "host"])["site"].nunique()
    return sorted({quantity for (quantity, _host), n in counts.items() if n >= 2})


def _draw(mean, cov, n_samples, rng):
    """Samples of N(mean, cov) for a positive semi-definite cov (zero rows allowed)."""
    eigenvalues, eigenvectors = np.linalg.eigh((cov + cov.T) / 2.0)
    root = eigenvectors * np.sqrt(np.clip(eigenvalues, 0.0, None))
    return mean + rng.standard_normal((n_samples, len(mean))) @ root.T


def site_preference(surrogate, element_symbols=None, quantities=None, n_samples=4000, random_state=0,
                    extra_columns=None, progress=None):
    """Probability that each site is the lowest in energy.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    element_symbols : sequence of str or None, default=None
        Elements to cover; None: the elements of the surrogate's table.
    quantities : sequence of str or None, default=None
        Site-energy quantities; None: every quantity with two or more sites in a host.
    n_samples : int, default=4000
        Joint draws per element, host and method (the probabilities' sampling error
        is at most 0.5 / sqrt(n_samples), 0.008 for 4000).
    random_state : None, int, RandomState or Generator, default=0
        Seed of the draws (``reproducible.seed_integer``).
    extra_columns : DataFrame or None, default=None
        (host, site, method, quantity) columns beyond the table's, e.g. a new host's
        (``new_hosts.NewHostPlan.columns``, with its ``surrogate``).
    progress : object or None, default=None
        Told the number of (quantity, host, method) groups first (``expect``, when it
        has one), then ``update(1)`` after each (``progress.bar``).

    Returns
    -------
    DataFrame
        One row per element, host, method, quantity and site: ``p_lowest``,
        ``value`` (mean), ``std`` and ``status`` of the site's cell, and ``rank``
        (1 = most probable lowest site).
    """
    rng = np.random.default_rng(seed_integer(random_state))
    table = surrogate.table_
    symbols = list(dict.fromkeys(table["element"])) if element_symbols is None else list(element_symbols)
    quantities = site_quantities(table) if quantities is None else list(quantities)
    records = []
    columns = table[["host", "site", "method", "quantity"]]
    if extra_columns is not None:
        columns = pd.concat([columns, extra_columns[["host", "site", "method", "quantity"]]], ignore_index=True)
    groups = []
    for quantity in quantities:
        rows = columns[columns["quantity"] == quantity]
        for host, host_rows in rows.groupby("host", sort=False):
            sites = list(dict.fromkeys(host_rows["site"]))
            if len(sites) >= 2:
                groups += [(quantity, host, sites, method) for method in dict.fromkeys(host_rows["method"])]
    expect_steps(progress, len(groups))
    for quantity, host, sites, method in groups:
        cells = pd.DataFrame(
            [
                {"element": e, "host": host, "site": s, "method": method, "quantity": quantity}
                for e in symbols
                for s in sites
            ]
        )
        # one pass of the chain: the joint's diagonal is what ``predict`` would
        # give (the same calibration of the same raw spread), and a computed cell
        # is the one with a zero row
        with threadpool_limits(limits=1):  # small matrices: as fill.fill_table says why
            mean, cov = surrogate.predict_joint(cells)
        variance = np.diag(cov)
        std = np.sqrt(np.clip(variance, 0.0, None))
        status = np.where(variance == 0.0, "computed", "predicted")
        for position, element in enumerate(symbols):
            block = slice(position * len(sites), (position + 1) * len(sites))
            draws = _draw(mean[block], cov[block, block], n_samples, rng)
            lowest = np.bincount(np.argmin(draws, axis=1), minlength=len(sites)) / n_samples
            order = np.argsort(-lowest, kind="stable")
            ranks = np.empty(len(sites), dtype=int)
            ranks[order] = np.arange(1, len(sites) + 1)
            for index, site in zip(range(block.start, block.stop), sites):
                records.append(
                    {
                        "element": element,
                        "host": host,
                        "method": method,
                        "quantity": quantity,
                        "site": site,
                        "p_lowest": float(lowest[index - block.start]),
                        "rank": int(ranks[index - block.start]),
                        "value": float(mean[index]),
                        "std": float(std[index]),
                        "status": str(status[index]),
                    }
                )
        step(progress)
    return pd.DataFrame(
        records,
        columns=["element", "host", "method", "quantity", "site", "p_lowest", "rank", "value", "std", "status"],
    )
