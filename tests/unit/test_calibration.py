"""Interval calibration: the split-conformal guarantee and the cross-conformal check."""

import math

import numpy as np
import pandas as pd
import pytest

from dopantgap.calibration import ScenarioCalibration, cross_conformal_covered


@pytest.mark.parametrize("n_calibration", [20, 39, 60])
def test_split_conformal_coverage_guarantee_by_simulation(n_calibration):
    """On exchangeable scores the split-conformal interval covers a new point with
    probability ceil((n + 1)(1 - alpha)) / (n + 1), which lies between 1 - alpha and
    1 - alpha + 1/(n + 1) (Vovk, Gammerman & Shafer 2005, Algorithmic Learning in a
    Random World, ch. 2; Lei et al. 2018, JASA 113, Theorem 2.2). Heavy-tailed scores
    (Student t, 3 dof) so that a Gaussian width would not do; fixed seed."""
    alpha, repetitions = 0.1, 6000
    rng = np.random.default_rng(11)
    covered = 0
    for _ in range(repetitions):
        scores = rng.standard_t(3, size=n_calibration + 1)
        calibration = ScenarioCalibration({("new-cell", "E_sol"): scores[:-1]})
        covered += abs(scores[-1]) <= calibration.half_width("new-cell", 1 - alpha, "E_sol")
    observed = covered / repetitions
    exact = math.ceil((n_calibration + 1) * (1 - alpha)) / (n_calibration + 1)
    standard_error = math.sqrt(exact * (1 - exact) / repetitions)
    assert 1 - alpha <= exact <= 1 - alpha + 1 / (n_calibration + 1)
    assert abs(observed - exact) <= 4 * standard_error
    assert observed >= 1 - alpha - 4 * standard_error
    assert observed <= 1 - alpha + 1 / (n_calibration + 1) + 4 * standard_error


def test_gaussian_width_fails_on_heavy_tails_where_conformal_holds():
    """The contrast the calibration exists for: raw Gaussian 90 % intervals on scores
    whose tails are heavier than assumed cover too little (t with 2 dof: P(|T| <= 1.645)
    = 0.758, from the t distribution's closed form F(t) = 1/2 + t / (2 sqrt(2 + t^2)),
    Student 1908 / any statistics handbook)."""
    rng = np.random.default_rng(3)
    scores = rng.standard_t(2, size=4000)
    gaussian = np.mean(np.abs(scores[2000:]) <= 1.6448536)
    closed_form = 2 * (0.5 + 1.6448536 / (2 * math.sqrt(2 + 1.6448536**2))) - 1
    assert abs(gaussian - closed_form) < 0.03 and gaussian < 0.8
    calibration = ScenarioCalibration({("new-element", "E_sol"): scores[:2000]})
    conformal = np.mean(np.abs(scores[2000:]) <= calibration.half_width("new-element", 0.9, "E_sol"))
    assert 0.88 <= conformal <= 0.92


def test_cross_conformal_judges_each_fold_by_the_others():
    """A fold whose residuals are ten times the others' is not covered by widths the
    other folds give; an in-sample check would have covered part of it."""
    rng = np.random.default_rng(0)
    rows = []
    for fold in range(5):
        scale = 10.0 if fold == 0 else 1.0
        for z in rng.normal(0, scale, 40):
            rows.append({"fold": fold, "scenario": "new-element", "quantity": "E_sol", "z": z})
    residuals = pd.DataFrame(rows)
    covered = cross_conformal_covered(residuals, "z", 0.9)
    first = residuals["fold"].to_numpy() == 0
    assert covered[~first].mean() > 0.85
    assert covered[first].mean() < 0.4
    in_sample = ScenarioCalibration({("new-element", "E_sol"): residuals["z"].to_numpy()})
    assert np.mean(np.abs(residuals["z"]) <= in_sample.half_width("new-element", 0.9, "E_sol")) >= 0.9


def test_cross_conformal_on_exchangeable_folds_is_near_nominal():
    rng = np.random.default_rng(5)
    residuals = pd.DataFrame({
        "fold": np.repeat(np.arange(6), 50), "scenario": "new-cell", "quantity": "E_bind",
        "z": rng.standard_t(4, 300),
    })
    assert 0.85 <= cross_conformal_covered(residuals, "z", 0.9).mean() <= 0.95
    assert cross_conformal_covered(residuals.iloc[:0], "z", 0.9).shape == (0,)
