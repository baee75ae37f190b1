"""User labels reach figures and the report as written: a ``$`` is a dollar sign.

matplotlib reads text between two dollar signs as mathtext; a site label such as
``$x^$`` is not valid mathtext and used to end the report with a traceback. The
energies here are INVENTED (a formula of the atomic number).
"""

import html
import io

import matplotlib
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

from dopantgap import plots, report
from dopantgap.sites import site_preference
from dopantgap.store import load_model, save_model
from dopantgap.surrogate import Surrogate
from dopantgap.symbols import atomic_number

pytestmark = pytest.mark.slow

LABEL = "$x^$"
ELEMENTS = ("Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Ga")


@pytest.fixture(scope="module")
def model_dir(tmp_path_factory):
    rows = []
    for symbol in ELEMENTS:
        z = atomic_number(symbol)
        rows.append({"element": symbol, "host": "ZnS", "site": "sub_Zn", "method": "gga",
                     "quantity": "E_sol", "value": 1.0 + 0.05 * (z - 22)})  # invented
        rows.append({"element": symbol, "host": "ZnS", "site": LABEL, "method": "gga",
                     "quantity": "E_sol", "value": 1.6 - 0.04 * (z - 22)})  # invented
    folder = tmp_path_factory.mktemp("plain") / "model"
    with threadpool_limits(limits=1):
        save_model(Surrogate(learner="gp", n_folds=3, random_state=0).fit(pd.DataFrame(rows)), folder)
    return folder


def test_report_draws_a_dollar_label_as_written(model_dir, tmp_path):
    surrogate, manifest = load_model(model_dir)
    with threadpool_limits(limits=1):
        path = report.build_report(surrogate, manifest, tmp_path / "report.html", element_symbols=("Sc",))
    page = path.read_text(encoding="utf-8")
    # in the captions and tables, escaped once for HTML (never left raw, never twice)
    assert html.escape(f"ZnS {LABEL}") in page
    assert "&amp;#" not in page and "&amp;amp;" not in page


def test_figures_with_dollar_labels_save_even_outside_the_module(model_dir):
    surrogate, _ = load_model(model_dir)
    preference = site_preference(surrogate, n_samples=200)
    figure = plots.site_preference_map(preference, "ZnS", "gga", "E_sol")
    texts = [text.get_text() for text in figure.findobj(matplotlib.text.Text)]
    assert any(LABEL in text for text in texts)
    # drawn again by a caller's own savefig, with mathtext switched on in their rcParams
    with matplotlib.rc_context({"text.parse_math": True}):
        figure.savefig(io.BytesIO(), format="png")
    map_figure = plots.periodic_map({"Fe": 1.0}, f"E_sol, ZnS {LABEL}")
    assert len(plots.figure_to_data_uri(map_figure, dpi=30)) > 100
