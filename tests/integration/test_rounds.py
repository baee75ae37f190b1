"""Rounds: merging results with provenance, the rounds folder, the history."""

import json
import struct

import numpy as np
import pandas as pd
import pytest

from dopantgap.cli import main
from dopantgap.demo import demo_table, demo_world
from dopantgap.errors import DopantgapError, TableError
from dopantgap.rounds import (
    add_results,
    decided_preferences,
    history_text,
    record_round,
    round_folders,
    rounds_history,
)
from dopantgap.store import load_model
from dopantgap.table import KEY_COLUMNS, read_table, write_table

HEADER = "element,host,site,method,quantity,value,note\n"
# values whose shortest text is long or unusual, to catch any rounding on the way
AWKWARD = [0.1 + 0.2, 1e-17, -0.0, 123.45678901234568, -999.9999999999999, 5e-324]


def _bits(value):
    return struct.pack("<d", float(value))


@pytest.fixture
def files(tmp_path):
    rows = [
        f"Fe,ZnS,sub_Zn,gga,E_sol,{value!r},\"run {i}, ok\"" for i, value in enumerate(AWKWARD)
    ]
    rows[1] = rows[1].replace("Fe,", "Cu,", 1)
    rows[2] = rows[2].replace("sub_Zn", "sub_S", 1)
    rows[3] = rows[3].replace(",gga,", ",hyb,", 1)
    rows[4] = rows[4].replace("ZnS,sub_Zn", "C,sub_C", 1)
    rows[5] = rows[5].replace("Fe,", "Ti,", 1)
    table_path = tmp_path / "table.csv"
    table_path.write_text(HEADER + "\n".join(rows) + "\n", encoding="utf-8")
    results_path = tmp_path / "results.csv"
    results_path.write_text(
        "element,host,site,method,quantity,value,run_dir\n"
        "Cu,ZnS,sub_Zn,hyb,E_sol,1.25,/runs/a\n"
        f"Fe,ZnS,sub_Zn,gga,E_sol,{AWKWARD[0]!r},/runs/b\n"
        "Ti,C,sub_C,hyb,E_sol,0.5,/runs/c\n",
        encoding="utf-8",
    )
    return table_path, results_path


def test_add_keeps_old_values_bit_for_bit_and_every_extra_column(files, tmp_path):
    table_path, results_path = files
    out = tmp_path / "new.csv"
    assert main(["add", str(table_path), str(results_path), "--out", str(out), "--quiet"]) == 0
    before = read_table(table_path)
    after = read_table(out)
    old = after.iloc[: len(before)]
    for column in KEY_COLUMNS + ("note",):
        assert old[column].tolist() == before[column].tolist()
    assert [_bits(v) for v in old["value"]] == [_bits(v) for v in before["value"]]
    assert [_bits(v) for v in old["value"]] == [_bits(v) for v in AWKWARD]
    # new rows: the repeat of Fe (same value) is merged, the other two added
    assert len(after) == len(before) + 2
    assert old["run_dir"].tolist() == [""] * len(before)
    assert after["run_dir"].iloc[len(before):].tolist() == ["/runs/a", "/runs/c"]
    assert after["note"].iloc[len(before):].tolist() == ["", ""]


def test_add_marks_provenance(files, tmp_path):
    table_path, results_path = files
    merged = add_results(read_table(table_path), read_table(results_path))
    n_old = len(read_table(table_path))
    assert merged["source"].iloc[:n_old].tolist() == ["original"] * n_old
    assert merged["source"].iloc[n_old:].tolist() == ["results.csv"] * 2
    assert merged.attrs["n_added"] == 2
    assert any("same cell and value" in notice and "results.csv:3" in notice for notice in merged.attrs["notices"])
    # a second merge keeps the provenance already written
    more = pd.DataFrame([{"element": "Zn", "host": "C", "site": "sub_C", "method": "gga",
                          "quantity": "E_sol", "value": 2.0}])
    again = add_results(merged, more, source="round 2")
    assert again["source"].tolist() == merged["source"].tolist() + ["round 2"]


def test_add_refuses_a_conflict_naming_both_files_and_lines(files, tmp_path, capsys):
    table_path, results_path = files
    results_path.write_text(
        "element,host,site,method,quantity,value\n"
        "Cu,ZnS,sub_Zn,hyb,E_sol,1.25\n"
        "Fe,ZnS,sub_Zn,gga,E_sol,0.3\n",
        encoding="utf-8",
    )
    with pytest.raises(TableError) as caught:
        add_results(read_table(table_path), read_table(results_path))
    message = str(caught.value)
    assert f"{results_path}:3" in message and f"{table_path}:2" in message
    assert "0.3" in message and repr(AWKWARD[0]) in message
    out = tmp_path / "new.csv"
    assert main(["add", str(table_path), str(results_path), "--out", str(out)]) == 2
    error = capsys.readouterr().err
    assert error.count("\n") == 1 and error.startswith("dopantgap add:")
    assert not out.exists()


@pytest.mark.parametrize(
    "arguments",
    [
        ["add", "{table}", "{missing}", "--out", "{out}"],
        ["add", "{table}", "{results}", "--out", "{out}", "--cost", "hyb=-3"],
        ["add", "{table}", "{results}", "--out", "{out}", "--model", "{missing}"],
        ["history", "{missing}"],
        ["history", "{tmp}"],
    ],
)
def test_cli_bad_input_is_one_line_and_status_2(files, tmp_path, capsys, arguments):
    table_path, results_path = files
    names = {"table": table_path, "results": results_path, "missing": tmp_path / "nowhere.csv",
             "out": tmp_path / "new.csv", "tmp": tmp_path}
    assert main([part.format(**names) for part in arguments]) == 2
    error = capsys.readouterr().err
    assert error.count("\n") == 1


# ----------------------------------------------------------------- rounds folder


@pytest.fixture(scope="module")
def recorded(tmp_path_factory, demo_model_dir):
    """Two rounds on the invented demo table, recorded with the shipped demo model."""
    folder = tmp_path_factory.mktemp("rounds")
    table_path = folder / "table.csv"
    write_table(demo_table(), table_path)
    world = demo_world().drop(columns="truth")
    computed = set(demo_table()[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    missing = world[[key not in computed for key in world[list(KEY_COLUMNS)].itertuples(index=False, name=None)]]
    hyb = missing[missing["method"] == "hyb"]
    write_table(hyb[hyb["element"] == "Fe"], folder / "results_1.csv")
    write_table(hyb[hyb["element"] == "Cu"], folder / "results_2.csv")
    (folder / "picks_1.csv").write_text("element,host,site,method,quantity\nFe,ZnS,sub_Zn,hyb,E_sol\n")
    rounds_dir = folder / "rounds"
    model = str(demo_model_dir)
    first = main(["add", str(table_path), str(folder / "results_1.csv"), "--out", str(folder / "t1.csv"),
                  "--rounds-dir", str(rounds_dir), "--picks", str(folder / "picks_1.csv"),
                  "--model", model, "--cost", "gga=1,hyb=30", "--quiet"])
    second = main(["add", str(folder / "t1.csv"), str(folder / "results_2.csv"), "--out", str(folder / "t2.csv"),
                   "--rounds-dir", str(rounds_dir), "--cost", "gga=1,hyb=30", "--quiet"])
    return {"folder": folder, "dir": rounds_dir, "status": (first, second), "table": table_path}


def test_rounds_folder_layout_and_metrics(recorded):
    assert recorded["status"] == (0, 0)
    rounds = round_folders(recorded["dir"])
    assert [number for number, _ in rounds] == [0, 1, 2]
    assert sorted(p.name for p in rounds[1][1].iterdir()) == ["metrics.json", "picks.csv", "results.csv", "table.csv"]
    assert (rounds[1][1] / "picks.csv").read_bytes() == (recorded["folder"] / "picks_1.csv").read_bytes()
    metrics = [json.loads((folder / "metrics.json").read_text()) for _, folder in rounds]
    n_fe = len(read_table(recorded["folder"] / "results_1.csv"))
    n_cu = len(read_table(recorded["folder"] / "results_2.csv"))
    assert [m["n_new_cells"] for m in metrics] == [0, n_fe, n_cu]
    assert [m["cost_spent"] for m in metrics] == [0.0, 30.0 * n_fe, 30.0 * (n_fe + n_cu)]
    # with a model: figures recorded; the second round had none given
    assert "decided" in metrics[1] and "decided" not in metrics[2]
    assert metrics[1]["n_missing_by_method"]["hyb"] == metrics[0]["n_missing_by_method"]["hyb"] - n_fe
    round_table = read_table(rounds[2][1] / "table.csv")
    assert round_table["source"].value_counts().to_dict() == {"original": len(demo_table()), "round 1": n_fe,
                                                               "round 2": n_cu}


def test_rounds_refuses_a_table_that_is_not_the_latest(recorded, capsys):
    status = main(["add", str(recorded["table"]), str(recorded["folder"] / "results_2.csv"),
                   "--out", str(recorded["folder"] / "t3.csv"), "--rounds-dir", str(recorded["dir"])])
    assert status == 2
    error = capsys.readouterr().err
    assert error.count("\n") == 1 and "latest table" in error
    assert [number for number, _ in round_folders(recorded["dir"])] == [0, 1, 2]


def test_history_prints_a_row_per_round(recorded, capsys):
    assert main(["history", str(recorded["dir"])]) == 0
    lines = capsys.readouterr().out.splitlines()
    rows = [line for line in lines if line.split() and line.split()[0].isdigit()]
    assert [row.split()[0] for row in rows] == ["0", "1", "2"]
    assert "round 2" in rows[2] and " - " in rows[2] + " "  # no model figures for round 2
    assert "--model" in "\n".join(lines)


def test_history_writes_a_png(recorded, tmp_path, capsys, demo_model_dir):
    out = tmp_path / "history.png"
    assert main(["history", str(recorded["dir"]), "--model", str(demo_model_dir), "--out", str(out)]) == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, W3C 2003, 5.2)
    assert "computed now" in capsys.readouterr().out


def test_history_with_a_model_computes_the_missing_round(recorded, demo_model_dir):
    surrogate, _ = load_model(demo_model_dir)
    history = rounds_history(recorded["dir"], surrogate=surrogate)
    assert history["figures"].tolist() == ["recorded", "recorded", "computed now"]
    # more hyb cells computed: the mean std of the missing hyb cells does not grow
    assert history["mean_std_hyb"].is_monotonic_decreasing
    assert history["n_cells"].is_monotonic_increasing
    assert (history["decided"] <= history["n_site_groups"]).all()
    assert "computed now" in history_text(history)


def test_decided_counts_rank_one_above_threshold():
    preference = pd.DataFrame({
        "element": ["Fe", "Fe", "Cu", "Cu"], "host": "ZnS", "method": "gga", "quantity": "E_sol",
        "site": ["a", "b", "a", "b"], "p_lowest": [0.95, 0.05, 0.9, 0.1], "rank": [1, 2, 1, 2],
        "value": 0.0, "std": 0.1, "status": "predicted",
    })
    decided = decided_preferences(preference)
    assert decided["element"].tolist() == ["Fe"]  # 0.9 itself is not above 0.9


def test_record_round_refuses_an_incomplete_round(tmp_path):
    (tmp_path / "round_0").mkdir()
    table = pd.DataFrame([{"element": "Fe", "host": "ZnS", "site": "sub_Zn", "method": "gga",
                           "quantity": "E_sol", "value": 1.0}])
    with pytest.raises(DopantgapError, match="not completed"):
        record_round(tmp_path, table, table.assign(element="Cu"))
    assert np.array_equal(table["value"].to_numpy(), [1.0])
