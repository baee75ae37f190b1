"""Predicting through a surrogate's chain of levels, and the calibrated factors.

A cell at level k is predicted as the correction of its stage plus the prediction at
level k-1 (the user's number where computed), covariances added; cells are predicted
by quantity and method in chunks of whole elements. The scenario of each cell and the
per-cell factors of the calibration (``calibration.ScenarioCalibration``) turn the raw
spread into the stated one. The functions take the ``Surrogate``; its methods of the
same names delegate here.
"""

import numpy as np
import pandas as pd

from dopantgap.calibration import SCENARIOS
from dopantgap.errors import DopantgapError
from dopantgap.features import MIN_CELLS_FOR_OWN_INDICATOR, MIN_HOSTS_FOR_HOST_DESCRIPTORS
from dopantgap.surrogate.stages import stage_joint
from dopantgap.table import KEY_COLUMNS

# Cells predicted together (their joint covariance is formed in memory: 1500^2 doubles
# are 18 MB; common practice, no source).
_CHUNK_CELLS = 1500


def known_values(core):
    """Computed value of every (element, host, site, method, quantity) of ``core``."""
    return {
        tuple(key): value
        for key, value in zip(core[list(KEY_COLUMNS)].itertuples(index=False), core["value"])
    }


def joint(surrogate, stages, known, quantity, method, cells):
    """Mean and covariance (uncalibrated) of ``cells`` of one quantity and method.

    Cells computed at this level return their value with zero variance.
    """
    methods = surrogate.quantity_levels_[quantity]
    position = methods.index(method)
    stage = stages.get((quantity, method))
    if stage is None:
        # a level with no training cell of its own: only reachable through a bad call
        raise DopantgapError(f"No model for quantity {quantity!r} at method {method!r}.")
    mean, cov = stage_joint(surrogate, stage, cells)
    if stage.kind == "correction":
        below_mean, below_cov = surrogate._joint(stages, known, quantity, methods[position - 1], cells)
        mean, cov = mean + below_mean, cov + below_cov
    computed = np.array(
        [
            known.get((element, host, site, method, quantity), np.nan)
            for element, host, site in zip(cells["element"], cells["host"], cells["site"])
        ]
    )
    is_computed = ~np.isnan(computed)
    mean[is_computed] = computed[is_computed]
    cov[is_computed, :] = 0.0
    cov[:, is_computed] = 0.0
    return mean, cov


def scenarios(surrogate, core, cells):
    """Scenario of each cell given the cells computed in ``core``: ``new-host`` when its
    host has no computed cell of its quantity (whatever the element); ``upgrade`` when
    its cheaper level is computed; ``sparse-host`` when, in a table of three or more
    hosts, its host/site column has fewer than ``features.MIN_CELLS_FOR_OWN_INDICATOR``
    computed cells of its quantity (placed through the other hosts, as the encoder
    places it, not by a column of its own); else ``new-element`` or ``new-cell``."""
    with_quantity = set(zip(core["element"], core["quantity"]))
    host_quantity = set(zip(core["host"], core["quantity"]))
    column_cells = core.groupby(["host", "site", "quantity"]).size().to_dict()
    many_hosts = core["host"].nunique() >= MIN_HOSTS_FOR_HOST_DESCRIPTORS
    computed = set(core[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    found = []
    for element, host, site, method, quantity in cells[list(KEY_COLUMNS)].itertuples(
        index=False, name=None
    ):
        methods = surrogate.quantity_levels_.get(quantity, [])
        position = methods.index(method) if method in methods else 0
        if (host, quantity) not in host_quantity:
            found.append("new-host")
        elif position > 0 and (element, host, site, methods[position - 1], quantity) in computed:
            found.append("upgrade")
        elif many_hosts and column_cells.get((host, site, quantity), 0) < MIN_CELLS_FOR_OWN_INDICATOR:
            found.append("sparse-host")
        elif (element, quantity) not in with_quantity:
            found.append("new-element")
        else:
            found.append("new-cell")
    return np.array(found, dtype=object)


def predict_raw(surrogate, stages, core, cells):
    """Mean and raw std of cells, predicted by quantity and method in chunks of whole
    elements (the joint covariance of a chunk is formed in memory)."""
    known = surrogate._known(core)
    mean = np.full(len(cells), np.nan)
    std = np.full(len(cells), np.nan)
    cells = cells.reset_index(drop=True)
    for (quantity, method), group in cells.groupby(["quantity", "method"], sort=False):
        element_order = list(dict.fromkeys(group["element"]))
        chunk, size = [], 0
        per_element = {e: rows.index for e, rows in group.groupby("element", sort=False)}
        chunks = []
        for element in element_order:
            chunk.append(element)
            size += len(per_element[element])
            if size >= _CHUNK_CELLS:
                chunks.append(chunk)
                chunk, size = [], 0
        if chunk:
            chunks.append(chunk)
        for chunk in chunks:
            index = np.concatenate([per_element[element] for element in chunk])
            part = cells.loc[index]
            chunk_mean, chunk_cov = surrogate._joint(stages, known, quantity, method, part)
            mean[index] = chunk_mean
            std[index] = np.sqrt(np.clip(np.diag(chunk_cov), 0.0, None))
    return mean, std


def difficulty_features(level_domain, core, cells):
    """What makes a cell harder than usual, known before it is computed: its element's
    distance from the elements computed at its level (and host), also over the domain
    threshold, its overshoot beyond their range along its most extreme descriptor, and
    the element's computed cells of its quantity in ``core``."""
    cells = cells.reset_index(drop=True)
    distance = level_domain.distance(cells) if len(cells) else np.zeros(0)
    threshold = level_domain.elements_.threshold_
    if np.isfinite(threshold) and threshold > 0:
        ratio = distance / threshold
    else:
        ratio = np.zeros(len(cells))
    counts = core.groupby(["element", "quantity"]).size().to_dict()
    element_cells = np.array(
        [counts.get((element, quantity), 0) for element, quantity in zip(cells["element"], cells["quantity"])],
        dtype=float,
    )
    excess = level_domain.range_excess(cells) if len(cells) else np.zeros(0)
    return pd.DataFrame({
        "domain_distance": distance, "domain_ratio": ratio, "element_cells": element_cells, "range_excess": excess,
    })


def calibrated_factors(surrogate, core, cells, scenarios, level=0.9, raw_std=None):
    """Per-cell factors on the raw std: the calibrated std's and the interval's
    half-width's (scenario and quantity quantile times the cell's difficulty); 1 and
    the Gaussian quantile for cells of no scenario (computed ones). ``raw_std`` (the
    model's own std of each cell, a difficulty feature) is predicted when not given."""
    calibration = surrogate.calibration_
    # difficulty features only where a difficulty model will read them (older model
    # folders, and hand-built surrogates in tests, have none)
    has_difficulty = bool(getattr(calibration, "difficulty_", {}))
    features = None
    if has_difficulty:
        features = difficulty_features(surrogate.level_domain(), core, cells)
        if raw_std is None:
            _mean, raw_std = surrogate._predict_raw(surrogate.stages_, core, cells)
        features["raw_std"] = np.asarray(raw_std, dtype=float)
    scale = np.ones(len(cells))
    half = np.full(len(cells), 1.6448536269514722)
    quantities = cells["quantity"].to_numpy()

    def factors(scenario, in_scenario):
        difficulty = (
            calibration.difficulty(scenario, features[in_scenario])
            if features is not None else np.ones(int(in_scenario.sum()))
        )
        found_scale, found_half = difficulty.copy(), difficulty.copy()
        for quantity in set(quantities[in_scenario]):
            rows = quantities[in_scenario] == quantity
            found_scale[rows] *= calibration.std_scale(scenario, quantity)
            found_half[rows] *= calibration.half_width(scenario, level, quantity)
        return found_scale, found_half

    for scenario in SCENARIOS:
        in_scenario = scenarios == scenario
        if not in_scenario.any():
            continue
        scale[in_scenario], half[in_scenario] = factors(scenario, in_scenario)
        if scenario == "sparse-host" and calibration.n_residuals("new-host") > 0:
            # a host's first cells never make it less known per unit of the model's own
            # spread than none: the factors are at most a new host's (the sparse-host
            # residuals come from hosts given five cells, and would widen a host given one
            # beyond what it had with none)
            new_scale, new_half = factors("new-host", in_scenario)
            scale[in_scenario] = np.minimum(scale[in_scenario], new_scale)
            half[in_scenario] = np.minimum(half[in_scenario], new_half)
    return scale, half
