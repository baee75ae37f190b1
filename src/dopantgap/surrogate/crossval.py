"""Cross-validation of a surrogate: its folds, out-of-fold residuals, metrics and calibration.

The main loop hides a group of elements entirely in each fold (new-element) and single
cells of the remaining elements (new-cell); the upgrade loop relearns each correction
without some of the elements computed at both levels. The residuals choose the learner
(with nested selection residuals), calibrate the spread and give the metrics. The
functions take the ``Surrogate``; its methods of the same names delegate here.
"""

import contextlib
import os

import numpy as np
import pandas as pd
from joblib import delayed
from threadpoolctl import threadpool_limits

from dopantgap.calibration import SCENARIOS, cross_conformal_covered, fit_calibration
from dopantgap.domain import LevelDomain
from dopantgap.errors import DopantgapError
from dopantgap.hosts import host_property_columns
from dopantgap.progress import step
from dopantgap.surrogate.chain import difficulty_features
from dopantgap.surrogate.stages import _CELL, NEW_HOST_FORMS, new_encoder
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS
from dopantgap.workers import worker_pool

# Folds of the upgrade loop: at most this many, over the elements computed at both
# levels (leave-one-element-out when there are fewer; common practice, no source).
_UPGRADE_FOLDS = 12
# Folds of the host loop: leave one host out with up to this many hosts, else this many
# groups of hosts held out together (common practice, no source: each fold refits every
# stage from scratch, so the count bounds the fit time).
_HOST_FOLDS = 8
#: Fewest hosts for the host loop, and so for the ``new-host`` scenario (with two, a
#: host held out leaves one to learn host effects from).
MIN_HOSTS_FOR_NEW_HOST = 3
# Fold ids of the host loop start here, after any main or upgrade fold's; its
# sparse-host fits follow at this offset.
_HOST_FOLD_START = 100_000
_SPARSE_FOLD_OFFSET = 50_000
#: Tables with at least this many computed cells let ``learner="auto"`` leave out a
#: learner after a first look on a sample (``first_look``); smaller tables fit every
#: candidate in full: there the first look would cost much of what it saves (an
#: expectation, not measured below 2,000 cells; at 3,050 cells it saved 19 % of the CPU,
#: benchmarks/README.md, "Issue 17, fourth steps"). Common practice, no source.
FIRST_LOOK_MIN_CELLS = 2000
#: ... and at least this many elements, so that the sample's folds hold out several
#: (common practice, no source).
FIRST_LOOK_MIN_ELEMENTS = 15
#: Most cells of the first look's sample.
FIRST_LOOK_MAX_CELLS = 1500
#: A candidate whose first-look error exceeds this many times the best one's is left
#: out (common practice, no source; what it changed on benchmarks/bench_scale.py's
#: tables: benchmarks/README.md, "Issue 17").
FIRST_LOOK_MARGIN = 1.5
#: Cells of a held-out host given back in the host loop's second fit (the issue's "a host
#: with five calculations"; common practice, no source).
SPARSE_HOST_CELLS = 5


def fit_candidates(surrogate, core, candidates, progress=None):
    """Per learner: its fitted stages, their cross-validated residuals, and the
    corrections that keep the column shifts alone (the upgrade loop decides).

    Every fit that does not wait on another goes to the workers at once, whatever its
    learner, in three waves: (1) the upgrade folds; (2) the full fits and the host folds
    (they need the upgrade loop's choice); (3) the main folds (they start from the full
    fit). Fitted learner by learner, the boosted trees' short folds left the Gaussian
    process's long ones alone on one core (``benchmarks/bench_scale.py``).
    ``progress`` (anything with ``update(n=1)``) is told after each of the
    ``planned_fits`` fits.
    """
    plans = _upgrade_plans(surrogate, core)
    # (1) the upgrade loop: every fold searches its hyperparameters from scratch (a
    # warm start from the correction fitted on all rows was tried: it saved 13 % of a
    # 3,000-cell fit's CPU but widened its intervals, coverage 0.980 against 0.958)
    tasks = [task for name in candidates for index, plan in enumerate(plans)
             for task in _upgrade_tasks(surrogate, core, name, plan, index)]
    upgrade_parts = {(name, index): [] for name in candidates for index in range(len(plans))}
    for (name, index), result in zip([key for key, _ in tasks], _each(surrogate, [task for _, task in tasks], progress)):
        upgrade_parts[(name, index)].append(result)
    upgrade, shift_only = {}, {}
    for name in candidates:
        upgrade[name], shift_only[name] = _upgrade_outcome(
            plans, [upgrade_parts[(name, index)] for index in range(len(plans))]
        )
    # (2) the full fits and the host loop
    host_forms = _host_forms(surrogate)
    levels = surrogate.quantity_levels_
    lowest = np.array([levels[q].index(m) == 0 for q, m in zip(core["quantity"], core["method"])], dtype=bool)
    groups = host_groups(core, surrogate._seed())
    keys, tasks = [], []
    for name in candidates:
        keys.append(("full", name))
        tasks.append(delayed(_full_fit)(surrogate, core, name, shift_only[name]))
        for position, group in enumerate(groups):
            keys.append(("host", name))
            tasks.append(delayed(_host_fold)(
                surrogate, core, name, shift_only[name], host_forms, lowest, position, group
            ))
    stages, host_parts = {}, {name: [] for name in candidates}
    for (kind, name), result in zip(keys, _each(surrogate, tasks, progress)):
        if kind == "full":
            stages[name] = result
        else:
            host_parts[name].append(result)
    # (3) the main folds
    folds = [(fold, test) for fold, test in enumerate(surrogate._fold_masks(core)) if test.any()]
    keys, tasks = [], []
    for name in candidates:
        for fold, test in folds:
            keys.append(name)
            tasks.append(delayed(_fold_predictions)(surrogate, core, name, stages[name], shift_only[name], fold, test))
    main_parts = {name: [] for name in candidates}
    for name, result in zip(keys, _each(surrogate, tasks, progress)):
        main_parts[name].append(result)
    outcomes = {}
    for name in candidates:
        new_host, form = _host_outcome(host_forms, host_parts[name])
        for stage in stages[name].values():
            stage.new_host_form = form
        parts = [_main_outcome(main_parts[name])] + [part for part in (upgrade[name], new_host) if len(part)]
        residuals = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
        outcomes[name] = (stages[name], residuals, shift_only[name])
    return outcomes


def first_look(surrogate, core, candidates, progress=None):
    """Successive halving's first rung for ``learner="auto"`` on a large table: every
    candidate cross-validated on a sample of whole elements, and the ones that lose by
    more than ``FIRST_LOOK_MARGIN`` left out before the full cross-validation.

    The sample is a seeded draw of whole elements holding about a third of the table's
    cells (at most ``FIRST_LOOK_MAX_CELLS``); each candidate is fitted on it and scored
    by its main folds (new-element and new-cell cells; the upgrade and host loops wait
    for the full run). Successive halving (Jamieson & Talwalkar 2016, "Non-stochastic
    best arm identification and hyperparameter optimization", AISTATS, Algorithm 1)
    keeps the better half of the candidates after each rung; with two candidates that
    would always drop one, so a candidate is dropped only when its error is more than
    ``FIRST_LOOK_MARGIN`` times the best one's: a loss too wide for the full run to be
    worth its cost (at 3,050 cells, 1.78x on the sample; the full run chose the same).

    Parameters
    ----------
    surrogate : Surrogate
        Being fitted (its levels and seed set).
    core : DataFrame
        The table's required columns.
    candidates : sequence of str
        Learner names.
    progress : object or None, default=None
        Told after each fit.

    Returns
    -------
    kept : tuple of str
        The candidates still in the race, in their original order.
    record : DataFrame
        Per candidate: ``learner``, ``cells`` and ``elements`` of the sample, its
        out-of-fold ``mae`` (eV) there, the ``margin`` applied and whether it was
        ``kept``.
    """
    sample = _first_look_sample(core, surrogate._seed())
    tasks = [delayed(_full_fit)(surrogate, sample, name, frozenset()) for name in candidates]
    stages = dict(zip(candidates, _each(surrogate, tasks, progress)))
    folds = [(fold, test) for fold, test in enumerate(surrogate._fold_masks(sample)) if test.any()]
    keys, tasks = [], []
    for name in candidates:
        for fold, test in folds:
            keys.append(name)
            tasks.append(delayed(_fold_predictions)(surrogate, sample, name, stages[name], frozenset(), fold, test))
    parts = {name: [] for name in candidates}
    for name, result in zip(keys, _each(surrogate, tasks, progress)):
        parts[name].append(result)
    mae = {name: float(np.mean(np.abs(_main_outcome(parts[name])["error"]))) for name in candidates}
    best = min(mae.values())
    kept = tuple(name for name in candidates if mae[name] <= FIRST_LOOK_MARGIN * best)
    record = pd.DataFrame(
        {
            "learner": list(candidates),
            "cells": len(sample),
            "elements": int(sample["element"].nunique()),
            "mae": [mae[name] for name in candidates],
            "margin": float(FIRST_LOOK_MARGIN),
            "kept": [name in kept for name in candidates],
        }
    )
    return kept, record


def first_look_text(surrogate):
    """One line on the first look of ``surrogate``'s fit ("" when there was none)."""
    record = getattr(surrogate, "first_look_", None)
    if record is None or len(record) == 0:
        return ""
    errors = ", ".join(f"{row.learner} {row.mae:.3f} eV" for row in record.itertuples())
    line = (f"First look on {int(record['cells'].iloc[0]):,} cells of {int(record['elements'].iloc[0])} elements "
            f"(mean absolute error out of fold): {errors}")
    left_out = list(record.loc[~record["kept"], "learner"])
    margin = float(record["margin"].iloc[0])
    if not left_out:
        return line + f"; every learner within {margin:g}x of the best, all cross-validated in full"
    best = record.loc[record["mae"].idxmin(), "learner"]
    return (line + f"; left out as more than {margin:g}x {best}'s error: {', '.join(left_out)} "
            f"(--learner {left_out[0]} fits it anyway; validate scores every learner)")


def first_look_fits(surrogate, core, candidates):
    """How many fits ``first_look`` makes: per candidate, the sample's full fit and its
    main folds."""
    sample = _first_look_sample(core, surrogate._seed())
    folds = sum(bool(test.any()) for test in surrogate._fold_masks(sample))
    return len(candidates) * (1 + folds)


def _first_look_sample(core, seed):
    """Whole elements, in a seeded random order, until about a third of the table's
    cells (at most ``FIRST_LOOK_MAX_CELLS``) are in; rows in the table's order."""
    target = min(len(core) / 3.0, FIRST_LOOK_MAX_CELLS)
    counts = core["element"].value_counts().sort_index()
    order = np.random.default_rng([seed, 7]).permutation(len(counts))
    chosen, total = [], 0
    for position in order:
        if total >= target:
            break
        chosen.append(counts.index[position])
        total += int(counts.iloc[position])
    return core[core["element"].isin(chosen)].reset_index(drop=True)


def _full_fit(surrogate, core, name, shift_only):
    """The stages of learner ``name`` fitted on the whole table."""
    return surrogate._fit_stages(core, name, template=None, shift_only=shift_only)


def planned_fits(surrogate, core, name):
    """How many fits ``fit_candidate`` makes for learner ``name``: the upgrade loop's
    (its folds), the full fit, the main folds and the host folds."""
    count = 1 + sum(bool(test.any()) for test in surrogate._fold_masks(core))
    count += len(host_groups(core, surrogate._seed()))
    for plan in _upgrade_plans(surrogate, core):
        count += len(plan["groups"])
    return count


def _each(surrogate, tasks, progress=None):
    """The results of the delayed ``tasks``, in order, fitted side by side
    (``workers.worker_pool``); ``progress`` is told as each one ends."""
    tasks = list(tasks)
    results = []
    pool = worker_pool(n_jobs=n_workers(surrogate, len(tasks)), return_as="generator")
    # a pool of one runs here, held to one BLAS/OpenMP thread as a worker is: the same
    # arithmetic, so the same model, wherever a fit runs (two threads here against one
    # on a Dask worker moved the demo table's cross-validated MAE by up to 0.4 meV)
    with threadpool_limits(limits=1) if pool.n_jobs == 1 else contextlib.nullcontext():
        for result in pool(tasks):
            results.append(result)
            step(progress)
    return results


def host_groups(core, seed):
    """Groups of hosts held out together by the host loop (one host per group with up
    to ``_HOST_FOLDS`` hosts); empty below ``MIN_HOSTS_FOR_NEW_HOST`` hosts."""
    hosts = np.array(sorted(core["host"].unique()), dtype=object)
    if len(hosts) < MIN_HOSTS_FOR_NEW_HOST:
        return []
    np.random.default_rng(seed + 2).shuffle(hosts)
    return [list(group) for group in np.array_split(hosts, min(_HOST_FOLDS, len(hosts)))]


def _host_forms(surrogate):
    """The forms the host loop compares (``stages.NEW_HOST_FORMS``; the properties' form
    only when the host file gives some)."""
    values = getattr(surrogate, "host_values_", None)
    with_properties = values is not None and bool(host_property_columns(values))
    return tuple(form for form in NEW_HOST_FORMS if with_properties or form != "pairs_properties")


def _host_outcome(form_names, fold_results):
    """Out-of-fold predictions of hosts held out whole (``new-host``) and of hosts just
    started (``sparse-host``).

    Every stage is refitted from scratch without the held-out hosts (their columns are
    not in its input layout, as a new host's are not), so the hidden hosts are placed
    only by their host descriptors and the site kinds: the way a host with no rows is
    predicted. Then ``SPARSE_HOST_CELLS`` cells of each hidden host (at the lowest
    level, drawn at random) are given back, the stages refitted, and the host's other
    cells predicted: a host with a first few calculations. Each hidden cell is predicted
    in every form of ``stages.NEW_HOST_FORMS``: by the learners; with every stage's mean
    replaced, for hosts the stage never saw, by the other-hosts rule
    (``stages.other_hosts_rule``: the impurity's mean over the other hosts' sites of the
    same kind); or by the pair model (``stages.fit_pairs``), with the host file's
    properties too when it gives some; covariances kept. The form
    with the lowest out-of-fold mean absolute error is kept (the earlier on a tie), so a
    new host is never predicted worse than the rule on the table's own evidence.

    ``fold_results`` holds each fold's ``_host_fold`` result.

    Returns
    -------
    residuals : DataFrame
        The kept form's out-of-fold predictions (empty below three hosts).
    form : str
        The form kept ("learner" below three hosts).
    """
    forms = {form: [] for form in form_names}
    for found in fold_results:
        for form, parts in found.items():
            forms[form].extend(parts)
    if not forms["learner"]:
        return pd.DataFrame(), "learner"
    found = {}
    for form, parts in forms.items():
        residuals = pd.concat(parts, ignore_index=True)
        residuals["error"] = residuals["value"] - residuals["mean"]
        residuals["z"] = residuals["error"] / np.maximum(residuals["raw_std"], 1e-9)
        found[form] = residuals
    form = min(found, key=lambda name: float(np.mean(np.abs(found[name]["error"]))))
    return found[form], form


def _host_fold(surrogate, core, name, shift_only, form_names, lowest, position, group):
    """One fold of the host loop: the hosts of ``group`` held out whole, then with a
    few of their cells given back; form -> list of predicted parts."""
    forms = {form: [] for form in form_names}
    test = core["host"].isin(group).to_numpy()
    rng = np.random.default_rng(surrogate._seed() + 3 + position)
    given = np.zeros(len(core), dtype=bool)
    for host in group:
        candidates = np.flatnonzero((core["host"] == host).to_numpy() & lowest)
        if len(candidates) > 2 * SPARSE_HOST_CELLS:
            given[rng.choice(candidates, size=SPARSE_HOST_CELLS, replace=False)] = True
    fits = [(test, _HOST_FOLD_START + position, "new-host")]
    if given.any():
        fits.append((test & ~given, _HOST_FOLD_START + _SPARSE_FOLD_OFFSET + position, "sparse-host"))
    stages = None
    for hidden, fold, kept in fits:
        training, held_out = core[~hidden], core[hidden].reset_index(drop=True)
        # the host's first cells condition the stages fitted without it (their
        # kernels kept, as a refreshed model keeps them when a user adds rows)
        stages = surrogate._fit_stages(
            training, name, template=stages, mode="fresh" if stages is None else "grown", shift_only=shift_only
        )
        servable = np.array([(q, m) in stages for q, m in zip(held_out["quantity"], held_out["method"])])
        # each cell once per scenario: a quantity none of the given cells has stays
        # new-host, already predicted by the first fit
        servable &= surrogate._scenarios(training, held_out) == kept
        held_out = held_out[servable].reset_index(drop=True)
        if len(held_out) == 0:
            continue
        level_domain = LevelDomain(
            descriptors=surrogate.descriptors_, descriptor_values=surrogate.descriptor_values_
        ).fit(training)
        difficulty = difficulty_features(level_domain, training, held_out)
        scenario = surrogate._scenarios(training, held_out)
        for form, parts in forms.items():
            for stage in stages.values():
                stage.new_host_form = form
            mean, std = surrogate._predict_raw(stages, training, held_out)
            part = held_out.assign(mean=mean, raw_std=std, scenario=scenario, fold=fold)
            parts.append(pd.concat([part, difficulty], axis=1))
    return forms


def fold_masks(surrogate, core):
    """Boolean test masks over ``core`` rows, one per fold (see the package docstring)."""
    rng = np.random.default_rng(surrogate._seed())
    table_elements = np.array(sorted(core["element"].unique()))
    rng.shuffle(table_elements)
    n_folds = int(min(max(surrogate.n_folds, 2), len(table_elements)))
    groups = np.array_split(table_elements, n_folds)
    element = core["element"].to_numpy()
    quantity_levels = surrogate.quantity_levels_
    lowest = np.array(
        [
            quantity_levels[quantity].index(method) == 0
            for quantity, method in zip(core["quantity"], core["method"])
        ]
    )
    computed = set(core[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    has_cheap = np.array(
        [
            position > 0
            and (e, h, s, quantity_levels[q][position - 1], q) in computed
            for e, h, s, q, position in zip(
                core["element"], core["host"], core["site"], core["quantity"],
                [quantity_levels[q].index(m) for q, m in zip(core["quantity"], core["method"])],
            )
        ],
        dtype=bool,
    )
    masks = []
    for fold in range(n_folds):
        hidden_elements = np.isin(element, groups[fold])
        test = hidden_elements.copy()
        # single cells: cheap-level cells only, or expensive ones whose cheap level is
        # missing too; an expensive cell with its cheap level computed is an upgrade,
        # cross-validated by its own loop
        candidates = ~test & (lowest | ~has_cheap)
        test |= candidates & (rng.random(len(core)) < 1.0 / n_folds)
        # every element keeps at least one training cell per quantity unless hidden whole
        training = core[~test]
        kept = set(zip(training["element"], training["quantity"]))
        for position in np.flatnonzero(test & ~hidden_elements):
            key = (element[position], core["quantity"].iat[position])
            if key not in kept:
                test[position] = False
                kept.add(key)
        masks.append(test)
    return masks


def n_workers(surrogate, n_tasks):
    """Workers for ``n_tasks`` independent fits: the surrogate's ``n_jobs`` (2 for model
    folders written before it existed), never more than the tasks."""
    n_jobs = getattr(surrogate, "n_jobs", 2)
    return max(1, min(n_tasks, n_jobs if n_jobs > 0 else os.cpu_count() or 1))


def _fold_predictions(surrogate, core, name, template, shift_only, fold, test):
    """One main fold: its stages fitted without the hidden cells, and the hidden cells'
    predictions (None when the fold's stages serve none of them)."""
    training, held_out = core[~test], core[test].reset_index(drop=True)
    stages = surrogate._fit_stages(training, name, template=template, mode="fold", shift_only=shift_only)
    servable = np.array(
        [(q, m) in stages for q, m in zip(held_out["quantity"], held_out["method"])]
    )
    held_out = held_out[servable].reset_index(drop=True)
    if len(held_out) == 0:
        return None
    mean, std = surrogate._predict_raw(stages, training, held_out)
    part = held_out.copy()
    part["mean"] = mean
    part["raw_std"] = std
    part["scenario"] = surrogate._scenarios(training, held_out)
    part["fold"] = fold
    level_domain = LevelDomain(
        descriptors=surrogate.descriptors_, descriptor_values=surrogate.descriptor_values_
    ).fit(training)
    return pd.concat([part, difficulty_features(level_domain, training, held_out)], axis=1)


def _main_outcome(fold_results):
    """The main folds' out-of-fold predictions of every hidden cell, with its scenario."""
    records = [part for part in fold_results if part is not None]
    if not records:
        raise DopantgapError(
            "Cross-validation found nothing to hold out: the table needs at least two elements."
        )
    residuals = pd.concat(records, ignore_index=True)
    residuals["error"] = residuals["value"] - residuals["mean"]
    residuals["z"] = residuals["error"] / np.maximum(residuals["raw_std"], 1e-9)
    return residuals


def _upgrade_plans(surrogate, core):
    """The correction stages the upgrade loop relearns, each as a dict: quantity,
    method, cells, target, below (the cheap level's rows), groups (of elements hidden
    together) and first_fold (the id of its first fold)."""
    plans = []
    rng = np.random.default_rng(surrogate._seed() + 1)
    # fold numbers continue after the main loop's, so that every fold id is unique
    fold = int(min(max(surrogate.n_folds, 2), core["element"].nunique()))
    for quantity, methods in surrogate.quantity_levels_.items():
        for position in range(1, len(methods)):
            cells, target, kind = surrogate._stage_rows(core, quantity, position)
            if kind != "correction":
                continue
            both = np.array(sorted(cells["element"].unique()))
            if len(both) < 3:
                continue
            rng.shuffle(both)
            groups = np.array_split(both, min(_UPGRADE_FOLDS, len(both)))
            plans.append({
                "quantity": quantity, "method": methods[position], "cells": cells, "target": target,
                "below": core[(core["quantity"] == quantity) & (core["method"] == methods[position - 1])],
                "groups": groups, "first_fold": fold,
            })
            fold += len(groups)
    return plans


def _upgrade_tasks(surrogate, core, name, plan, index):
    """The upgrade folds of ``plan`` (the ``index``-th) for learner ``name``, as
    ((name, index), delayed fit) pairs."""
    return [
        ((name, index), delayed(_upgrade_fold)(
            surrogate, core, name, plan["cells"], plan["target"], plan["below"], plan["quantity"],
            plan["method"], group, plan["first_fold"] + offset,
        ))
        for offset, group in enumerate(plan["groups"])
    ]


def _upgrade_outcome(plans, fold_results):
    """Out-of-fold upgrade predictions, and the corrections best left to the shifts.

    Each correction stage is relearned without some of the elements computed at
    both levels, which are then predicted from their computed cheap level (the only
    part of the chain an upgrade needs), twice: as the column shifts' prior plus the
    learner, and as the prior alone. A stage whose learner does not lower the
    out-of-fold mean absolute error keeps the prior alone (its name is returned),
    so an upgrade is never worse than the shift rule on the table's own evidence.

    ``fold_results`` holds, per plan of ``_upgrade_plans``, its folds' ``_upgrade_fold``
    results.

    Returns
    -------
    residuals : DataFrame
        The kept form's out-of-fold predictions (empty when no stage has three
        elements at both levels).
    shift_only : frozenset
        (quantity, method) of the corrections that keep the prior alone.
    """
    records, shift_only = [], set()
    for plan, results in zip(plans, fold_results):
        found = {
            form: pd.concat([result[form] for result in results], ignore_index=True) for form in ("learner", "shift")
        }
        error = {form: float(np.mean(np.abs(rows["value"] - rows["mean"]))) for form, rows in found.items()}
        kept = "learner" if error["learner"] < error["shift"] else "shift"
        if kept == "shift":
            shift_only.add((plan["quantity"], plan["method"]))
        records.append(found[kept])
    if not records:
        return pd.DataFrame(), frozenset(shift_only)
    residuals = pd.concat(records, ignore_index=True)[
        list(REQUIRED_COLUMNS)
        + ["mean", "raw_std", "scenario", "fold", "domain_distance", "domain_ratio", "element_cells", "range_excess"]
    ]
    residuals["error"] = residuals["value"] - residuals["mean"]
    residuals["z"] = residuals["error"] / np.maximum(residuals["raw_std"], 1e-9)
    return residuals, frozenset(shift_only)


def _upgrade_fold(surrogate, core, name, cells, target, below, quantity, method, group, fold):
    """One upgrade fold: the correction stage relearned without the elements of ``group``
    at level ``method``, and their cells predicted from their computed cheap level, as
    the learner on the shifts' prior ("learner") and as the prior alone ("shift")."""
    test = cells["element"].isin(group).to_numpy()
    encoder = new_encoder(surrogate)
    encoder.fit(cells[~test])
    training_x, hidden_x = encoder.transform(cells[~test]), encoder.transform(cells[test])
    part = cells[test].reset_index(drop=True)
    cheap = part.merge(below[_CELL + ["value"]], on=_CELL, how="left")["value"].to_numpy()
    part["method"] = method
    part["quantity"] = quantity
    part["value"] = target[test] + cheap
    part["scenario"] = "upgrade"
    part["fold"] = fold
    # what the fold knew: the table less the hidden elements' cells at this level
    hidden = (core["quantity"] == quantity) & (core["method"] == method) & core["element"].isin(group)
    known = core[~hidden]
    level_domain = LevelDomain(
        descriptors=surrogate.descriptors_, descriptor_values=surrogate.descriptor_values_
    ).fit(known)
    part = pd.concat([part, difficulty_features(level_domain, known, part)], axis=1)
    n_elements = cells.loc[~test, "element"].nunique()
    found = {}
    for form in ("learner", "shift"):
        learner = surrogate._new_learner(
            name, encoder, int((~test).sum()), template=None, kind="correction",
            n_elements=n_elements, shift_only=form == "shift",
        )
        learner.fit(training_x, target[~test])
        correction, std = learner.predict(hidden_x, return_std=True)
        found[form] = part.assign(
            mean=np.asarray(correction, dtype=float) + cheap, raw_std=np.asarray(std, dtype=float)
        )
    return found


def _calibration(residuals):
    """Per-scenario, per-quantity calibration from out-of-fold residuals, with per-cell
    difficulty (``calibration.fit_calibration``)."""
    return fit_calibration(residuals, "z")


def _selection_residuals(residuals_by_learner):
    """Out-of-fold residuals of the learner choice itself: each fold's cells predicted by
    the learner with the lowest mean absolute error on the *other* folds, so that the
    choice never sees the cells it is judged on (nested model selection; Varma & Simon
    2006, "Bias in error estimation when using cross-validation for model selection",
    BMC Bioinformatics 7, 91)."""
    names = list(residuals_by_learner)
    folds = sorted(set().union(*(set(frame["fold"]) for frame in residuals_by_learner.values())))
    parts = []
    for fold in folds:
        errors = {}
        for name in names:
            frame = residuals_by_learner[name]
            others = frame.loc[frame["fold"] != fold, "error"]
            errors[name] = float(np.mean(np.abs(others))) if len(others) else np.inf
        chosen = min(names, key=lambda name: (errors[name], names.index(name)))
        frame = residuals_by_learner[chosen]
        parts.append(frame[frame["fold"] == fold].assign(learner=chosen))
    return pd.concat(parts, ignore_index=True)


def metrics(name, residuals):
    """Per scenario and quantity (and "all"): n, mae, rmse and the raw and calibrated
    (cross-conformal) coverage of the 90 % interval of one learner's residuals."""
    rows = []
    residuals = residuals.assign(covered=cross_conformal_covered(residuals, "z", 0.9))
    for scenario in SCENARIOS:
        part = residuals[residuals["scenario"] == scenario]
        for quantity, sub in [("all", part)] + list(part.groupby("quantity")):
            if len(sub) == 0:
                continue
            rows.append(
                {
                    "learner": name,
                    "scenario": scenario,
                    "quantity": quantity,
                    "n": len(sub),
                    "mae": float(np.mean(np.abs(sub["error"]))),
                    "rmse": float(np.sqrt(np.mean(sub["error"] ** 2))),
                    "coverage_raw": float(np.mean(np.abs(sub["z"]) <= 1.6448536269514722)),
                    "coverage_calibrated": float(np.mean(sub["covered"])),
                }
            )
    return pd.DataFrame(rows)
