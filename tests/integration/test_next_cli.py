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


def test_next_past_the_joint_cap_weighs_groups_of_hosts_and_says_so(tmp_path, capsys, monkeypatch, demo_model_dir):
    """Past the joint covariance's cap the command still answers (memory bounded by
    groups of hosts, not by a refusal) and says that benefits count a group's cells only;
    below the cap it says nothing of groups."""
    import functools

    import dopantgap.joint
    import dopantgap.picker

    monkeypatch.setattr(dopantgap.picker, "missing_joints",
                        functools.partial(dopantgap.joint.missing_joints, max_cells=300))
    out = tmp_path / "next.csv"
    assert main(["next", str(demo_model_dir), "--out", str(out), "--count", "4"]) == 0
    text = capsys.readouterr().out
    assert "too many missing cells to weigh in one joint" in text and "its own group only" in text
    assert len(pd.read_csv(out)) == 4
    monkeypatch.undo()
    assert main(["next", str(demo_model_dir), "--out", str(out), "--host", "C", "--method", "hyb",
                 "--count", "3"]) == 0
    assert "one joint" not in capsys.readouterr().out
    assert len(pd.read_csv(out)) == 3
