"""The demo, end to end, as the README runs it (``dopantgap demo --out DIR``)."""

import contextlib
import io

import pandas as pd
import pytest

from dopantgap.cli import main
from dopantgap.demo import DEMO_ABSENT
from dopantgap.elements import element_flags
from dopantgap.store import read_manifest

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        status = main(["demo", "--out", str(out)])
    return status, out, printed.getvalue()


def test_demo_writes_every_output_and_labels_the_data_invented(demo_run):
    status, out, text = demo_run
    assert status == 0
    for name in ("invented_table.csv", "filled.csv", "site_preference.csv", "next_hybrid.csv",
                 "report.html", "truth_check.csv", "model/manifest.json", "explained/importance.csv"):
        assert (out / name).is_file(), name
    assert text.startswith("Invented demo table (not DFT data)")
    assert "INVENTED" in (out / "report.html").read_text(encoding="utf-8")
    filled = pd.read_csv(out / "filled.csv")
    assert set(DEMO_ABSENT) <= set(filled["element"])


def test_demo_prints_the_validation_it_stored(demo_run):
    _, out, text = demo_run
    manifest = read_manifest(out / "model")
    pooled = [row for row in manifest["validation"] if row["quantity"] == "all"]
    for row in pooled:
        if row["model"].endswith("baseline"):
            assert f"{row['scenario']:<12} {row['model']:<26} {row['n']:>6} {row['mae']:>13.3f}" in text
    kept = [row for row in pooled if row["chosen"]]
    assert {row["scenario"] for row in kept} == {"new-cell", "new-element", "upgrade"}
    assert text.count("<- kept") == 3


def test_demo_picks_carry_the_safety_notes_of_their_elements(demo_run):
    _, out, text = demo_run
    picks = pd.read_csv(out / "next_hybrid.csv")
    assert len(picks) == 5
    flags = element_flags(list(dict.fromkeys(picks["element"])))
    # the demo's seeded picks include beryllium (IARC Group 1), so the check has teeth
    assert flags["note"].astype(bool).any()
    for symbol, note in flags["note"].items():
        if note:
            assert f"caution: {symbol}: {note}" in text
    assert "do not replace calculation" in text
    # the demo's hybrid level covers a few elements: the list says how it was made robust
    assert "benefits averaged over 5 plausible versions of the model" in text
    assert picks[["host", "site", "quantity"]].drop_duplicates().shape[0] == 5


def test_demo_explained_folder_has_the_figures_explain_writes(demo_run):
    """One CSV per kind and one figure per target group, as 'dopantgap explain' writes,
    with the elements absent from the table broken down (and in the report)."""
    _, out, _text = demo_run
    explained = out / "explained"
    targets = pd.read_csv(explained / "targets.csv")
    assert sorted(path.name for path in explained.glob("*.csv")) == [
        "breakdowns.csv", "importance.csv", "shap_values.csv", "targets.csv"]
    figures = sorted(path.name for path in explained.glob("*.png"))
    assert len(figures) == targets["group"].nunique() and all(name.startswith("explain_") for name in figures)
    assert "explain_site_choice_E_sol_ZnS_hyb.png" in figures
    breakdowns = pd.read_csv(explained / "breakdowns.csv")
    assert set(breakdowns.loc[breakdowns["broken_down"], "element"]) == set(DEMO_ABSENT)
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "Breakdowns of: " + ", ".join(f"<b>{symbol}</b>" for symbol in DEMO_ABSENT) + "." in page


def test_demo_screens_for_vacancy_traps_and_prints_the_candidates(demo_run):
    _, out, text = demo_run
    traps = pd.read_csv(out / "screen_traps.csv")
    assert set(traps["host"]) == {"ZnS"} and set(traps["method"]) == {"hyb"}
    assert "bind a vacancy by 1 eV or more" in text and "invented" in text
    listed = traps[traps["verdict"] != "no"].head(8)
    assert len(listed) >= 3
    for row in listed.itertuples(index=False):
        assert f"  {row.element:<3} P = {row.probability:.2f} {row.verdict:<9}" in text
    # a yes needs the binding window to hold: every yes element's estimate lies in it
    assert (traps.loc[traps["verdict"] == "yes", "E_bind@sub_Zn"] <= -1.0).all()
