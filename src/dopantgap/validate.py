"""How far to trust the estimates: grouped cross-validation of every learner and baseline.

A researcher acts on an estimate only when the tool tells the truth about its error, and
most of all for elements it has never seen. :func:`validate` fits a surrogate (which
cross-validates each candidate learner while choosing one, see ``surrogate``) and
scores, on exactly the same folds, the reference predictors of ``baselines``. Every
figure is out of fold:

* the scenarios are those of ``calibration.SCENARIOS``: ``new-element`` (all cells of an
  element hidden together; the element is absent from the fold's training table, its
  descriptors and scalers included), ``new-cell`` (single cells of elements otherwise
  computed), ``upgrade`` (expensive-level cells whose cheap level is computed: their
  own loop, leaving out the elements computed at both levels a few at a time) and,
  with three or more hosts, ``new-host`` (every cell of a host hidden, one host or a
  few at a time; baselines: the impurity's mean over the other hosts, and its value in
  the nearest host by host descriptors) and ``sparse-host`` (the same hosts with five
  of their cells given back, and cells of host/site columns with fewer than ten
  computed cells);
* ``coverage`` is the share of hidden values inside the 90 % interval, judged
  cross-conformally: each fold's cells against the widths the *other* folds' residuals
  give (``calibration.cross_conformal_covered``). A learner's interval is its
  calibrated one (standardised residuals); a baseline, having no spread of its own,
  gets ``mean +/- q`` with q the conformal quantile of the other folds' absolute errors.

Baselines are trained, for each fold, on the table minus that fold's hidden cells: the
same training cells the learners saw.

Outputs of :func:`write_validation`: ``metrics.csv`` (``METRIC_COLUMNS``; one row per
scenario, model and quantity plus a pooled row with quantity ``all``),
``predictions.csv`` (every out-of-fold prediction of every model), and per scenario
``parity_<scenario>.png`` (predicted against computed, one panel per quantity, host and
level grouping, the worst cells labelled) and ``calibration_<scenario>.png`` of the
learner ``fit`` keeps; and where that learner fails (``breakdown``): ``elements.csv`` (per element and
scenario, worst first), ``groups.csv`` (per periodic-table block and per tercile of
distance from the other elements) and ``folds.csv`` (per new-element fold, the error
the model claimed against the error it made). Their columns are described in the
``breakdown`` module.
"""

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from joblib import delayed
from sklearn.base import clone

from dopantgap import plots
from dopantgap.baselines import BASELINES, baseline_applies, predict_baseline
from dopantgap.breakdown import breakdown_text, element_breakdown, fold_honesty, group_breakdown
from dopantgap.calibration import SCENARIOS, cross_conformal_covered
from dopantgap.reproducible import learner_seed, seed_integer
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS, write_table
from dopantgap.workers import worker_pool

__all__ = [
    "METRIC_COLUMNS",
    "SELECTION_MODEL",
    "ValidationResult",
    "baseline_residuals",
    "baselines_ahead",
    "breakdown_text",
    "breakdowns",
    "element_breakdown",
    "fold_honesty",
    "group_breakdown",
    "validate",
    "validation_metrics",
    "validation_text",
    "write_validation",
]

#: Columns of ``metrics.csv``, in order.
METRIC_COLUMNS = ("scenario", "model", "quantity", "mae", "rmse", "coverage", "n", "chosen")
#: Model name of the learner choice judged out of fold (``Surrogate.selection_residuals_``).
SELECTION_MODEL = "auto, chosen per fold"
#: Level of the intervals whose coverage is reported.
LEVEL = 0.9

_PREDICTION_COLUMNS = list(REQUIRED_COLUMNS) + ["scenario", "fold", "model", "mean", "error"]
# domain_distance is a property of the cell and its fold, so the baselines' rows carry it
# too; the learners' other residual columns (raw_std, z, difficulty features) are kept
# after the standard ones, so that predictions.csv can be judged as the learners were
_CARRIED_COLUMNS = ("domain_distance",)


@dataclass
class ValidationResult:
    """What :func:`validate` found.

    Attributes
    ----------
    metrics : DataFrame
        ``METRIC_COLUMNS``.
    predictions : DataFrame
        Every out-of-fold prediction: the cell, its computed ``value``, ``scenario``,
        ``fold``, ``model``, ``mean`` and ``error`` (value - mean), plus ``covered``.
    surrogate : Surrogate
        The fitted model (the one ``fit`` would write).
    elements, groups, folds : DataFrame or None
        Where the kept learner fails (``breakdown.element_breakdown``,
        ``group_breakdown``, ``fold_honesty``); None until :func:`validate` fills them.
    """

    metrics: pd.DataFrame
    predictions: pd.DataFrame
    surrogate: Surrogate = field(repr=False, default=None)
    elements: pd.DataFrame = field(repr=False, default=None)
    groups: pd.DataFrame = field(repr=False, default=None)
    folds: pd.DataFrame = field(repr=False, default=None)


def baseline_residuals(surrogate, baselines=BASELINES, random_state=0):
    """Out-of-fold predictions of the baselines on the surrogate's own folds.

    Parameters
    ----------
    surrogate : Surrogate
        Fitted; its ``cv_residuals_`` give the folds (cells hidden together).
    baselines : sequence of str, default=BASELINES
    random_state : None, int, RandomState or Generator, default=0
        Seed of the tree baseline (``reproducible.seed_integer``).

    Returns
    -------
    DataFrame
        Columns of ``predictions`` (``_PREDICTION_COLUMNS``), one row per baseline and
        hidden cell of a scenario where the baseline applies
        (``baselines.baseline_applies``: the level-shift rule in upgrade only).
    """
    seed = learner_seed(seed_integer(random_state))
    core = surrogate.table_[list(REQUIRED_COLUMNS)].reset_index(drop=True)
    core_keys = pd.MultiIndex.from_frame(core[list(KEY_COLUMNS)])
    residuals = surrogate.cv_residuals_
    tasks = []
    for fold, hidden in residuals.groupby("fold", sort=True):
        hidden = hidden.reset_index(drop=True)
        is_hidden = core_keys.isin(pd.MultiIndex.from_frame(hidden[list(KEY_COLUMNS)]))
        for name in baselines:
            # a rule is scored only where it differs from the others (level-shift: upgrade)
            applies = np.array([baseline_applies(name, scenario) for scenario in hidden["scenario"]], dtype=bool)
            if applies.any():
                tasks.append((fold, name, core[~is_hidden], hidden[applies].reset_index(drop=True)))
    # the tree baseline refits once per fold (some 30 folds): two workers halve the wait
    means = worker_pool(n_jobs=2)(
        delayed(predict_baseline)(name, training, hidden[list(KEY_COLUMNS)], surrogate.levels_,
                                  random_state=seed, site_kinds=getattr(surrogate, "site_kinds_", None),
                                  host_values=getattr(surrogate, "host_values_", None))
        for _, name, training, hidden in tasks
    )
    carried = [column for column in _CARRIED_COLUMNS if column in residuals]
    parts = []
    for (fold, name, _, hidden), mean in zip(tasks, means):
        part = hidden[list(REQUIRED_COLUMNS) + ["scenario"] + carried].copy()
        part["fold"] = fold
        part["model"] = name
        part["mean"] = np.asarray(mean, dtype=float)
        parts.append(part)
    if not parts:
        return pd.DataFrame(columns=_PREDICTION_COLUMNS)
    out = pd.concat(parts, ignore_index=True)
    out["error"] = out["value"] - out["mean"]
    return out[_PREDICTION_COLUMNS + carried]


def _learner_predictions(surrogate):
    by_learner = getattr(surrogate, "cv_residuals_by_learner_", None) or {
        surrogate.learner_: surrogate.cv_residuals_
    }
    by_learner = dict(by_learner)
    selection = getattr(surrogate, "selection_residuals_", None)
    if selection is not None and len(selection):
        # the learner choice judged out of fold: each fold by the learner the others chose
        by_learner[SELECTION_MODEL] = selection.drop(columns=["learner"])
    parts = []
    for name, residuals in by_learner.items():
        part = residuals.copy()
        part["model"] = name
        part["covered"] = cross_conformal_covered(part, "z", LEVEL)
        parts.append(part)
    return pd.concat(parts, ignore_index=True)


def validation_metrics(surrogate, baselines=BASELINES, random_state=0):
    """Out-of-fold error and coverage of every learner and baseline, per scenario.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    baselines : sequence of str, default=BASELINES
        Baselines to score (``baselines.BASELINES``); empty: learners only.
    random_state : None, int, RandomState or Generator, default=0
        Seed of the tree baseline (``reproducible.seed_integer``).

    Returns
    -------
    metrics : DataFrame
        ``METRIC_COLUMNS``: scenario, model, quantity (``all`` for the pooled row),
        mae and rmse (eV), coverage of the 90 % interval, n cells, chosen (the learner
        ``fit`` keeps).
    predictions : DataFrame
        Every out-of-fold prediction (``ValidationResult.predictions``).
    """
    random_state = seed_integer(random_state)
    learners = _learner_predictions(surrogate)
    frames = [learners]
    if baselines:
        reference = baseline_residuals(surrogate, baselines, random_state)
        covered = np.zeros(len(reference), dtype=bool)
        for _name, rows in reference.groupby("model", sort=False):
            covered[rows.index.to_numpy()] = cross_conformal_covered(rows, "error", LEVEL)
        frames.append(reference.assign(covered=covered))
    standard = _PREDICTION_COLUMNS + ["covered"]
    extra = [column for column in learners.columns if column not in standard]
    predictions = pd.concat(frames, ignore_index=True)[standard + extra]
    rows = []
    present = set(predictions["model"])
    # learners as fitted, then the baselines in BASELINES order (one seen in some
    # scenarios only would otherwise come last)
    models = [m for m in dict.fromkeys(predictions["model"]) if m not in BASELINES] + [
        name for name in BASELINES if name in present
    ]
    for scenario in SCENARIOS:
        for model in models:
            part = predictions[(predictions["scenario"] == scenario) & (predictions["model"] == model)]
            for quantity, sub in [("all", part)] + list(part.groupby("quantity")):
                if len(sub) == 0:
                    continue
                error = sub["error"].to_numpy(dtype=float)
                rows.append({
                    "scenario": scenario, "model": model, "quantity": quantity,
                    "mae": float(np.mean(np.abs(error))), "rmse": float(np.sqrt(np.mean(error**2))),
                    "coverage": float(np.mean(sub["covered"])), "n": int(len(sub)),
                    "chosen": bool(model == surrogate.learner_),
                })
    return pd.DataFrame(rows, columns=list(METRIC_COLUMNS)), predictions


def validate(table, estimator=None, baselines=BASELINES, random_state=0, progress=None):
    """Fit a surrogate and score it, and the baselines, in every scenario.

    Parameters
    ----------
    table : DataFrame
        Long table (``table.read_table``).
    estimator : Surrogate or None, default=None
        Unfitted surrogate to clone and fit (with ``first_look=False``: every learner
        is scored in full); None: ``Surrogate(random_state=random_state)``.
    baselines : sequence of str, default=BASELINES
    random_state : None, int, RandomState or Generator, default=0
        Seed of the fit and the tree baseline (``reproducible.seed_integer``,
        checked before any work).
    progress : object with ``update(n)`` or None
        Passed to ``Surrogate.fit``.

    Returns
    -------
    ValidationResult
    """
    random_state = seed_integer(random_state)
    estimator = Surrogate(random_state=random_state) if estimator is None else clone(estimator)
    if "first_look" in estimator.get_params():
        # scoring every learner is what validate is for: none is left out after a first look
        estimator.set_params(first_look=False)
    surrogate = estimator.fit(table, progress=progress)
    metrics, predictions = validation_metrics(surrogate, baselines, random_state)
    result = ValidationResult(metrics=metrics, predictions=predictions, surrogate=surrogate)
    result.elements, result.groups, result.folds = breakdowns(result)
    return result


def breakdowns(result):
    """Where the kept learner fails: the result's own breakdowns, or computed anew.

    Parameters
    ----------
    result : ValidationResult

    Returns
    -------
    elements, groups, folds : DataFrame
        ``breakdown.element_breakdown``, ``group_breakdown`` and ``fold_honesty`` at
        ``LEVEL``; a breakdown the result already holds is returned as it is.
    """
    return (
        element_breakdown(result, LEVEL) if result.elements is None else result.elements,
        group_breakdown(result, LEVEL) if result.groups is None else result.groups,
        fold_honesty(result, level=LEVEL) if result.folds is None else result.folds,
    )


def write_validation(result, out_dir):
    """Write ``metrics.csv``, ``predictions.csv``, the figures per scenario and the
    breakdowns ``elements.csv``, ``groups.csv`` and ``folds.csv``.

    Parameters
    ----------
    result : ValidationResult
    out_dir : str or Path
        Created if needed.

    Returns
    -------
    list of Path
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    written = []
    element_rows, group_rows, fold_rows = breakdowns(result)
    tables = (
        ("metrics.csv", result.metrics), ("predictions.csv", result.predictions),
        ("elements.csv", element_rows), ("groups.csv", group_rows), ("folds.csv", fold_rows),
    )
    for name, frame in tables:
        write_table(frame, out_dir / name)
        written.append(out_dir / name)
    surrogate = result.surrogate
    kept = result.predictions[result.predictions["model"] == surrogate.learner_]
    for scenario in SCENARIOS:
        rows = kept[kept["scenario"] == scenario]
        if len(rows) == 0:
            continue
        figures = {
            f"parity_{scenario}.png": plots.parity_figure(
                rows, scenario=scenario, calibration=surrogate.calibration_, levels=surrogate.levels_
            ),
            f"calibration_{scenario}.png": plots.calibration_figure(
                rows, surrogate.calibration_, out_of_fold=True
            ),
        }
        for name, figure in figures.items():
            plots.save_png(figure, out_dir / name)
            written.append(out_dir / name)
    return written


def baselines_ahead(metrics):
    """Scenarios where a baseline's pooled error is below the kept learner's.

    Parameters
    ----------
    metrics : DataFrame
        ``METRIC_COLUMNS`` (``validation_metrics``).

    Returns
    -------
    list of tuple
        ``(scenario, baseline, baseline_mae, learner, learner_mae)``, best baseline first
        within each scenario, scenarios in ``SCENARIOS`` order.
    """
    pooled = metrics[metrics["quantity"] == "all"]
    ahead = []
    for scenario in SCENARIOS:
        rows = pooled[pooled["scenario"] == scenario]
        kept = rows[rows["chosen"]]
        if len(kept) == 0:
            continue
        learner, learner_mae = kept["model"].iloc[0], float(kept["mae"].iloc[0])
        reference = rows[rows["model"].isin(BASELINES) & (rows["mae"] < learner_mae)].sort_values("mae")
        ahead.extend(
            (scenario, row.model, float(row.mae), learner, learner_mae) for row in reference.itertuples(index=False)
        )
    return ahead


def validation_text(metrics, level=LEVEL):
    """Plain-text table of the pooled rows, learners then baselines, per scenario,
    followed by a warning for every scenario where a baseline beats the kept learner."""
    pooled = metrics[metrics["quantity"] == "all"]
    lines = [
        f"Out-of-fold error (eV) and share of hidden values inside the {level:.0%} interval:",
        f"  {'scenario':<12} {'model':<26} {'cells':>6} {'mean |error|':>13} {'rms error':>10} {'coverage':>9}",
    ]
    for row in pooled.itertuples(index=False):
        mark = "  <- kept" if row.chosen else ""
        lines.append(
            f"  {row.scenario:<12} {row.model:<26} {row.n:>6} {row.mae:>13.3f} {row.rmse:>10.3f} "
            f"{row.coverage:>8.0%}{mark}"
        )
    warned = set()
    for scenario, baseline, baseline_mae, learner, learner_mae in baselines_ahead(metrics):
        if scenario in warned:
            continue
        warned.add(scenario)
        lines.append(
            f"warning: in {scenario}, the {baseline} ({baseline_mae:.3f} eV) beats the kept learner "
            f"{learner} ({learner_mae:.3f} eV): the model does no better there than a rule one could "
            f"follow by hand; "
            f"compute more elements before trusting its {scenario} estimates."
        )
    return "\n".join(lines) + "\n"
