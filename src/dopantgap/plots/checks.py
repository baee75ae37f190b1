"""Figures of the validation: parity and calibration."""


import numpy as np
from scipy.stats import norm

from dopantgap.calibration import SCENARIOS, cross_conformal_covered
from dopantgap.plots.style import _figure, _plain_text, _require

_SCENARIO_STYLE = {
    "new-cell": ("#0072B2", "o"),
    "new-element": ("#D55E00", "s"),
    "upgrade": ("#009E73", "^"),
}


# ----------------------------------------------------------------------------- validation
def _calibrated_std(residuals, calibration):
    if "std" in residuals.columns:
        return residuals["std"].astype(float).to_numpy()
    raw = residuals["raw_std"].astype(float).to_numpy()
    if calibration is None:
        return raw
    scale = np.array(
        [calibration.std_scale(s, q) for s, q in zip(residuals["scenario"], residuals["quantity"])]
    )
    return raw * scale


@_plain_text
def parity_figure(cv_residuals, scenario=None, calibration=None):
    """Cross-validated predictions against the computed values they hid.

    Parameters
    ----------
    cv_residuals : DataFrame
        ``Surrogate.cv_residuals_``: value (computed), mean (out-of-fold prediction),
        raw_std, scenario, quantity; an optional ``std`` column (calibrated) is used
        as is.
    scenario : str or None, default=None
        Only this scenario; None: all, each with its own colour and marker.
    calibration : ScenarioCalibration or None, default=None
        Turns raw_std into the calibrated std of the error bars (1 std); without it
        and without a ``std`` column the raw std is drawn.

    Returns
    -------
    Figure
    """
    _require(cv_residuals, ["value", "mean", "raw_std", "scenario", "quantity"], "The cross-validated residuals")
    residuals = cv_residuals
    if scenario is not None:
        residuals = residuals[residuals["scenario"] == scenario]
    std = _calibrated_std(residuals, calibration)
    figure = _figure(5.6, 5.2)
    ax = figure.add_subplot()
    truth = residuals["value"].astype(float).to_numpy()
    mean = residuals["mean"].astype(float).to_numpy()
    scenarios = residuals["scenario"].to_numpy()
    order = [s for s in SCENARIOS if s in set(scenarios)] + sorted(set(scenarios) - set(SCENARIOS))
    for name in order:
        rows = scenarios == name
        colour, marker = _SCENARIO_STYLE.get(name, ("#555555", "D"))
        mae = float(np.mean(np.abs(truth[rows] - mean[rows])))
        ax.errorbar(
            truth[rows], mean[rows], yerr=std[rows], fmt=marker, markersize=3.2, color=colour,
            ecolor=colour, elinewidth=0.5, alpha=0.75, capsize=0,
            label=f"{name}: {rows.sum()} cells, mean |error| {mae:.3f} eV",
        )
    if len(truth):
        low = float(min(truth.min(), mean.min()))
        high = float(max(truth.max(), mean.max()))
        pad = 0.04 * (high - low or 1.0)
        ax.plot([low - pad, high + pad], [low - pad, high + pad], color="black", linewidth=0.9,
                linestyle="--", label="predicted = computed")
        ax.set_xlim(low - pad, high + pad)
        ax.set_ylim(low - pad, high + pad)
    ax.set_aspect("equal")
    ax.set_xlabel("computed (eV)")
    ax.set_ylabel("predicted, held out (eV)")
    ax.legend(fontsize=7, loc="upper left")
    ax.set_title("Cross-validation: hidden cells predicted (bars: 1 calibrated std)", fontsize=9)
    return figure


_DEFAULT_LEVELS = np.round(np.concatenate([np.arange(0.1, 0.95, 0.05), [0.95, 0.975, 0.99]]), 3)


@_plain_text
def calibration_figure(cv_residuals, calibration, levels=None, show_raw=True, out_of_fold=False):
    """Share of hidden cells inside their central interval, against the interval's level.

    Parameters
    ----------
    cv_residuals : DataFrame
        ``Surrogate.cv_residuals_`` (value, mean, raw_std, scenario, quantity).
    calibration : ScenarioCalibration
        Its ``half_width(scenario, level, quantity) * raw_std`` is the calibrated
        half-width.
    levels : sequence of float or None, default=None
        Nominal levels; None: 0.10 to 0.99.
    show_raw : bool, default=True
        Also draw the uncalibrated Gaussian interval mean +/- z_L * raw_std (dotted).
    out_of_fold : bool, default=False
        Judge each fold's cells by the widths the other folds give
        (``calibration.cross_conformal_covered``; needs a ``fold`` column): a test of
        the calibration. Otherwise the curves are in-sample (the widths come from the
        same residuals) and show how well split-conformal widths fit.

    Returns
    -------
    Figure
    """
    _require(cv_residuals, ["value", "mean", "raw_std", "scenario", "quantity"], "The cross-validated residuals")
    levels = _DEFAULT_LEVELS if levels is None else np.asarray(levels, dtype=float)
    figure = _figure(5.6, 5.2)
    ax = figure.add_subplot()
    error = np.abs(cv_residuals["value"].astype(float).to_numpy() - cv_residuals["mean"].astype(float).to_numpy())
    raw = cv_residuals["raw_std"].astype(float).to_numpy()
    scenarios = cv_residuals["scenario"].to_numpy()
    quantities = cv_residuals["quantity"].to_numpy()
    for name in [s for s in SCENARIOS if s in set(scenarios)]:
        rows = scenarios == name
        colour, marker = _SCENARIO_STYLE[name]
        observed, observed_raw = [], []
        if out_of_fold:
            scored = cv_residuals[rows].assign(z=error[rows] / np.maximum(raw[rows], 1e-12))
        for level in levels:
            if out_of_fold:
                observed.append(float(np.mean(cross_conformal_covered(scored, "z", float(level)))))
            else:
                widths = {q: calibration.half_width(name, level, q) for q in set(quantities[rows])}
                half = np.array([widths[q] for q in quantities[rows]]) * raw[rows]
                observed.append(float(np.mean(error[rows] <= half)))
            observed_raw.append(float(np.mean(error[rows] <= norm.ppf(0.5 + level / 2.0) * raw[rows])))
        kind = "calibrated, out of fold" if out_of_fold else "calibrated"
        ax.plot(levels, observed, marker=marker, markersize=3.5, color=colour, linewidth=1.3,
                label=f"{name}, {kind} ({rows.sum()} cells)")
        if show_raw:
            ax.plot(levels, observed_raw, color=colour, linewidth=1.0, linestyle=":",
                    label=f"{name}, raw Gaussian")
    ax.plot([0, 1], [0, 1], color="black", linewidth=0.9, linestyle="--", label="ideal")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_aspect("equal")
    ax.set_xlabel("nominal level of the central interval (fraction)")
    ax.set_ylabel("hidden cells inside the interval (fraction)")
    ax.legend(fontsize=7, loc="upper left")
    ax.set_title("Interval coverage in cross-validation", fontsize=9)
    return figure
