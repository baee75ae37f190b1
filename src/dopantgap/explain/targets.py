"""The explained targets (columns and site choices) and all of them as one function."""

import numpy as np
import pandas as pd

from dopantgap.explain.stages import _UNSEEN_LABEL, _StageColumns
from dopantgap.symbols import atomic_number


def _reference_site(rows, sites):
    """Site most often the lowest among the computed sites of elements with two or more."""
    counts = dict.fromkeys(sites, 0)
    for _element, part in rows.groupby("element", sort=False):
        if part["site"].nunique() < 2:
            continue
        lowest = part.loc[part["value"].idxmin(), "site"]
        counts[lowest] += 1
    return max(sites, key=lambda site: (counts[site], -sites.index(site)))


def _target_table(surrogate):
    """Every column target and site-choice target of the surrogate's table."""
    table = surrogate.table_
    records = []
    columns = table[["quantity", "host", "site", "method"]].drop_duplicates()
    for quantity, host, site, method in columns.itertuples(index=False, name=None):
        records.append(
            {
                "target": f"{quantity} | {host} | {site} | {method}",
                "kind": "column",
                "quantity": quantity,
                "host": host,
                "method": method,
                "site": site,
                "site_a": "",
                "site_b": "",
            }
        )
    groups = table[["quantity", "host", "method"]].drop_duplicates()
    for quantity, host, method in groups.itertuples(index=False, name=None):
        rows = table[(table["quantity"] == quantity) & (table["host"] == host) & (table["method"] == method)]
        sites = list(dict.fromkeys(rows["site"]))
        if len(sites) < 2:
            continue
        reference = _reference_site(rows, sites)
        for site in sites:
            if site == reference:
                continue
            records.append(
                {
                    "target": f"{quantity} | {host} | {method} | {site} - {reference}",
                    "kind": "site-choice",
                    "quantity": quantity,
                    "host": host,
                    "method": method,
                    "site": "",
                    "site_a": site,
                    "site_b": reference,
                }
            )
    frame = pd.DataFrame(
        records, columns=["target", "kind", "quantity", "host", "method", "site", "site_a", "site_b"]
    )
    return _ordered(frame)


#: Kinds of target group, in the order they answer the scientific question: which site
#: an impurity takes, then how strongly it binds, then single columns.
GROUP_KINDS = ("site choice", "binding", "column")


def _group_kind(kind, quantity):
    if kind == "site-choice":
        return "site choice"
    # a quantity named like a binding energy (E_bind, binding ...) is its own group
    return "binding" if "bind" in str(quantity).lower() else "column"


def _ordered(frame):
    """Targets in question order (site choices, binding, columns; table order within),
    each with its group: targets of one kind, quantity, host and level."""
    frame = frame.copy()
    group_kind = [_group_kind(kind, quantity) for kind, quantity in zip(frame["kind"], frame["quantity"])]
    frame.insert(1, "group", [
        f"{kind} | {quantity} | {host} | {method}"
        for kind, quantity, host, method in zip(group_kind, frame["quantity"], frame["host"], frame["method"])
    ])
    first_seen = {group: position for position, group in reversed(list(enumerate(frame["group"])))}
    rank = pd.DataFrame({
        "kind": [GROUP_KINDS.index(kind) for kind in group_kind],
        "group": [first_seen[group] for group in frame["group"]],
    }, index=frame.index)
    order = rank.sort_values(["kind", "group"], kind="stable").index
    return frame.loc[order].reset_index(drop=True)


def _chain(surrogate, quantity, method, host, site):
    """Stage-column units whose sum is the model's value of a column."""
    methods = surrogate.quantity_levels_[quantity]
    position = methods.index(method)
    units = []
    while True:
        units.append((quantity, methods[position], host, site))
        stage = surrogate.stages_[(quantity, methods[position])]
        if stage.kind != "correction" or position == 0:
            return units
        position -= 1


class _TargetFunction:
    """All chosen targets as one vector function of the descriptors."""

    def __init__(self, surrogate, targets, features):
        coefficients = {}
        rows = []
        for target in targets.itertuples(index=False):
            if target.kind == "column":
                parts = [(1.0, target.site)]
            else:
                parts = [(1.0, target.site_a), (-1.0, target.site_b)]
            row = {}
            for sign, site in parts:
                for unit in _chain(surrogate, target.quantity, target.method, target.host, site):
                    coefficients.setdefault(unit, len(coefficients))
                    row[unit] = row.get(unit, 0.0) + sign
            rows.append(row)
        self.units = list(coefficients)
        self.matrix = np.zeros((len(rows), len(self.units)))
        for position, row in enumerate(rows):
            for unit, value in row.items():
                self.matrix[position, coefficients[unit]] = value
        by_stage = {}
        for position, (quantity, method, host, site) in enumerate(self.units):
            by_stage.setdefault((quantity, method), []).append((position, (host, site)))
        self.stages = []
        for key, members in by_stage.items():
            evaluator = _StageColumns(
                surrogate.stages_[key], [column for _, column in members], features, surrogate.compositions_
            )
            self.stages.append((np.array([position for position, _ in members]), evaluator))

    def check(self, descriptors):
        for _positions, evaluator in self.stages:
            evaluator.check_fast(descriptors)

    def units_unseen(self, descriptors):
        out = np.empty((descriptors.shape[0], len(self.units)))
        for positions, evaluator in self.stages:
            out[:, positions] = evaluator.predict_unseen(descriptors)
        return out

    def __call__(self, descriptors):
        descriptors = np.asarray(descriptors, dtype=float)
        # masked rows repeat where background elements share descriptor values
        unique, inverse = np.unique(descriptors, axis=0, return_inverse=True)
        return (self.units_unseen(unique) @ self.matrix.T)[inverse.ravel()]

    def offsets(self, descriptors, symbols):
        """Prediction with each element's own label minus that with an unseen label."""
        labels = np.array([atomic_number(symbol) for symbol in symbols], dtype=float)
        out = np.empty((descriptors.shape[0], len(self.units)))
        for positions, evaluator in self.stages:
            own = evaluator.predict_rows(descriptors, labels)
            unseen = evaluator.predict_rows(descriptors, _UNSEEN_LABEL)
            out[:, positions] = own - unseen
        return out @ self.matrix.T
