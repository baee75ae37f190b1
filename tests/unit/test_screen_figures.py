"""Figures of a screen (dopantgap.plots.screening) and the report's screening section.

The screen is of the shipped demo model, whose table is INVENTED (not physics); a
small synthetic screen frame checks the marks element by element.
"""

import math
import re

import numpy as np
import pandas as pd
import pytest
from mendeleev import element as mendeleev_element

from dopantgap import plots, report
from dopantgap.errors import DopantgapError
from dopantgap.hosts import SiteProperties
from dopantgap.plots.screening import PROBABILITY_LABEL, read_cells
from dopantgap.reporting.screening import SCREEN_CAUTION, read_screen, screening_html
from dopantgap.screening import LowestSite, Window, screen
from dopantgap.store import load_model
from dopantgap.table import write_table

CONDITIONS = [Window("E_bind", -math.inf, -1.0), LowestSite("sub_Zn")]


@pytest.fixture(scope="module")
def demo(demo_model_dir):
    surrogate, manifest = load_model(demo_model_dir)
    frame = screen(surrogate, CONDITIONS, temperature=900, n_draws=2000,
                   site_properties=SiteProperties(coordination={("ZnS", "sub_Zn"): 12}))
    return surrogate, manifest, frame


def _synthetic():
    """Four elements in one host and method: computed, predicted, outside, radioactive."""
    rows = []
    for element, probability, verdict, status, outside in (
        ("Fe", 1.0, "yes", "computed", False),
        ("Ti", 0.55, "undecided", "predicted", False),
        ("Li", 0.02, "no", "predicted", True),
        ("Tc", 0.95, "yes", "predicted", False),
    ):
        rows.append({
            "element": element, "host": "ZnS", "method": "hyb", "rank": 0, "probability": probability,
            "verdict": verdict, "P: E_bind <= -0.3": probability,
            "E_bind@sub_Zn": -0.5, "E_bind@sub_Zn lo": -0.5 if status == "computed" else -0.8,
            "E_bind@sub_Zn hi": -0.5 if status == "computed" else -0.2, "E_bind@sub_Zn status": status,
            "outside_domain": outside, "domain_note": "far from the table" if outside else "",
            "caution": "", "decisive_cell": "", "decisive_gain_bits": np.nan, "conditions": "E_bind <= -0.3",
        })
    return pd.DataFrame(rows)


def _texts(figure, gid):
    return [t.get_text() for t in figure.axes[0].texts if t.get_gid() == gid]


def _box(figure, symbol):
    boxes = [p for p in figure.axes[0].patches if p.get_gid() == f"box-{symbol}"]
    assert len(boxes) == 1
    return boxes[0]


# ----------------------------------------------------------------------------- map
def test_map_marks_elements_whose_every_read_cell_is_computed(demo):
    surrogate, _, frame = demo
    values = plots.screen_map_values(frame, "ZnS", "hyb")
    rows = frame[(frame["host"] == "ZnS") & (frame["method"] == "hyb")].set_index("element")
    # computed means: every cell the conditions read is in the user's table itself
    table = surrogate.table_
    in_table = set(map(tuple, table[["element", "host", "site", "method", "quantity"]].to_numpy()))
    labels = [label for group in read_cells(frame).values() for label in group]
    for symbol in values.index:
        own = all(
            (symbol, "ZnS", label.split("@")[1], "hyb", label.split("@")[0]) in in_table for label in labels
        )
        assert bool(values.at[symbol, "computed"]) == own, symbol
    assert values["computed"].any() and not values["computed"].all()
    # a probability read only from computed cells has no sampling noise: exactly 0 or 1
    assert set(rows.loc[values.index[values["computed"]], "probability"]) <= {0.0, 1.0}

    figure = plots.screen_map(frame, "ZnS", "hyb")
    computed = values.index[values["computed"]][0]
    predicted = values.index[~values["computed"] & ~values["outside"]][0]
    assert _box(figure, computed).get_linewidth() > 3 * _box(figure, predicted).get_linewidth()
    assert "all cells computed" in _texts(figure, "legend-entry")
    # the tile prints the probability of the frame
    assert _texts(figure, f"value-{predicted}") == [f"{rows.at[predicted, 'probability']:.2f}"]


def test_map_scale_is_the_probability_and_the_title_states_the_conditions(demo):
    _, _, frame = demo
    figure = plots.screen_map(frame, "ZnS", "gga")
    assert _texts(figure, "scale-label") == [PROBABILITY_LABEL]
    title = " ".join(_texts(figure, "map-title"))
    assert "E_bind <= -1 AND sub_Zn lowest" in title and "ZnS at gga" in title
    assert "INVENTED" not in title
    invented = " ".join(_texts(plots.screen_map(frame, "ZnS", "gga", invented=True), "map-title"))
    assert "INVENTED" in invented
    # one map per screened host and method
    assert [(h, m) for h, m, _ in plots.screen_maps(frame)] == list(
        dict.fromkeys(zip(frame["host"], frame["method"]))
    )


def test_map_marks_radioactive_and_outside_elements():
    frame = _synthetic()
    values = plots.screen_map_values(frame)
    # Tc has no stable isotope (mendeleev's element data, is_radioactive)
    assert mendeleev_element("Tc").is_radioactive and "R" in values.at["Tc", "caution"]
    assert not mendeleev_element("Fe").is_radioactive and values.at["Fe", "caution"] == ""
    figure = plots.screen_map(frame)
    assert _texts(figure, "tag-Tc") == [values.at["Tc", "caution"]]
    outside, predicted = _box(figure, "Li"), _box(figure, "Ti")
    assert outside.get_linestyle() != predicted.get_linestyle()


# ----------------------------------------------------------------------------- ranked chart
def test_ranked_chart_sorts_counts_the_rest_and_draws_thresholds(demo):
    _, _, frame = demo
    figure = plots.ranked_figure(frame, "ZnS", "hyb", top=10, confidence=0.9)
    rows = frame[(frame["host"] == "ZnS") & (frame["method"] == "hyb")]
    probability_axes = figure.axes[0]
    shown = [label.get_text().split(" ")[0] for label in probability_axes.get_yticklabels()]
    expected = rows.sort_values("probability", ascending=False, kind="stable")["element"].head(10).tolist()
    assert shown == expected
    assert figure.n_rest_ == len(rows) - 10
    assert f"{len(rows) - 10} more not shown" in figure.get_supxlabel()
    thresholds = sorted(line.get_xdata()[0] for line in probability_axes.lines if line.get_gid() == "threshold")
    assert thresholds == pytest.approx([0.1, 0.9])
    assert probability_axes.get_xlabel() == PROBABILITY_LABEL
    for ax in figure.axes[1:]:
        assert ax.get_xlabel().endswith("(eV)")


def test_ranked_chart_tells_computed_from_predicted_and_shades_the_window():
    frame = _synthetic()
    figure = plots.ranked_figure(frame, top=3, invented=True)
    cells = figure.axes[1]
    computed = [c for c in cells.collections if c.get_gid() == "computed-E_bind@sub_Zn"]
    predicted = [c for c in cells.collections if c.get_gid() == "predicted-E_bind@sub_Zn"]
    assert len(computed) == 1 and len(predicted) == 1
    # filled against open marks
    assert not np.allclose(computed[0].get_facecolor()[0], predicted[0].get_facecolor()[0])
    assert len(computed[0].get_offsets()) == 1 and len(predicted[0].get_offsets()) == 2
    assert any(p.get_gid() == "window-E_bind@sub_Zn" for p in cells.patches)
    assert "INVENTED" in figure.get_suptitle()
    assert figure.n_rest_ == 1
    # verdict colours: one series per verdict shown
    gids = {c.get_gid() for c in figure.axes[0].collections}
    assert {"verdict-yes", "verdict-undecided"} <= gids


# ----------------------------------------------------------------------------- report
def test_read_screen_reads_back_and_refuses_a_file_that_is_not_a_screen(demo, tmp_path):
    _, _, frame = demo
    path = tmp_path / "screen.csv"
    write_table(frame, path)
    back = read_screen(path)
    pd.testing.assert_frame_equal(
        plots.screen_map_values(back, "ZnS", "hyb"), plots.screen_map_values(frame, "ZnS", "hyb")
    )
    other = tmp_path / "not_a_screen.csv"
    pd.DataFrame({"element": ["Fe"], "host": ["ZnS"], "value": [1.0]}).to_csv(other, index=False)
    with pytest.raises(DopantgapError) as caught:
        read_screen(other)
    message = str(caught.value)
    assert "not_a_screen.csv" in message and "dopantgap screen" in message and "\n" not in message
    assert report.read_screen is read_screen


def test_screening_section_has_both_figures_the_conditions_and_the_caution(demo):
    _, _, frame = demo
    body = screening_html(frame, invented=True)
    assert SCREEN_CAUTION in body and "calculation and experiment" in body
    assert "E_bind &lt;= -1 AND sub_Zn lowest" in body
    settings = list(dict.fromkeys(zip(frame["host"], frame["method"])))
    assert body.count('<figure class="map">') == len(settings)
    assert len(re.findall(r'<img src="data:image/png;base64,', body)) == 2 * len(settings)
    # the notes of the screen, and yes rows before undecided ones in the candidates' table
    assert frame.attrs["notes"][0].split(":")[0] in body
    table = body.split("ZnS at hyb:")[1].split("</table>")[0]
    verdicts = re.findall(r"<td>(yes|undecided)</td>", table)
    assert verdicts and verdicts == sorted(verdicts, key=["yes", "undecided"].index)


@pytest.mark.slow
def test_report_with_a_screen_csv_has_the_section(demo, tmp_path):
    surrogate, manifest, frame = demo
    path = tmp_path / "screen.csv"
    write_table(frame, path)
    page = report.build_report(surrogate, manifest, tmp_path / "report.html", screen=path).read_text()
    assert 'href="#screen"' in page
    section = page.split('<section id="screen">')[1].split("</section>")[0]
    assert SCREEN_CAUTION in section
    assert len(re.findall(r'<img src="data:image/png;base64,', section)) >= 2
