"""`dopantgap next` driven as a user would, on the shipped demo model (invented data)."""

import pandas as pd
import pytest

from dopantgap.cli import main
from dopantgap.store import load_model
from dopantgap.table import KEY_COLUMNS

pytestmark = pytest.mark.slow

@pytest.fixture(scope="module")
def computed(demo_model_dir):
    surrogate, _manifest = load_model(str(demo_model_dir))
    return set(surrogate.table_[list(KEY_COLUMNS)].itertuples(index=False, name=None))


def test_next_writes_ranked_missing_cells(tmp_path, capsys, computed, demo_model_dir):
    out = tmp_path / "picks" / "next.csv"
    status = main(["next", str(demo_model_dir), "--count", "6", "--method", "hyb", "--cost", "gga=1,hyb=30", "--out", str(out)])
    assert status == 0
    printed = capsys.readouterr().out
    assert "do not replace calculation" in printed
    assert "6 picks for goal table" in printed
    # the demo's hybrid level covers a few elements: the list says how it was made robust
    assert "benefits averaged over 5 plausible versions of the model and each column picked once" in printed
    picks = pd.read_csv(out, keep_default_na=False)
    assert list(picks.columns[:11]) == [
        "element", "host", "site", "method", "quantity", "rank", "value", "std", "cost", "benefit", "reason",
    ]
    assert list(picks["rank"]) == [1, 2, 3, 4, 5, 6]
    assert (picks["method"] == "hyb").all() and (picks["cost"] == 30).all()
    keys = set(picks[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    assert len(keys) == 6 and not keys & computed
    columns = list(picks[["host", "site", "method", "quantity"]].itertuples(index=False, name=None))
    assert len(set(columns)) == 6


def test_next_window_implies_its_goal_and_cautions_new_elements(tmp_path, capsys, computed, demo_model_dir):
    out = tmp_path / "next.csv"
    status = main(
        ["next", str(demo_model_dir), "--count", "4", "--window", "E_bind:-1.2:-0.4", "--elements", "pu,Hg", "--out", str(out)]
    )
    assert status == 0
    printed = capsys.readouterr().out
    assert "picks for goal window" in printed
    assert "caution: Pu: radioactive" in printed
    assert "caution: Hg: toxic" in printed
    assert "Pu lies outside the training data (in the f block" in printed
    picks = pd.read_csv(out, keep_default_na=False)
    assert (picks["quantity"] == "E_bind").all() and (picks["benefit_unit"] == "bits").all()


def test_next_site_goal(tmp_path, capsys, demo_model_dir):
    out = tmp_path / "next.csv"
    assert main(["next", str(demo_model_dir), "--count", "3", "--goal", "site", "--seed", "2", "--quiet", "--out", str(out)]) == 0
    assert capsys.readouterr().out == ""
    picks = pd.read_csv(out, keep_default_na=False)
    assert len(picks) == 3 and picks["reason"].str.contains("site preference").all()


@pytest.mark.parametrize(
    "options, named",
    [
        (["--cost", "gga:1"], "--cost"),
        (["--cost", "dft=2"], "--cost"),
        (["--count", "0"], "--count"),
        (["--count", "many"], "--count"),
        (["--goal", "best"], "--goal"),
        (["--goal", "window"], "--window"),
        (["--window", "E_bind:-0.4:-1.2"], "--window"),
        (["--window", "E_foo:0:1"], "--window"),
        (["--goal", "table", "--window", "E_bind:-1:0"], "--window"),
        (["--method", "lda"], "--method"),
        (["--elements", "Ti,Xq"], "--elements"),
    ],
)
def test_next_bad_option_exits_2_with_one_line(tmp_path, capsys, options, named, demo_model_dir):
    out = tmp_path / "next.csv"
    assert main(["next", str(demo_model_dir), "--out", str(out)] + options) == 2
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and named in lines[0], captured.err
    assert lines[0].startswith("dopantgap next: ")
    assert not out.exists()


def test_next_help_documents_the_goals(capsys):
    with pytest.raises(SystemExit):
        main(["next", "--help"])
    text = capsys.readouterr().out
    for word in ("table", "site", "window", "Rasmussen", "--cost", "bits"):
        assert word in text


def test_next_with_too_many_candidates_says_how_to_narrow_them(tmp_path, capsys, monkeypatch, demo_model_dir):
    """Past the joint covariance's cap the command stops before any large array with one
    line naming both ways to narrow the list; with --host the same model answers."""
    import dopantgap.joint

    monkeypatch.setattr(dopantgap.joint, "_MAX_BLOCK_CELLS", 300)
    out = tmp_path / "next.csv"
    assert main(["next", str(demo_model_dir), "--out", str(out)]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and "too many to rank jointly" in lines[0]
    assert "--method" in lines[0] and "--host" in lines[0]
    assert not out.exists()
    assert main(["next", str(demo_model_dir), "--out", str(out), "--host", "C", "--method", "hyb",
                 "--count", "3", "--quiet"]) == 0
    assert len(pd.read_csv(out)) == 3
