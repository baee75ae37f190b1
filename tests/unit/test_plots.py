"""Tests of the figures (dopantgap.plots) and the progress bar (dopantgap.progress).

Inputs are small synthetic frames of the schemas the figures take; the numbers are
invented, not physics.
"""

import io

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
from matplotlib import colormaps
from matplotlib.patches import FancyBboxPatch
from scipy.stats import norm

from dopantgap import plots
from dopantgap.calibration import ScenarioCalibration
from dopantgap.errors import DopantgapError
from dopantgap.progress import bar

TARGET = "ZnS/sub_Zn/hyb/E_sol"


def _symbol_text(figure, symbol):
    texts = [t for t in figure.axes[0].texts if t.get_gid() == f"symbol-{symbol}"]
    assert len(texts) == 1
    return texts[0]


def _patch(figure, gid):
    patches = [p for p in figure.axes[0].patches if p.get_gid() == gid]
    assert len(patches) == 1
    return patches[0]


def _texts(figure, gid):
    return [t.get_text() for t in figure.axes[0].texts if t.get_gid() == gid]


def _gid_prefix(figure, prefix):
    return [p for p in figure.axes[0].patches if str(p.get_gid()).startswith(prefix)]


# ----------------------------------------------------------------------------- periodic map
@pytest.mark.parametrize("symbol", ["H", "He", "Na", "Fe", "Tc", "Br", "Au", "Bi", "La", "Og"])
def test_table_position_is_period_and_group_of_mendeleev(symbol):
    # reference: mendeleev package element data (L. M. Mentel, "mendeleev - a Python
    # resource for properties of chemical elements, ions and isotopes", 2014-), fields
    # period and group_id
    from mendeleev import element

    reference = element(symbol)
    assert plots.table_position(symbol) == (float(reference.period), float(reference.group_id))


def test_f_block_sits_in_two_rows_below_the_main_table():
    from mendeleev import element

    lanthanides = [plots.table_position(s) for s in ("Ce", "Pr", "Nd", "Lu")]
    actinides = [plots.table_position(s) for s in ("Th", "Pa", "U", "Lr")]
    assert element("Ce").block == "f" and element("Th").block == "f"
    assert len({row for row, _ in lanthanides}) == 1 and lanthanides[0][0] > 7
    assert len({row for row, _ in actinides}) == 1 and actinides[0][0] == lanthanides[0][0] + 1
    # consecutive atomic numbers in consecutive columns, Ce under Th
    assert [column for _, column in lanthanides] == [4, 5, 6, 17]
    assert [column for _, column in actinides] == [4, 5, 6, 17]


def test_periodic_map_prints_each_symbol_in_its_box():
    values = {"Fe": 1.0, "Ti": 2.0, "Na": -0.5, "Ce": 0.3}
    figure = plots.periodic_map(values, "E_sol", computed={"Fe"})
    fe_x, fe_y = _symbol_text(figure, "Fe").get_position()
    box = _patch(figure, "box-Fe")
    assert box.get_x() < fe_x < box.get_x() + box.get_width()
    assert box.get_y() < fe_y < box.get_y() + box.get_height()
    assert round(fe_x) == 8 and round(fe_y) == 4
    # every element has a tile (Ce puts the f-block rows on the map), those without a
    # value as an outline only: no fill at all
    boxes = _gid_prefix(figure, "box-")
    assert len(boxes) == 118
    assert _patch(figure, "box-Cu").get_facecolor()[3] == 0.0
    assert _patch(figure, "box-Fe").get_facecolor()[3] == 1.0


def test_f_block_rows_are_drawn_only_when_an_f_element_has_a_value():
    without = plots.periodic_map({"Fe": 1.0, "Ti": 2.0}, "E_sol")
    with_f = plots.periodic_map({"Fe": 1.0, "Nd": 2.0}, "E_sol")
    assert len(_gid_prefix(without, "box-")) == 118 - 28
    assert len(_gid_prefix(with_f, "box-")) == 118
    # the figure grows by the two rows, keeping its width
    assert with_f.get_figheight() > without.get_figheight()
    assert with_f.get_figwidth() == without.get_figwidth() == plots.maps.MAP_WIDTH_INCHES


def test_computed_and_predicted_marks_differ():
    figure = plots.periodic_map({"Fe": 1.0, "Ti": 1.0}, "E_sol", computed={"Fe": True, "Ti": False})
    computed, predicted = _patch(figure, "box-Fe"), _patch(figure, "box-Ti")
    # told apart by the frame's width alone, so a greyscale print keeps them apart
    assert computed.get_linewidth() > 3 * predicted.get_linewidth()
    legend = _texts(figure, "legend-entry")
    for mark in ("computed", "predicted", "outside the domain", "caution (letters)", "not in the table"):
        assert mark in legend


def test_outside_the_domain_has_a_dashed_frame_of_its_own():
    figure = plots.periodic_map({"Fe": 1.0, "Ti": 1.0, "V": 1.0}, "E_sol", computed={"Fe"}, outside={"Ti", "Fe"})
    computed, outside, predicted = (_patch(figure, f"box-{s}") for s in ("Fe", "Ti", "V"))
    dashed = outside.get_linestyle()
    assert dashed != computed.get_linestyle() and dashed != predicted.get_linestyle()
    # a computed value is the user's own: never marked as outside
    assert computed.get_linestyle() == predicted.get_linestyle()


def test_uncertainty_is_a_bar_and_text_on_predicted_tiles_only():
    values = {"Fe": 1.0, "Ti": 2.0, "V": 3.0}
    spread = {"Fe": 0.0, "Ti": 0.1, "V": 0.35}
    figure = plots.periodic_map(values, "E_sol", computed={"Fe"}, spread=spread)
    # largest std 0.35 -> a full bar stands for 0.5 eV (1, 2, 2.5 or 5 x 10^k)
    assert figure.spread_scale_ == pytest.approx(0.5)
    ti, v = _patch(figure, "bar-Ti"), _patch(figure, "bar-V")
    full = 0.76  # the bar's track, in tile units
    assert ti.get_width() == pytest.approx(full * 0.1 / 0.5)
    assert v.get_width() == pytest.approx(full * 0.35 / 0.5)
    assert _texts(figure, "spread-Ti") == ["±0.10"] and _texts(figure, "spread-V") == ["±0.35"]
    # the computed Fe carries neither
    assert _gid_prefix(figure, "bar-Fe") == [] and _texts(figure, "spread-Fe") == []
    assert any("full = 0.5 eV" in text for text in _texts(figure, "legend-entry"))
    # without spread, no bar at all
    assert _gid_prefix(plots.periodic_map(values, "E_sol"), "bar-") == []


@pytest.mark.parametrize("largest, scale", [(0.35, 0.5), (0.2, 0.2), (0.07, 0.1), (1.3, 2.0), (0.021, 0.025)])
def test_bar_scale_is_a_round_number_at_or_above_the_largest_std(largest, scale):
    assert plots.maps._nice_ceiling(largest) == pytest.approx(scale)


def test_colour_scale_is_a_strip_below_the_table_with_the_unit():
    figure = plots.periodic_map({"Fe": 1.0, "Ti": 2.0}, "E_sol", unit="eV")
    assert any("(eV)" in label for label in _texts(figure, "scale-label"))
    strips = [image for image in figure.axes[0].images if image.get_gid() == "scale-strip"]
    assert len(strips) == 1
    _left, _right, bottom, top = strips[0].get_extent()
    # below period 7's tiles (row 7 ends at 7.46), not in the gap above the transition metals
    assert min(bottom, top) > 7.0 + plots.maps._HALF
    # the figure holds no colour bar axes: one axes only
    assert len(figure.axes) == 1 and figure.axes[0].child_axes == []


def test_tile_text_is_large_enough_and_stays_inside_its_tile():
    """Every tile text is at least TILE_TEXT_POINTS, which is 10 px or more on a map
    shown 1300 px wide (the report's maps at 1400 px: 13 in x 100 dpi; 1 pt = 1/72 in,
    CSS 2.1 section 4.3.2), and the widest values still fit inside their tile."""
    values = {"Fe": -10.25, "Ti": 2.0, "Nd": 123.45, "Cs": -0.5}
    spread = {"Ti": 0.35, "Nd": 10.5, "Cs": 0.05}
    figure = plots.periodic_map(values, "E_sol", spread=spread, tags={"Fe": "RT", "Nd": "X"})
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    prefixes = ("symbol-", "value-", "spread-", "tag-")
    tile_texts = [t for t in figure.axes[0].texts if str(t.get_gid()).startswith(prefixes)]
    filled = {t.get_gid().split("-", 1)[1] for t in tile_texts if t.get_gid().startswith("value-")}
    assert filled == set(values)
    for text in tile_texts:
        assert text.get_fontsize() >= plots.maps.TILE_TEXT_POINTS
        symbol = text.get_gid().split("-", 1)[1]
        if symbol in values:
            tile = _patch(figure, f"box-{symbol}").get_window_extent(renderer)
            box = text.get_window_extent(renderer)
            assert tile.x0 <= box.x0 and box.x1 <= tile.x1 and tile.y0 <= box.y0 and box.y1 <= tile.y1, text
    assert figure.tile_text_points_ == plots.maps.TILE_TEXT_POINTS
    shown_px = plots.maps.TILE_TEXT_POINTS / 72 * 1300 / figure.get_figwidth()
    assert shown_px >= 10


@pytest.mark.parametrize("name", [plots.VALUE_CMAP, plots.SPREAD_CMAP])
def test_colour_maps_read_in_grey(name):
    # relative luminance as defined in W3C, "Web Content Accessibility Guidelines (WCAG)
    # 2.0", 2008: the ends differ strongly and the order is kept (monotone), so a
    # greyscale print keeps low and high apart
    colour_map = colormaps[name]
    samples = [plots.luminance(colour_map(x)) for x in np.linspace(0, 1, 21)]
    assert samples[-1] - samples[0] > 0.5
    assert np.all(np.diff(samples) > 0)


def test_luminance_of_black_and_white():
    # WCAG 2.0 relative luminance: 0 for black, 1 for white, 0.2126 for pure red
    assert plots.luminance("black") == pytest.approx(0.0)
    assert plots.luminance("white") == pytest.approx(1.0)
    assert plots.luminance("#ff0000") == pytest.approx(0.2126)


def test_spread_map_and_column_values():
    filled = pd.DataFrame({
        "element": ["Fe", "Ti", "Fe"], "host": ["ZnS"] * 3, "site": ["sub_Zn"] * 3,
        "method": ["hyb", "hyb", "gga"], "quantity": ["E_sol"] * 3, "value": [1.0, 2.0, 3.0],
        "std": [0.0, 0.2, 0.0], "status": ["computed", "predicted", "computed"],
    })
    column = plots.column_values(filled, "ZnS", "sub_Zn", "hyb", "E_sol")
    assert list(column.index) == ["Fe", "Ti"]
    assert column.loc["Ti", "std"] == 0.2 and bool(column.loc["Fe", "computed"])
    assert not column["outside"].any()  # no outside_domain column: nothing flagged
    flagged = plots.column_values(filled.assign(outside_domain=[True, True, False]), "ZnS", "sub_Zn", "hyb", "E_sol")
    # a computed cell is never reported outside the domain
    assert flagged["outside"].tolist() == [False, True]
    figure = plots.spread_map(column, "std")
    assert _patch(figure, "box-Fe").get_linewidth() > _patch(figure, "box-Ti").get_linewidth()
    with pytest.raises(DopantgapError, match="status"):
        plots.column_values(filled.drop(columns="status"), "ZnS", "sub_Zn", "hyb", "E_sol")


# ----------------------------------------------------------------------------- site map
def _preference():
    rows = []
    for element, best, p in (("Fe", "sub_Zn", 0.95), ("Ti", "int_hex", 0.55), ("Na", "sub_S", 0.8)):
        for rank, site in enumerate([best] + [s for s in ("sub_Zn", "sub_S", "int_hex") if s != best], 1):
            rows.append({"element": element, "host": "ZnS", "method": "gga", "quantity": "E_sol",
                         "site": site, "p_lowest": p if rank == 1 else (1 - p) / 2, "rank": rank,
                         "value": 1.0, "std": 0.1, "status": "predicted"})
    return pd.DataFrame(rows)


def test_site_map_tells_sites_apart_by_hatch_and_strength():
    figure = plots.site_preference_map(_preference(), "ZnS", "gga", "E_sol")
    fe, ti, na = (_patch(figure, f"box-{s}") for s in ("Fe", "Ti", "Na"))
    # three different sites: three different hatches, readable without colour
    assert len({fe.get_hatch(), ti.get_hatch(), na.get_hatch()}) == 3
    texts = [t.get_text() for t in figure.axes[0].texts]
    assert "A 0.95" in texts and "C 0.55" in texts
    with pytest.raises(DopantgapError, match="No site preference"):
        plots.site_preference_map(_preference(), "C", "gga", "E_sol")


def test_site_map_shading_follows_probability():
    preference = _preference()
    preference.loc[(preference["element"] == "Ti") & (preference["rank"] == 1), "site"] = "sub_Zn"
    figure = plots.site_preference_map(preference, "ZnS", "gga", "E_sol")
    sure, unsure = _patch(figure, "box-Fe"), _patch(figure, "box-Ti")
    assert plots.luminance(unsure.get_facecolor()) > plots.luminance(sure.get_facecolor())
    # the bar along the tile's foot is the probability too (full track 0.76 tile units)
    assert _patch(figure, "bar-Fe").get_width() == pytest.approx(0.76 * 0.95)
    assert _patch(figure, "bar-Ti").get_width() == pytest.approx(0.76 * 0.55)
    legend = _texts(figure, "legend-entry")
    assert "A = sub_Zn" in legend and "not in the table" in legend


def test_category_palette_has_distinct_hatches():
    assert len(set(plots.CATEGORY_HATCHES)) == len(plots.CATEGORY_HATCHES) == len(plots.CATEGORY_COLOURS)


# ----------------------------------------------------------------------------- validation
class _ScaleTwo:
    def std_scale(self, scenario, quantity=None):
        return 2.0


def _residuals(n=300, seed=0):
    rng = np.random.default_rng(seed)
    truth = rng.normal(2.0, 1.0, n)
    raw_std = rng.uniform(0.05, 0.2, n)
    z = rng.standard_normal(n)
    return pd.DataFrame({
        "element": ["Fe"] * n, "host": ["ZnS"] * n, "site": ["sub_Zn"] * n, "method": ["gga"] * n,
        "quantity": ["E_sol"] * n, "value": truth, "mean": truth - z * raw_std, "raw_std": raw_std,
        "scenario": np.array(["new-cell", "new-element", "upgrade"])[np.arange(n) % 3],
        "error": z * raw_std, "z": z,
    })


def test_parity_figure_uses_calibrated_error_bars():
    residuals = _residuals(30)
    figure = plots.parity_figure(residuals, scenario="new-cell", calibration=_ScaleTwo())
    ax = figure.axes[0]
    assert ax.get_xlabel() == "computed (eV)" and "(eV)" in ax.get_ylabel()
    segments = ax.containers[0].lines[2][0].get_segments()
    half_lengths = np.array([abs(s[1][1] - s[0][1]) / 2 for s in segments])
    expected = 2.0 * residuals.loc[residuals["scenario"] == "new-cell", "raw_std"].to_numpy()
    np.testing.assert_allclose(half_lengths, expected)
    # an explicit std column is drawn as given
    with_std = residuals.assign(std=0.5)
    ax = plots.parity_figure(with_std, scenario="upgrade").axes[0]
    half_lengths = [abs(s[1][1] - s[0][1]) / 2 for s in ax.containers[0].lines[2][0].get_segments()]
    np.testing.assert_allclose(half_lengths, 0.5)


def test_parity_figure_has_one_series_per_scenario_and_the_diagonal():
    ax = plots.parity_figure(_residuals(), calibration=_ScaleTwo()).axes[0]
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert sum(label.startswith(("new-cell", "new-element", "upgrade")) for label in labels) == 3
    assert "predicted = computed" in labels


def test_calibration_figure_raw_curve_follows_the_gaussian():
    # Standard-normal standardised errors: the raw Gaussian interval mean +/- z_L std
    # holds a share L of them (normal quantiles from scipy.stats.norm). Tolerance: 4
    # binomial standard errors of a share from 100 cells, sqrt(0.25 / 100) = 0.05.
    residuals = _residuals(300, seed=3)
    calibration = ScenarioCalibration(
        {(s, "E_sol"): part["z"].to_numpy() for s, part in residuals.groupby("scenario")}
    )
    levels = [0.2, 0.5, 0.8, 0.9]
    figure = plots.calibration_figure(residuals, calibration, levels=levels)
    ax = figure.axes[0]
    assert "(fraction)" in ax.get_xlabel() and "(fraction)" in ax.get_ylabel()
    for line in ax.get_lines():
        label = line.get_label()
        if label.endswith("raw Gaussian"):
            np.testing.assert_allclose(line.get_ydata(), levels, atol=4 * 0.05)
        elif "calibrated" in label:
            # the conformal width holds at least its level in-sample
            assert np.all(np.asarray(line.get_ydata()) >= np.asarray(levels) - 1e-9)
    raw_share = np.mean(np.abs(residuals["z"]) <= norm.ppf(0.5 + 0.9 / 2))
    assert 0.8 < raw_share < 1.0


def _grouped_residuals(n_hosts=3, seed=4):
    """Invented held-out cells: two quantities, ``n_hosts`` hosts, two levels, errors of
    known size and one planted outlier (Cs in the first host, 3 eV off)."""
    rng = np.random.default_rng(seed)
    hosts = [f"H{i}O" for i in range(n_hosts)]
    rows = []
    for index in range(12 * n_hosts):
        truth = float(rng.normal(1.0, 2.0))
        rows.append({
            "element": ["Li", "Na", "K", "Rb"][index % 4], "host": hosts[index % n_hosts],
            "site": "sub_O" if index % 2 else "int_a", "method": ("gga", "hyb")[index % 2 if index % 3 else 0],
            "quantity": ("E_sol", "E_bind")[index % 2], "value": truth,
            "mean": truth + float(rng.normal(0.0, 0.1)), "raw_std": 0.1, "scenario": "new-element",
        })
    rows.append({"element": "Cs", "host": hosts[0], "site": "int_a", "method": "hyb", "quantity": "E_sol",
                 "value": 0.5, "mean": 3.5, "raw_std": 0.1, "scenario": "new-element"})
    return pd.DataFrame(rows)


def _legend(ax):
    return [t.get_text() for t in ax.get_legend().get_texts()]


def test_parity_figure_has_a_panel_per_grouping_with_its_mean_error():
    """The mean |error| in titles and legends is checked against scikit-learn's
    ``sklearn.metrics.mean_absolute_error`` (Pedregosa et al. 2011, JMLR 12, 2825)."""
    from sklearn.metrics import mean_absolute_error

    residuals = _grouped_residuals()
    figure = plots.parity_figure(residuals, scenario="new-element", levels=["gga", "hyb"])
    titles = [ax.get_title() for ax in figure.axes]
    assert [t.split(":")[0] for t in titles] == ["By quantity", "By host", "By level"]
    overall = mean_absolute_error(residuals["value"], residuals["mean"])
    assert all(f"{overall:.3f} eV over {len(residuals)} cells" in t for t in titles)
    level_panel = figure.axes[2]
    labels = _legend(level_panel)
    assert "predicted = computed" in labels
    # the legend of the level panel lists the levels cheapest first, each with its error
    series = [label for label in labels if label.startswith(("gga", "hyb"))]
    assert [label.split(":")[0] for label in series] == ["gga", "hyb"]
    for label in series:
        rows = residuals[residuals["method"] == label.split(":")[0]]
        assert f"mean |error| {mean_absolute_error(rows['value'], rows['mean']):.3f} eV" in label


def test_parity_figure_groups_differ_in_colour_and_marker_and_pool_beyond_the_palette():
    residuals = _grouped_residuals(n_hosts=9)
    host_panel = plots.parity_figure(residuals, scenario="new-element").axes[1]
    lines = [container.lines[0] for container in host_panel.containers]
    assert len(lines) == len(plots.CATEGORY_COLOURS)  # six hosts and "other"
    shown = lines[:-1]
    assert len({line.get_marker() for line in shown}) == len(shown)
    assert len({matplotlib.colors.to_hex(line.get_color()) for line in shown}) == len(shown)
    assert {matplotlib.colors.to_hex(line.get_color()).upper() for line in shown} <= set(plots.CATEGORY_COLOURS)
    assert any(label.startswith("other (3 hosts)") for label in _legend(host_panel))
    # every cell is drawn once per panel
    assert sum(len(line.get_xdata()) for line in lines) == len(residuals)


def test_parity_figure_labels_the_worst_cells():
    residuals = _grouped_residuals()
    figure = plots.parity_figure(residuals, scenario="new-element", n_labelled=3)
    for ax in figure.axes:
        labelled = sorted((t for t in ax.texts if str(t.get_gid()).startswith("outlier-")), key=lambda t: t.get_gid())
        assert len(labelled) == 3
        assert labelled[0].get_text().startswith("1. Cs/H0O/int_a")
        assert labelled[0].xy == (0.5, 3.5)
    without = plots.parity_figure(residuals, scenario="new-element", n_labelled=0)
    assert not [t for ax in without.axes for t in ax.texts if str(t.get_gid()).startswith("outlier-")]


# ----------------------------------------------------------------------------- rounds
def test_learning_curve_figure_draws_medians_over_seeds():
    curves = pd.DataFrame([
        {"strategy": strategy, "seed": seed, "round": r, "cost_spent": 10.0 * r,
         "error": 0.4 / (1 + r) + (0.05 if strategy == "random" else 0.0) + 0.01 * seed,
         "decided": r + seed}
        for strategy in ("random", "spread") for seed in range(3) for r in range(4)
    ])
    figure = plots.learning_curve_figure(curves)
    error_axes = figure.axes[0]
    assert "(eV)" in error_axes.get_ylabel() and "cost spent" in error_axes.get_xlabel()
    lines = {line.get_label().split(" ")[0]: line for line in error_axes.get_lines()}
    expected = curves[curves["strategy"] == "spread"].groupby("round")["error"].median().to_numpy()
    np.testing.assert_allclose(lines["spread"].get_ydata(), expected)
    assert "floor" not in lines
    # the replay's floor, when given, is a level line at that error
    floored = plots.learning_curve_figure(curves, floor=0.05)
    drawn = {line.get_label().split(" ")[0]: line for line in floored.axes[0].get_lines()}
    np.testing.assert_allclose(drawn["floor"].get_ydata(), [0.05, 0.05])
    with pytest.raises(DopantgapError, match="cost_spent"):
        plots.learning_curve_figure(curves.drop(columns="cost_spent"))


def test_history_figure_plots_uncertainty_against_cost_and_whole_rounds():
    history = pd.DataFrame({"round": [0, 1, 2], "mean_std": [0.3, np.nan, 0.2],
                            "decided": [1, 2, 4], "cost_spent": [0, 5, 39]})
    figure = plots.history_figure(history, cost_unit="calculations")
    figure.canvas.draw()
    std_axes, decided_axes = figure.axes
    assert std_axes.get_ylabel() == "mean predicted std of missing cells (eV)"
    assert std_axes.get_xlabel() == "cost spent (calculations)"
    # uncertainty is drawn against the cost spent, not against the round number
    np.testing.assert_allclose(std_axes.get_lines()[0].get_xdata(), [0, 5, 39])
    np.testing.assert_allclose(std_axes.get_lines()[0].get_ydata(), [0.3, np.nan, 0.2])
    np.testing.assert_allclose(decided_axes.get_lines()[0].get_ydata(), [1, 2, 4])
    shown_ticks = [tick for tick in decided_axes.get_xticks() if 0 <= tick <= 2]
    assert shown_ticks and all(float(tick).is_integer() for tick in shown_ticks)
    assert {text.get_text() for text in std_axes.texts} == {"round 0", "round 2"}


# ----------------------------------------------------------------------------- explanations
def _shap_frames():
    rng = np.random.default_rng(2)
    features = ["size_misfit", "electronegativity_difference", "covalent_radius", "period"]
    rows = [
        {"target": TARGET, "element": e, "feature": f, "feature_value": rng.normal(), "shap": rng.normal(0, 0.2)}
        for e in ("Fe", "Ti", "V", "Cu", "Zn") for f in features
    ]
    shap_values = pd.DataFrame(rows)
    importance = (shap_values.assign(importance=shap_values["shap"].abs())
                  .groupby(["target", "feature"], as_index=False)["importance"].mean())
    sums = shap_values.groupby(["target", "element"], as_index=False)["shap"].sum()
    base_values = sums.assign(base_value=1.5, prediction=1.5 + sums["shap"]).drop(columns="shap")
    return importance, shap_values, base_values


def test_importance_figure_orders_bars_by_importance():
    importance, shap_values, _ = _shap_frames()
    figure = plots.importance_figure(importance, shap_values, TARGET)
    bar_axes = figure.axes[0]
    assert "(eV)" in bar_axes.get_xlabel() and "(eV)" in figure.axes[1].get_xlabel()
    widths = [patch.get_width() for patch in bar_axes.patches]
    tops = [patch.get_y() for patch in bar_axes.patches]
    # the top bar (highest y) is the most important
    assert widths[int(np.argmax(tops))] == pytest.approx(importance["importance"].max())
    with pytest.raises(DopantgapError, match="no rows for target"):
        plots.importance_figure(importance, shap_values, "other")


@pytest.mark.parametrize("top_n", [2, 10])
def test_breakdown_ends_at_the_prediction(top_n):
    # SHAP's local accuracy (Lundberg & Lee 2017, "A unified approach to interpreting
    # model predictions", NeurIPS, property 1, eq. 5): base value + sum of the SHAP
    # values = the prediction; the steps, with the rest lumped, must end there
    _, shap_values, base_values = _shap_frames()
    figure = plots.breakdown_figure(shap_values, base_values, TARGET, "Fe", top_n=top_n)
    expected = float(base_values.loc[base_values["element"] == "Fe", "prediction"].iat[0])
    assert figure.breakdown_end_ == pytest.approx(expected)
    ax = figure.axes[0]
    assert "(eV)" in ax.get_xlabel()
    assert len(ax.patches) == (top_n if top_n < 4 else 4) + (1 if top_n < 4 else 0)
    ups = [p for p in ax.patches if p.get_gid() == "step-up"]
    downs = [p for p in ax.patches if p.get_gid() == "step-down"]
    assert all(p.get_hatch() is None for p in ups) and all(p.get_hatch() for p in downs)


# ----------------------------------------------------------------------------- output
def test_save_png_writes_a_valid_png_atomically(tmp_path):
    target = tmp_path / "figures" / "map.png"
    size = plots.save_png(plots.periodic_map({"Fe": 1.0}, "E_sol"), target, dpi=40)
    data = target.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) == size
    image = matplotlib.image.imread(io.BytesIO(data), format="png")
    assert image.ndim == 3 and image.shape[0] > 100 and np.std(image[..., :3]) > 0.01
    # nothing temporary left beside it
    assert [p.name for p in target.parent.iterdir()] == ["map.png"]
    # the same figure gives the same bytes (no time stamp)
    plots.save_png(plots.periodic_map({"Fe": 1.0}, "E_sol"), tmp_path / "again.png", dpi=40)
    assert (tmp_path / "again.png").read_bytes() == data


def test_save_png_leaves_the_old_file_when_drawing_fails(tmp_path):
    target = tmp_path / "keep.png"
    target.write_bytes(b"old")
    figure = plots.periodic_map({"Fe": 1.0}, "E_sol")
    with pytest.raises(ValueError):
        plots.save_png(figure, target, dpi=-5)
    assert target.read_bytes() == b"old"
    assert [p.name for p in tmp_path.iterdir()] == ["keep.png"]


def test_figure_to_data_uri():
    uri = plots.figure_to_data_uri(plots.history_figure(
        pd.DataFrame({"round": [0, 1], "mean_std": [0.2, 0.1], "decided": [0, 1], "cost_spent": [0, 1]})
    ), dpi=30)
    assert uri.startswith("data:image/png;base64,iVBORw0KGgo")


def test_periodic_map_tiles_are_of_one_size():
    figure = plots.periodic_map({"Fe": 1.0}, "E_sol")
    boxes = [p for p in _gid_prefix(figure, "box-") if isinstance(p, FancyBboxPatch)]
    assert len(boxes) == len(_gid_prefix(figure, "box-"))
    assert {(round(p.get_width(), 6), round(p.get_height(), 6)) for p in boxes} == {(0.92, 0.92)}


# ----------------------------------------------------------------------------- progress
class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_bar_draws_only_on_a_terminal():
    terminal, pipe = _Terminal(), io.StringIO()
    with bar(4, "work", stream=terminal) as shown, bar(4, "work", stream=pipe) as hidden:
        for _ in range(4):
            shown.update()
            hidden(1)  # usable as a plain callback
    assert shown.done == hidden.done == 4
    assert "work" in terminal.getvalue() and "4/4" in terminal.getvalue()
    assert pipe.getvalue() == ""


def test_progress_bar_quiet_draws_nothing():
    terminal = _Terminal()
    with bar(2, "work", quiet=True, stream=terminal) as progress:
        progress.update(5)
    assert progress.done == 2  # never past the total
    assert terminal.getvalue() == ""
