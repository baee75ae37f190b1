"""Where the estimates fail: out-of-fold error and coverage per element, per group of
elements and per fold.

A pooled coverage of 90 % can hide an element whose intervals miss every time. The
functions here split the out-of-fold predictions of the learner ``fit`` keeps
(``validate.ValidationResult.predictions``, or ``Surrogate.cv_residuals_``) so that
such elements, and such families of elements, show. Nothing is refitted: every figure
comes from the same folds and the same cross-conformal judgement as ``metrics.csv``
(``calibration.cross_conformal_covered``: each fold's cells against the widths the
*other* folds' residuals give).

Tables, as ``validate`` writes them:

``elements.csv`` (:func:`element_breakdown`, ``ELEMENT_COLUMNS``), one row per element
and scenario, worst first (lowest ``coverage``, then most cells outside, then the
largest ``worst_ratio``):

* ``n``: hidden cells; ``n_outside``: of them, outside their interval;
* ``coverage``: share inside the interval (the ``covered`` flags of ``predictions.csv``);
* ``mae``: mean |error| in eV (error = computed value - out-of-fold estimate);
* ``worst_ratio``: the largest |error| / interval half-width over the element's cells,
  the half-width (per cell, difficulty included) being the cross-conformal one that
  judged the cell; above 1 the cell
  lay outside, 2 means it was missed by twice the interval's half-width;
* ``worst_error`` (eV) and ``worst_cell`` (``host site method quantity``): that cell.

``groups.csv`` (:func:`group_breakdown`, ``GROUP_COLUMNS``), one row per kind of group,
group and scenario: ``kind`` is ``block`` (group ``s``, ``p``, ``d`` or ``f``: the
element's periodic-table block, ``elements.descriptor_table``'s ``block_index``) or
``distance tercile`` (group ``near``, ``middle`` or ``far``: the elements sorted by their
distance from the other elements and cut into three parts of near-equal size, ties
broken by symbol); ``n_elements``, ``n`` cells, ``mae`` (eV), ``coverage``, and
``distance_min`` / ``distance_max``, the range of the members' distances.

An element's distance is, where the residuals carry a per-cell ``domain_distance``, the
largest over its cells (a cell hidden alone has its own element in the fold's training
table and so distance 0; the element's distance from the others shows where it was
hidden whole); otherwise the leave-one-out distance of ``domain.ElementDomain``
(``loo_distances_``: its distance to the nearest *other* element of the table, in the
model's standardised descriptor space). ``ElementDomain.distance`` would give 0 for
every element of the table, since each is one of its training elements.

``folds.csv`` (:func:`fold_honesty`, ``FOLD_COLUMNS``), one row per fold of the
new-element scenario: the elements it hid, ``n`` cells, ``real_rmse`` (eV, of the
fold's errors), ``claimed_rmse`` (eV, the root mean square of the calibrated std the
model gave those cells, the calibration built from the other folds' residuals only:
``sqrt(mean((raw_std * std_scale * difficulty)^2))``, difficulty being the per-cell
factor of ``calibration.fit_calibration``, 1 without difficulty features), ``ratio`` =
real / claimed (1: the model
claimed the error it made; above 1: it claimed too little) and the fold's ``coverage``.
"""

import numpy as np
import pandas as pd

from dopantgap import elements
from dopantgap.calibration import SCENARIOS, cross_conformal_covered, cross_conformal_widths
from dopantgap.domain import ElementDomain
from dopantgap.elements.descriptors import BLOCK_INDEX

__all__ = [
    "ELEMENT_COLUMNS",
    "FOLD_COLUMNS",
    "GROUP_COLUMNS",
    "breakdown_text",
    "element_breakdown",
    "fold_honesty",
    "group_breakdown",
]

#: Columns of ``elements.csv``, in order.
ELEMENT_COLUMNS = (
    "element", "scenario", "n", "n_outside", "coverage", "mae", "worst_ratio", "worst_error", "worst_cell",
)
#: Columns of ``groups.csv``, in order.
GROUP_COLUMNS = (
    "kind", "group", "scenario", "n_elements", "n", "mae", "coverage", "distance_min", "distance_max",
)
#: Columns of ``folds.csv``, in order.
FOLD_COLUMNS = ("fold", "elements", "n_elements", "n", "real_rmse", "claimed_rmse", "ratio", "coverage")

_REQUIRED = ("element", "host", "site", "method", "quantity", "scenario", "fold", "error", "raw_std")
# elements.py encodes blocks as s=0, p=1, d=2, f=3; read back through its own table so
# that the two never disagree
_BLOCK_NAMES = {index: name for name, index in BLOCK_INDEX.items()}
_TERCILES = ("near", "middle", "far")
_STD_FLOOR = 1e-9  # as in Surrogate's z = error / max(raw_std, 1e-9)


def _kept_residuals(source, level):
    """The kept learner's out-of-fold rows, with ``z`` and ``covered``.

    ``source`` is a ``ValidationResult`` (its predictions of the learner ``fit`` keeps)
    or a DataFrame of one model's out-of-fold residuals (``Surrogate.cv_residuals_``).
    """
    predictions = getattr(source, "predictions", None)
    if predictions is not None:
        rows = predictions[predictions["model"] == source.surrogate.learner_]
    elif isinstance(source, pd.DataFrame):
        rows = source
        if "model" in rows and rows["model"].nunique() > 1:
            raise ValueError(
                "The residuals hold several models; pass one model's rows, e.g. "
                "predictions[predictions['model'] == 'gp'], or the ValidationResult itself."
            )
    else:
        raise TypeError(
            f"Expected a ValidationResult or a DataFrame of out-of-fold residuals, got {type(source).__name__}."
        )
    missing = [column for column in _REQUIRED if column not in rows]
    if missing:
        raise ValueError(
            f"The residuals lack the column(s) {', '.join(missing)}; pass Surrogate.cv_residuals_ "
            f"or ValidationResult.predictions, which carry them."
        )
    rows = rows.reset_index(drop=True)
    if "z" not in rows:
        rows = rows.assign(z=rows["error"] / np.maximum(rows["raw_std"].to_numpy(dtype=float), _STD_FLOOR))
    if "covered" not in rows:
        rows = rows.assign(covered=cross_conformal_covered(rows, "z", level))
    return rows


def _other_fold_widths(rows, level):
    """Per row, the factors on ``raw_std`` giving the interval's half-width and the
    calibrated std, from a calibration built on the *other* folds' residuals, exactly as
    ``calibration.cross_conformal_covered`` judges the row."""
    return cross_conformal_widths(rows, "z", level)


def _error_ratio(rows, level):
    """|error| / half-width of each row's cross-conformal interval (|z| / multiplier)."""
    multiplier, _scale = _other_fold_widths(rows, level)
    size = np.abs(rows["z"].to_numpy(dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = size / multiplier
    # a zero-width interval (every other residual exactly 0) misses any nonzero error
    return np.where(np.isnan(ratio), 0.0, ratio)


def _scenario_order(scenarios):
    """Scenarios present, in ``SCENARIOS`` order, any others after them."""
    present = list(dict.fromkeys(scenarios))
    return [s for s in SCENARIOS if s in present] + sorted(s for s in present if s not in SCENARIOS)


def element_breakdown(source, level=0.9):
    """Out-of-fold error and interval coverage per element and scenario, worst first.

    Parameters
    ----------
    source : ValidationResult or DataFrame
        A result of ``validate.validate`` (its learner ``fit`` keeps is broken down), or
        one model's out-of-fold residuals with columns element, host, site, method,
        quantity, scenario, fold, error, raw_std (``z`` and ``covered`` are derived
        when absent).
    level : float, default=0.9
        Level of the intervals (``validate.LEVEL``).

    Returns
    -------
    DataFrame
        ``ELEMENT_COLUMNS`` (see the module docstring), sorted by coverage (lowest
        first), then cells outside (most first), then ``worst_ratio`` (largest first).

    Examples
    --------
    >>> rows = pd.DataFrame({"element": ["Fe", "Fe", "Cu", "Cu"], "host": "ZnS", "site": "sub_Zn",
    ...                      "method": "gga", "quantity": "E_sol", "scenario": "new-element",
    ...                      "fold": [0, 0, 1, 1], "error": [0.9, -0.8, 0.1, 0.0],
    ...                      "raw_std": 0.1, "covered": [False, False, True, True]})
    >>> list(element_breakdown(rows)["element"])
    ['Fe', 'Cu']
    """
    rows = _kept_residuals(source, level)
    rows = rows.assign(_ratio=_error_ratio(rows, level), _size=np.abs(rows["error"].to_numpy(dtype=float)))
    records = []
    for (element, scenario), part in rows.groupby(["element", "scenario"], sort=False):
        worst = part.loc[part["_ratio"].idxmax()]
        records.append({
            "element": element, "scenario": scenario, "n": int(len(part)),
            "n_outside": int((~part["covered"].astype(bool)).sum()),
            "coverage": float(part["covered"].astype(bool).mean()),
            "mae": float(part["_size"].mean()),
            "worst_ratio": float(worst["_ratio"]), "worst_error": float(worst["_size"]),
            "worst_cell": f"{worst['host']} {worst['site']} {worst['method']} {worst['quantity']}",
        })
    frame = pd.DataFrame(records, columns=list(ELEMENT_COLUMNS))
    order = {scenario: position for position, scenario in enumerate(_scenario_order(frame["scenario"]))}
    frame = frame.assign(_order=frame["scenario"].map(order)).sort_values(
        ["coverage", "n_outside", "worst_ratio", "element", "_order"],
        ascending=[True, False, False, True, True], kind="mergesort",
    )
    return frame.drop(columns="_order").reset_index(drop=True)


def _leave_one_out_distances(domain, symbols):
    """Distance of each element from the *other* elements the domain was fitted on."""
    position = {symbol: index for index, symbol in enumerate(domain.symbols_)}
    return pd.Series(
        [
            float(domain.loo_distances_[position[symbol]]) if symbol in position
            else float(domain.distance([symbol])[0])
            for symbol in symbols
        ],
        index=symbols, dtype=float,
    )


def _element_distances(rows, source, domain):
    """One distance per element: the residuals' own ``domain_distance`` where present
    (the largest over the element's cells), else the leave-one-out domain distance."""
    symbols = sorted(set(rows["element"]))
    distance = pd.Series(np.nan, index=symbols, dtype=float)
    if "domain_distance" in rows:
        distance = rows.groupby("element")["domain_distance"].max().reindex(symbols).astype(float)
    missing = [symbol for symbol in symbols if np.isnan(distance[symbol])]
    if missing:
        if domain is None:
            surrogate = getattr(source, "surrogate", None)
            domain = surrogate.element_domain() if surrogate is not None else ElementDomain().fit(symbols)
        distance.loc[missing] = _leave_one_out_distances(domain, missing).to_numpy()
    return distance


def _group_members(symbols, distance):
    """(kind, group, members) for each block and each distance tercile."""
    blocks = elements.descriptor_table(symbols)["block_index"].to_numpy(dtype=float)
    by_block = {}
    for symbol, block in zip(symbols, blocks):
        by_block.setdefault(int(block), []).append(symbol)
    groups = [("block", _BLOCK_NAMES[block], by_block[block]) for block in sorted(by_block)]
    # fewer than three elements cannot be cut into three parts
    if len(symbols) >= len(_TERCILES):
        ranked = sorted(symbols, key=lambda symbol: (distance[symbol], symbol))
        for name, part in zip(_TERCILES, np.array_split(np.array(ranked, dtype=object), len(_TERCILES))):
            groups.append(("distance tercile", name, list(part)))
    return groups


def group_breakdown(source, level=0.9, domain=None):
    """Out-of-fold error and coverage per periodic-table block and per tercile of
    distance from the other elements, per scenario.

    Parameters
    ----------
    source : ValidationResult or DataFrame
        As in :func:`element_breakdown`; an optional ``domain_distance`` column is
        preferred to a computed distance (module docstring).
    level : float, default=0.9
        Level of the intervals.
    domain : ElementDomain or None, default=None
        Gives the leave-one-out distance where the residuals carry none; None: the
        surrogate's ``element_domain()`` for a ValidationResult, else an
        ``ElementDomain`` fitted on the residuals' elements.

    Returns
    -------
    DataFrame
        ``GROUP_COLUMNS``; blocks in s, p, d, f order, then terciles near, middle, far;
        scenarios in ``SCENARIOS`` order. No tercile rows with fewer than three elements.
    """
    rows = _kept_residuals(source, level)
    distance = _element_distances(rows, source, domain)
    records = []
    for kind, group, members in _group_members(list(distance.index), distance):
        in_group = rows["element"].isin(members)
        for scenario in _scenario_order(rows["scenario"]):
            part = rows[in_group & (rows["scenario"] == scenario)]
            if len(part) == 0:
                continue
            present = distance[sorted(set(part["element"]))]
            records.append({
                "kind": kind, "group": group, "scenario": scenario,
                "n_elements": int(len(present)), "n": int(len(part)),
                "mae": float(np.mean(np.abs(part["error"].to_numpy(dtype=float)))),
                "coverage": float(part["covered"].astype(bool).mean()),
                "distance_min": float(present.min()), "distance_max": float(present.max()),
            })
    return pd.DataFrame(records, columns=list(GROUP_COLUMNS))


def fold_honesty(source, scenario="new-element", level=0.9):
    """The error the model claimed for each fold's cells against the error it made.

    For each fold, a calibration is built from the residuals of all other folds (as in
    ``calibration.cross_conformal_covered``); the claimed error of a cell is the
    calibrated std it gives, ``raw_std * std_scale(scenario, quantity)`` times the
    cell's difficulty factor (1 where the residuals carry no difficulty features).

    Parameters
    ----------
    source : ValidationResult or DataFrame
        As in :func:`element_breakdown`.
    scenario : str, default="new-element"
        Only this scenario's cells of each fold are compared.
    level : float, default=0.9
        Level of the intervals whose coverage is given.

    Returns
    -------
    DataFrame
        ``FOLD_COLUMNS``, one row per fold with cells of the scenario, in fold order:
        ``real_rmse = sqrt(mean(error^2))``, ``claimed_rmse = sqrt(mean(calibrated
        std^2))``, ``ratio = real_rmse / claimed_rmse``.
    """
    rows = _kept_residuals(source, level)
    # the std scale is fixed by the calibration's own reference level, whatever ``level``
    _multiplier, scale = _other_fold_widths(rows, level)
    claimed_std = rows["raw_std"].to_numpy(dtype=float) * scale
    chosen = rows["scenario"].to_numpy() == scenario
    records = []
    for fold in np.unique(rows.loc[chosen, "fold"].to_numpy()):
        inside = chosen & (rows["fold"].to_numpy() == fold)
        part = rows[inside]
        real = float(np.sqrt(np.mean(part["error"].to_numpy(dtype=float) ** 2)))
        claimed = float(np.sqrt(np.mean(claimed_std[inside] ** 2)))
        names = sorted(set(part["element"]))
        records.append({
            "fold": fold.item() if hasattr(fold, "item") else fold, "elements": " ".join(names),
            "n_elements": len(names), "n": int(inside.sum()),
            "real_rmse": real, "claimed_rmse": claimed,
            "ratio": real / claimed if claimed > 0 else np.inf,
            "coverage": float(part["covered"].astype(bool).mean()),
        })
    return pd.DataFrame(records, columns=list(FOLD_COLUMNS))


def _percent(share):
    return f"{100 * share:.0f} %"


def breakdown_text(element_rows, group_rows, fold_rows, level=0.9, count=5):
    """Plain-text summary: the elements whose intervals failed most, coverage by
    distance from the other elements, and claimed against real error per fold.

    Parameters
    ----------
    element_rows, group_rows, fold_rows : DataFrame
        Outputs of :func:`element_breakdown`, :func:`group_breakdown` and
        :func:`fold_honesty`.
    level : float, default=0.9
    count : int, default=5
        At most this many elements are named.

    Returns
    -------
    str
        Lines ending in a newline.
    """
    expected = round(1 / (1 - level)) if level < 1 else 0
    # one line per element: its worst scenario (the rows come worst first)
    missed = element_rows[element_rows["n_outside"] > 0].drop_duplicates("element").head(count)
    if len(missed) == 0:
        lines = [f"Every hidden cell lay inside its {_percent(level)} interval: no element stands out."]
    else:
        lines = [
            f"Elements whose {_percent(level)} intervals failed most (about 1 hidden cell in {expected} "
            f"is expected outside, so a single miss is no alarm):"
        ]
        width = max(len(element) for element in missed["element"])
        for row in missed.itertuples(index=False):
            lines.append(
                f"  {row.element:<{width}}  {row.scenario}: {row.n_outside} of {row.n} cells outside "
                f"({_percent(row.coverage)} inside), mean |error| {row.mae:.2f} eV; farthest outside "
                f"its interval: {row.worst_cell}, off by {row.worst_error:.2f} eV, "
                f"{row.worst_ratio:.1f} times the interval's half-width"
            )
    terciles = group_rows[(group_rows["kind"] == "distance tercile") & (group_rows["scenario"] == "new-element")]
    if len(terciles):
        parts = [
            f"{row.group} {_percent(row.coverage)} ({row.n_elements} elements, mean |error| {row.mae:.2f} eV)"
            for row in terciles.itertuples(index=False)
        ]
        lines.append("Elements never seen (new-element), coverage by distance from the other elements: "
                     + ", ".join(parts) + ".")
    ratios = fold_rows["ratio"].to_numpy(dtype=float) if len(fold_rows) else np.empty(0)
    if len(ratios):
        lines.append(
            f"Claimed against real error in the {len(ratios)} new-element folds: real / claimed RMS error "
            f"median {np.median(ratios):.2f}, range {ratios.min():.2f}-{ratios.max():.2f} (1: the model "
            f"claimed the error it made; below 1: less error than claimed; above 1: more)."
        )
        worst = fold_rows.loc[fold_rows["ratio"].idxmax()]
        if worst["ratio"] > 1:
            lines.append(
                f"  Worst: the fold hiding {worst['elements']}, real error {worst['ratio']:.1f} times the "
                f"claimed one ({worst['real_rmse']:.2f} against {worst['claimed_rmse']:.2f} eV): give "
                f"elements like these more doubt than their intervals show."
            )
    return "\n".join(lines) + "\n"
