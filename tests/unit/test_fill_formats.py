"""The filled table as files: long or wide layout, CSV or Excel workbook (``fill --format``,
``--out *.xlsx``). The model is the demo model of the invented table (``data_demo``),
not DFT data.
"""

import numpy as np
import pandas as pd
import pytest

from dopantgap.cli import main
from dopantgap.errors import DopantgapError
from dopantgap.fill import WIDE_COMPANIONS, check_fill_format, fill_table, wide_filled
from dopantgap.store import load_model
from dopantgap.errors import TableError
from dopantgap.table import KEY_COLUMNS, check_output_suffix, read_table, to_wide, write_table

CELL = list(KEY_COLUMNS)


@pytest.fixture(scope="module")
def filled(demo_model_dir):
    surrogate, _manifest = load_model(demo_model_dir)
    return surrogate, fill_table(surrogate, element_symbols=["Zr"])


def _cells(frame):
    return frame[CELL + ["value"]].sort_values(CELL).reset_index(drop=True)


def test_wide_layout_has_a_row_per_element_and_companions_per_cell(filled):
    _surrogate, table = filled
    wide = wide_filled(table)
    assert list(wide["element"]) == list(dict.fromkeys(table["element"]))
    value_columns = [c for c in wide.columns if c.count("/") == 3]
    assert len(value_columns) == len(table[CELL[1:]].drop_duplicates())
    for column in value_columns:
        for kind in WIDE_COMPANIONS:
            assert f"{column.replace('/', '|')} {kind}" in wide.columns
    # every cell of the long table in its place, with its std and status
    host, site, method, quantity = value_columns[0].split("/")
    for row in table[(table["host"] == host) & (table["site"] == site) & (table["method"] == method)
                     & (table["quantity"] == quantity)].itertuples(index=False):
        line = wide[wide["element"] == row.element].iloc[0]
        assert line[value_columns[0]] == row.value
        assert line[f"{host}|{site}|{method}|{quantity} std"] == row.std
        assert line[f"{host}|{site}|{method}|{quantity} status"] == row.status
    # the caution of a flagged element rides along per element
    assert "element caution" in wide.columns


def test_to_wide_spreads_any_column(filled):
    _surrogate, table = filled
    status = to_wide(table, values="status")
    by_hand = table.assign(column=table["host"] + "/" + table["site"] + "/" + table["method"] + "/"
                           + table["quantity"]).pivot(index="element", columns="column", values="status")
    pd.testing.assert_frame_equal(status, by_hand.reindex(index=status.index, columns=status.columns),
                                  check_names=False, check_dtype=False)
    assert to_wide(table, values="std").dtypes.eq(np.float64).all()


@pytest.mark.parametrize("name", ["filled.csv", "filled.xlsx"])
def test_wide_file_reads_back_into_the_same_cells(filled, tmp_path, name):
    surrogate, table = filled
    path = tmp_path / name
    wide = wide_filled(table)
    write_table(wide, path)
    # as written, the file is refused: its predictions would pass for computed values
    with pytest.raises(TableError, match="filled by dopantgap") as refused:
        read_table(path)
    assert "\n" not in str(refused.value)
    companions = [column for column in wide.columns if column.rpartition(" ")[2] in ("std", "lo", "hi", "status")]
    write_table(wide.drop(columns=companions), path)
    back = read_table(path)
    # bit for bit: floats are written in their shortest exact form
    pd.testing.assert_frame_equal(_cells(back), _cells(table), check_exact=True)
    # the computed cells are the user's numbers, unchanged
    computed = table[table["status"] == "computed"]
    pd.testing.assert_frame_equal(_cells(computed), _cells(surrogate.table_), check_exact=True)


def test_long_workbook_matches_the_long_csv(filled, tmp_path):
    """The workbook read by pandas' own Excel reader (openpyxl engine) holds what the CSV
    holds: same columns, same numbers bit for bit, same text."""
    _surrogate, table = filled
    write_table(table, tmp_path / "filled.csv")
    write_table(table, tmp_path / "filled.xlsx")
    # read as text and parsed by Python: older pandas' own float parser can be one unit
    # in the last place off
    from_csv = pd.read_csv(tmp_path / "filled.csv", keep_default_na=False, dtype=str)
    from_book = pd.read_excel(tmp_path / "filled.xlsx", engine="openpyxl", keep_default_na=False)
    assert list(from_book.columns) == list(from_csv.columns)
    for column in ("value", "std", "lo", "hi"):
        exact = np.array([float(text) if text else np.nan for text in from_csv[column]])
        np.testing.assert_array_equal(from_book[column].to_numpy(float), exact)
    for column in ("element", "host", "site", "method", "quantity", "status", "scenario", "caution"):
        assert list(from_book[column].astype(str)) == list(from_csv[column].astype(str))


def test_workbook_keeps_text_as_text_and_last_bits_of_floats(tmp_path):
    frame = pd.DataFrame({"element": ["Ga", "In"], "note": ["=1+1", "plain"], "value": [0.1 + 0.2, np.nan]})
    write_table(frame, tmp_path / "t.xlsx")
    import openpyxl

    sheet = openpyxl.load_workbook(tmp_path / "t.xlsx").active
    rows = list(sheet.iter_rows(values_only=True))
    # openpyxl alone writes 16 digits (0.3); the note stays text, never a formula
    assert rows[1] == ("Ga", "=1+1", 0.30000000000000004)
    assert sheet["B2"].data_type == "s" and rows[2][2] is None


def test_formats_and_suffixes_are_refused_in_one_line(demo_model_dir, tmp_path, capsys):
    with pytest.raises(DopantgapError, match="long or wide"):
        check_fill_format("tall")
    assert check_fill_format("Wide") == "wide"
    with pytest.raises(DopantgapError, match=r"\.csv .*\.xlsx"):
        check_output_suffix(tmp_path / "filled.ods")
    for arguments in (["--out", str(tmp_path / "f.csv"), "--format", "tall"],
                      ["--out", str(tmp_path / "f.xls")],
                      ["--out", str(tmp_path / "f.csv"), "--sites-out", str(tmp_path / "s.json")]):
        capsys.readouterr()
        assert main(["fill", str(demo_model_dir), *arguments]) == 2
        error = capsys.readouterr().err
        assert error.count("\n") == 1 and error.startswith("dopantgap fill: ")
    assert not any(tmp_path.iterdir())  # refused before any file was written


def test_fill_command_writes_a_wide_workbook_and_sites_beside_it(demo_model_dir, filled, tmp_path, capsys):
    _surrogate, table = filled
    out = tmp_path / "filled.xlsx"
    assert main(["fill", str(demo_model_dir), "--out", str(out), "--format", "wide", "--elements", "Zr"]) == 0
    assert "element rows" in capsys.readouterr().out
    written = pd.read_excel(out)
    assert "Zr" in set(written["element"])
    with pytest.raises(TableError, match="filled by dopantgap"):
        read_table(out)
    assert (tmp_path / "site_preference.xlsx").exists()


def test_extra_columns_stay_per_element_or_go_beside_each_cell():
    """A note with one text per element becomes one column (as the reader's wide layout
    keeps notes); one that differs between an element's computed cells goes beside each
    cell, so no note is dropped. Invented cells."""
    rows = [
        {"element": e, "host": "ZnS", "site": "sub_Zn", "method": "gga", "quantity": q, "value": 1.0,
         "std": 0.0, "lo": 1.0, "hi": 1.0, "status": "computed", "scenario": "", "domain_distance": 0.0,
         "outside_domain": False, "caution": "", "batch": f"batch {e}", "run": f"{e}-{q}"}
        for e in ("Ga", "In") for q in ("E1", "E2")
    ]
    wide = wide_filled(pd.DataFrame(rows))
    assert list(wide["batch"]) == ["batch Ga", "batch In"]
    assert "run" not in wide.columns
    assert list(wide["ZnS|sub_Zn|gga|E2 run"]) == ["Ga-E2", "In-E2"]
