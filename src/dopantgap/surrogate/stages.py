"""Stages of a surrogate: one fitted model per quantity and level of theory.

Which cells a stage trains on (the level's own values, or their correction to the level
below), which learner it gets, and fitting one stage per quantity and level. The
functions take the ``Surrogate`` whose settings they read; its methods of the same
names delegate here.
"""

import numpy as np
import pandas as pd

from dopantgap.features import (
    MIN_CELLS_FOR_OWN_INDICATOR,
    MIN_HOSTS_FOR_HOST_DESCRIPTORS,
    CellEncoder,
    PairEncoder,
    site_kind,
)
from dopantgap.hosts import host_property_columns
from dopantgap.learners import BoostLearner, ColumnMeanLearner, GPLearner, HostTransferGP, ShiftPriorLearner
from dopantgap.reproducible import learner_seed

# Below this many training rows a stage falls back on column means (common practice,
# no source: a Gaussian process with ~15 length scales needs several rows per scale).
_MIN_ROWS_FOR_LEARNER = 8
# Below this many cells computed at both levels a level is learned directly
# instead of as a correction (common practice, no source): one is enough, since a
# correction with few cells stays at the column's shift (``learners.ShiftPriorLearner``),
# which is never worse than a level learned on its own from those same few cells.
_MIN_ROWS_FOR_CORRECTION = 1
# A correction learns what the column shifts leave only from this many elements
# (common practice, no source: with two, any pattern across elements is a guess).
_MIN_ELEMENTS_FOR_RESIDUAL = 3
# L-BFGS-B iterations for a full fit, and for a cross-validation fold, whose search
# starts from the full fit's optimum (common practice, no source: a warm start near
# the optimum converges in a fraction of the iterations; measured once on the invented
# demo table, no benchmark script: 30 left the out-of-fold errors within 1 % of 80).
_OPTIMISER_ITERATIONS = 80
_FOLD_OPTIMISER_ITERATIONS = 30
# A refreshed model (recorded rounds, replay) re-optimises a stage's hyperparameters once
# it has this many times the rows they were optimised on (common practice, no source:
# hyperparameters fitted on a handful of elements go stale as the stage grows; measured
# in benchmarks/bench_replay.py on the invented demo world: a replay that never
# re-optimised learned the expensive level half as fast).
_REOPTIMISE_GROWTH = 1.25
#: The forms a stage can predict a host it never saw with; the host loop keeps the one
#: with the lowest out-of-fold error (``crossval._host_outcome``): the stage's
#: learner, the other-hosts rule, the pair model (``learners.HostTransferGP`` on
#: ``features.PairEncoder`` rows), or the pair model that also reads the host file's
#: properties (only when the host file gives some for every host).
NEW_HOST_FORMS = ("learner", "rule", "pairs", "pairs_properties")
#: How ``fit`` names each form to the user.
NEW_HOST_FORM_WORDS = {
    "learner": "the learners",
    "rule": "the other-hosts rule (the impurity's mean over the other hosts)",
    "pairs": "the pair model (the impurity against the host atoms at its site)",
    "pairs_properties": (
        "the pair model with the host file's properties (the impurity against the host "
        "atoms at its site and the host's own properties)"
    ),
}
# Largest stage the pair model is fitted on (its Gaussian process costs the cube of the
# rows; common practice, no source).
_MAX_PAIR_ROWS = 4000

_CELL = ["element", "host", "site"]


class _Stage:
    """A fitted model of one quantity at one level: its encoder, learner and kind.

    ``other_hosts_means`` holds what the other-hosts rule reads (the stage's mean target
    per element and site kind, and per site kind); ``pairs`` is the fitted pair model
    (encoder, learner) or None; ``new_host_form`` (one of ``NEW_HOST_FORMS``) says which
    mean cells of a host the stage never saw take (the host loop decides:
    ``crossval._host_outcome``).
    """

    def __init__(self, quantity, method, kind, encoder, learner, tuned_rows=None, other_hosts_means=None,
                 hosts=(), pairs=None, elements=(), pairs_properties=None):
        self.quantity = quantity
        self.method = method
        self.kind = kind  # "direct" or "correction"
        self.encoder = encoder
        self.learner = learner
        # training rows when the learner's hyperparameters were last optimised
        self.tuned_rows = tuned_rows
        self.other_hosts_means = other_hosts_means
        self.hosts = frozenset(hosts)
        self.elements = frozenset(elements)
        self.pairs = pairs
        self.pairs_properties = pairs_properties
        self.new_host_form = "learner"


def new_host_form(stage):
    """The form a stage predicts hosts it never saw with (``NEW_HOST_FORMS``)."""
    form = getattr(stage, "new_host_form", None)
    if form is None:
        # model folders written before the pair model kept a yes/no for the rule
        form = "rule" if getattr(stage, "new_host_rule", False) else "learner"
    if form == "pairs_properties" and getattr(stage, "pairs_properties", None) is None:
        form = "pairs"
    if form == "pairs" and getattr(stage, "pairs", None) is None:
        return "learner"
    return form


def other_hosts_means(cells, target, site_kinds):
    """Mean target per (element, site kind) and per site kind over a stage's training
    cells: the rule a researcher applies to a host with no rows (an impurity does there
    what it does on average in the other hosts)."""
    kinds = [site_kind(host, site, site_kinds) for host, site in zip(cells["host"], cells["site"])]
    frame = pd.DataFrame({"element": cells["element"].to_numpy(), "kind": kinds, "target": target})
    by_element = frame.groupby(["element", "kind"])["target"].mean().to_dict()
    by_kind = frame.groupby("kind")["target"].mean().to_dict()
    return {"element": by_element, "kind": by_kind, "all": float(np.mean(target))}


def stage_joint(surrogate, stage, cells):
    """Mean and covariance of one stage's own output (a level, or a correction) at cells.

    The learner's, except that where the host loop kept another form
    (:func:`new_host_form`) cells of hosts the stage never saw take the other-hosts
    rule's mean, or the pair model's (which also takes the known elements of hosts just
    started); the learner's covariance stays (the host
    loop calibrates it for the form kept). Every consumer (the chain of levels, the
    picker's joint) reads a stage through here.
    """
    n_cells = len(cells)
    mean, cov = stage.learner.predict(stage.encoder.transform(cells), return_cov=True)
    mean = np.array(mean, dtype=float)
    cov = np.array(cov, dtype=float).reshape(n_cells, n_cells)
    form = new_host_form(stage)
    if form == "learner":
        return mean, cov
    unseen = ~cells["host"].isin(stage.hosts).to_numpy()
    if form == "rule":
        if unseen.any():
            mean[unseen] = other_hosts_rule(stage, cells[unseen], getattr(surrogate, "site_kinds_", None))
    else:
        # the pair model also places an element the stage has cells of in a column
        # without an indicator of its own (fewer than features.MIN_CELLS_FOR_OWN_INDICATOR
        # cells: a host just started), as the host loop's sparse-host fits scored it; an
        # element never computed stays with the learner, which the main loop scored
        own = set(stage.encoder.indicator_keys_)
        started = np.array([key not in own for key in zip(cells["host"], cells["site"])], dtype=bool)
        unseen |= started & cells["element"].isin(getattr(stage, "elements", ())).to_numpy()
        if unseen.any():
            encoder, learner = stage.pairs_properties if form == "pairs_properties" else stage.pairs
            mean[unseen] = learner.predict(encoder.transform(cells[unseen].reset_index(drop=True)))
    return mean, cov


def other_hosts_rule(stage, cells, site_kinds):
    """The other-hosts rule's mean of ``cells`` for a stage (NaN-free: an element never
    seen on a site kind gets the kind's mean, an unknown kind the stage's mean)."""
    means = stage.other_hosts_means
    found = []
    for element, host, site in zip(cells["element"], cells["host"], cells["site"]):
        kind = site_kind(host, site, site_kinds)
        value = means["element"].get((element, kind))
        if value is None:
            value = means["kind"].get(kind, means["all"])
        found.append(value)
    return np.array(found, dtype=float)


def _gaussian_process(learner):
    """The Gaussian process of a learner: itself, or the one a correction's shift prior
    wraps (fitted or not); None for any other learner."""
    if isinstance(learner, ShiftPriorLearner):
        learner = getattr(learner, "residual_learner_", None) or learner.residual_learner
    return learner if isinstance(learner, GPLearner) else None


def _tuned_rows(stage):
    """Rows a stage's hyperparameters were optimised on (its rows, for older model folders)."""
    tuned = getattr(stage, "tuned_rows", None)
    if tuned is not None:
        return tuned
    process = _gaussian_process(stage.learner)
    regressor = getattr(process, "regressor_", None)
    return len(regressor.X_train_) if regressor is not None else 0


def correction_forms(surrogate):
    """What each correction between levels leans on, as the fitted stages do it.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted model.

    Returns
    -------
    list of dict
        Per correction stage, in the model's order of stages: ``quantity``, ``cheap`` and
        ``expensive`` (the two levels) and ``form``: "learner" (the pooled shift plus
        the learner) or "column shifts" (the shifts alone, because the upgrade loop
        found the learner no help or too few elements were computed at both levels).
    """
    found = []
    for (quantity, method), stage in surrogate.stages_.items():
        learner = stage.learner
        if stage.kind != "correction" or not isinstance(learner, ShiftPriorLearner):
            continue
        levels = surrogate.quantity_levels_[quantity]
        found.append({
            "quantity": quantity, "cheap": levels[levels.index(method) - 1], "expensive": method,
            "form": "column shifts" if learner.residual_learner_ is None else "learner",
        })
    return found


def correction_forms_text(surrogate):
    """One line per correction between levels saying what it leans on, or "" (none)."""
    words = {
        "learner": f"the {surrogate.learner_} learner on top of the pooled shift",
        "column shifts": "the column shifts alone",
    }
    lines = [
        f"  {row['quantity']} {row['cheap']} -> {row['expensive']}: {words[row['form']]}"
        for row in correction_forms(surrogate)
    ]
    if not lines:
        return ""
    return "Corrections between levels (chosen on elements held out at the costlier level):\n" + "\n".join(lines)


def stage_rows(surrogate, core, quantity, position):
    """Training cells and target of a stage, and whether it is a correction."""
    methods = surrogate.quantity_levels_[quantity]
    rows = core[(core["quantity"] == quantity) & (core["method"] == methods[position])]
    if position == 0 or not surrogate.correction:
        return rows[_CELL].reset_index(drop=True), rows["value"].to_numpy(), "direct"
    below = core[(core["quantity"] == quantity) & (core["method"] == methods[position - 1])]
    joined = rows.merge(below[_CELL + ["value"]], on=_CELL, suffixes=("", "_below"))
    if len(joined) < _MIN_ROWS_FOR_CORRECTION:
        return rows[_CELL].reset_index(drop=True), rows["value"].to_numpy(), "direct"
    target = (joined["value"] - joined["value_below"]).to_numpy()
    return joined[_CELL].reset_index(drop=True), target, "correction"


def new_encoder(surrogate):
    """An unfitted encoder with the surrogate's descriptors, hosts and site kinds."""
    return CellEncoder(
        surrogate.descriptors_, surrogate.compositions_, surrogate.descriptor_values_,
        host_values=getattr(surrogate, "host_values_", None),
        site_kinds=getattr(surrogate, "site_kinds_", None),
    )


def new_learner(surrogate, name, encoder, n_rows, template, mode="fresh", kind="direct", n_elements=None,
                shift_only=False):
    """A learner for a stage of ``n_rows`` rows.

    ``mode`` says where the stage is fitted: "fresh" (the full fit: hyperparameters
    optimised from the default start), "fold" (a cross-validation fold: optimised
    afresh on the fold's rows, warm-started from the full fit's ``template`` and
    with fewer iterations), or "grown" (a refreshed model: the template's kernel
    kept until the stage has outgrown it). A correction (``kind``) is the column
    shifts' hierarchical prior (``ShiftPriorLearner``) plus the learner for what
    they leave, or the prior alone with fewer than ``_MIN_ELEMENTS_FOR_RESIDUAL``
    elements or where ``shift_only`` (the upgrade loop found the learner no help).
    """
    if kind == "correction":
        column_label = encoder.label_columns_[1]
        few = n_rows < _MIN_ROWS_FOR_LEARNER or (n_elements or 0) < _MIN_ELEMENTS_FOR_RESIDUAL
        if few or shift_only:
            return ShiftPriorLearner(label_column=column_label)
        inner = surrogate._new_learner(name, encoder, n_rows, template, mode=mode)
        return ShiftPriorLearner(label_column=column_label, residual_learner=inner)
    if n_rows < _MIN_ROWS_FOR_LEARNER:
        return ColumnMeanLearner(label_column=encoder.label_columns_[1])
    if name == "gp":
        fixed = initial = None
        iterations = _OPTIMISER_ITERATIONS
        kernel = None
        process = None if template is None else _gaussian_process(template.learner)
        if process is not None and hasattr(process, "regressor_"):
            kernel = process.kernel_
        if mode == "grown" and kernel is not None and n_rows <= _REOPTIMISE_GROWTH * _tuned_rows(template):
            fixed = kernel
        elif mode == "fold" and kernel is not None:
            # every fold tunes its own kernel and chooses its own descriptors on its
            # own rows, so the hidden elements never shape the covariance that
            # predicts them; the warm start (from before the full fit's descriptor
            # choice) only makes the search short
            initial = getattr(process, "ard_kernel_", kernel)
            iterations = _FOLD_OPTIMISER_ITERATIONS
        element_label, column_label = encoder.label_columns_
        # the column indicators already give each column its own behaviour; a
        # random offset per column on top of them was measured to hurt
        # corrections learned from few elements
        return GPLearner(
            label_columns=(element_label,),
            indicator_columns=encoder.indicator_columns_,
            ignored_columns=(column_label,),
            fixed_kernel=fixed,
            initial_kernel=initial,
            selection_group_column=element_label,
            max_optimiser_iterations=iterations,
            random_state=learner_seed(surrogate._seed()),
            smooth_columns=tuple(
                encoder.physical_names_.index(name) for name in getattr(encoder, "host_names_", ())
            ),
            # a large stage is conditioned in blocks of whole hosts (memory bounded)
            block_column=column_label,
            block_groups={code: host for code, (host, _site) in enumerate(encoder.columns_)},
            max_block_rows=int(surrogate.max_block_rows),
        )
    return BoostLearner(label_columns=(encoder.label_columns_[0],), random_state=learner_seed(surrogate._seed()))


def _template_layout(template, cells):
    """The input layout a stage keeps from its template: (columns, indicator keys, host
    descriptor names), or (None, None, None) when it cannot be kept.

    Columns the template never saw (a new host's) are appended when the stage spans
    ``features.MIN_HOSTS_FOR_HOST_DESCRIPTORS`` hosts and none of them needs an indicator
    of its own (``features.MIN_CELLS_FOR_OWN_INDICATOR``): they sit at the mean indicator
    of their site kind, placed by the host descriptors if the template has them, and
    their own cells shift them as cells of one column. Otherwise the layout changes and
    the learner is tuned afresh.
    """
    if template is None:
        return None, None, None
    encoder = template.encoder
    columns = list(encoder.columns_)
    keys = getattr(encoder, "indicator_keys_", columns if len(encoder.indicator_columns_) else [])
    host_names = getattr(encoder, "host_names_", [])
    known = set(columns)
    unseen = [key for key in dict.fromkeys(zip(cells["host"], cells["site"])) if key not in known]
    if unseen:
        counts = cells.groupby(["host", "site"]).size().to_dict()
        few_hosts = cells["host"].nunique() < MIN_HOSTS_FOR_HOST_DESCRIPTORS
        if few_hosts or any(counts[key] >= MIN_CELLS_FOR_OWN_INDICATOR for key in unseen):
            return None, None, None
        columns += unseen
    return columns, keys, host_names


def fit_stages(surrogate, core, name, template, mode="fresh", shift_only=frozenset()):
    """Fit one stage per quantity and level; ``template`` (fitted stages) warm-starts
    the hyperparameters of each fold (``mode="fold"``) or keeps them in a refreshed
    model (``mode="grown"``, until a stage outgrows them); corrections named in
    ``shift_only`` are the column shifts alone: see ``new_learner``."""
    stages = {}
    for quantity, methods in surrogate.quantity_levels_.items():
        for position, method in enumerate(methods):
            cells, target, kind = surrogate._stage_rows(core, quantity, position)
            if len(cells) == 0:
                continue
            model_template = None if template is None else template.get((quantity, method))
            encoder = new_encoder(surrogate)
            columns, indicator_keys, host_names = _template_layout(model_template, cells)
            if columns is None:
                model_template = None
            encoder.fit(cells, columns=columns, indicator_keys=indicator_keys, host_names=host_names)
            learner = surrogate._new_learner(
                name, encoder, len(cells), model_template, mode=mode, kind=kind,
                n_elements=cells["element"].nunique(), shift_only=(quantity, method) in shift_only,
            )
            learner.fit(encoder.transform(cells), target)
            process = _gaussian_process(learner)
            reused = process is not None and process.fixed_kernel is not None
            tuned = _tuned_rows(model_template) if reused else len(cells)
            previous = None if template is None else template.get((quantity, method))
            stage = _Stage(
                quantity, method, kind, encoder, learner, tuned,
                other_hosts_means=other_hosts_means(cells, target, getattr(surrogate, "site_kinds_", None)),
                hosts=set(cells["host"]),
                elements=set(cells["element"]),
                pairs=None if mode == "fold" else fit_pairs(surrogate, cells, target, previous, mode),
                pairs_properties=None if mode == "fold" else fit_pairs(
                    surrogate, cells, target, previous, mode, properties=True
                ),
            )
            # a refreshed model keeps the host loop's choice of form for unseen hosts
            if previous is not None:
                stage.new_host_form = new_host_form(previous)
            stages[(quantity, method)] = stage
    return stages


def fit_pairs(surrogate, cells, target, template=None, mode="fresh", properties=False):
    """The pair model of a stage, as (encoder, learner), or None when the stage has too
    few hosts to learn what a host does, or too many rows; with ``properties``, the one
    that also reads the host file's properties, or None when the host file gives none
    usable (known for every training host, not constant).

    Cross-validation folds of the main loop never predict a host they did not see, so
    ``fit_stages`` skips it there; a ``grown`` stage keeps its template's kernel.
    """
    if cells["host"].nunique() < MIN_HOSTS_FOR_HOST_DESCRIPTORS or not (
        _MIN_ROWS_FOR_LEARNER <= len(cells) <= _MAX_PAIR_ROWS
    ):
        return None
    host_properties = None
    if properties:
        values = getattr(surrogate, "host_values_", None)
        if values is None or not host_property_columns(values):
            return None
        host_properties = values[host_property_columns(values)]
    encoder = PairEncoder(
        surrogate.compositions_, surrogate.descriptor_values_, site_kinds=getattr(surrogate, "site_kinds_", None),
        host_properties=host_properties,
    ).fit(cells)
    if properties and not encoder.property_names_:
        return None
    kept = getattr(template, "pairs_properties" if properties else "pairs", None) if mode == "grown" else None
    learner = HostTransferGP(
        fixed_kernel=None if kept is None else kept[1].kernel_, random_state=learner_seed(surrogate._seed())
    )
    learner.fit(encoder.transform(cells), target)
    return encoder, learner
