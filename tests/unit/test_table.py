"""Tests of dopantgap.table: reading, checking, reshaping, summarising and writing tables.

All host names, sites and energies below are invented for the tests.
"""

import importlib.util
import math
import sqlite3
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from dopantgap.errors import TableError
from dopantgap.symbols import atomic_number
from dopantgap.table import (
    KEY_COLUMNS,
    MAX_ABS_VALUE,
    REQUIRED_COLUMNS,
    RESERVED_COLUMNS,
    WIDE_SEPARATOR,
    coverage,
    coverage_text,
    read_table,
    table_hash,
    to_wide,
    write_table,
)

HEADER = "element,host,site,method,quantity,value"


def write_text(tmp_path, text, name="table.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8", newline="")
    return path


def write_lines(tmp_path, lines, name="table.csv"):
    return write_text(tmp_path, "\n".join(lines) + "\n", name)


def raises_at(path, line, fragment, **options):
    """Read ``path`` expecting a TableError at ``line`` whose message holds ``fragment``."""
    with pytest.raises(TableError, match=fragment) as caught:
        read_table(path, **options)
    assert f"{path}:{line}: " in str(caught.value)
    assert caught.value.line == line
    assert "\n" not in str(caught.value)
    return str(caught.value)


# ----------------------------------------------------------------------------- contract


def test_module_constants_match_the_contract():
    assert KEY_COLUMNS == ("element", "host", "site", "method", "quantity")
    assert REQUIRED_COLUMNS == KEY_COLUMNS + ("value",)
    assert set(RESERVED_COLUMNS) >= {"std", "lo", "hi", "status", "scenario"}
    assert MAX_ABS_VALUE == 1000.0
    assert WIDE_SEPARATOR == "/"


def test_every_column_fill_adds_is_reserved():
    """A user column named like an output column would collide with it in ``fill``."""
    from dopantgap.fill import FILLED_COLUMNS

    assert set(FILLED_COLUMNS) - set(REQUIRED_COLUMNS) == set(RESERVED_COLUMNS)


def test_long_table_columns_types_and_lines(tmp_path):
    path = write_lines(tmp_path, [
        HEADER + ",note",
        "Fe,MgO,substitutional,PBE,formation,1.5,first",
        "",
        "W,MgO,interstitial,PBE,formation,-2.25,",
    ])
    frame = read_table(path)
    assert list(frame.columns) == list(REQUIRED_COLUMNS) + ["note", "_file", "_line"]
    assert frame["value"].dtype == np.float64
    assert frame["_line"].dtype == np.int64
    assert frame["_line"].tolist() == [2, 4]  # the blank physical line 3 still counts
    assert frame["_file"].tolist() == [str(path), str(path)]
    assert frame["element"].tolist() == ["Fe", "W"]
    assert frame["value"].tolist() == [1.5, -2.25]
    assert frame["note"].tolist() == ["first", ""]
    assert frame.attrs["notices"] == []


def test_bom_and_crlf_line_ends(tmp_path):
    path = tmp_path / "table.csv"
    path.write_bytes(
        b"\xef\xbb\xbf" + HEADER.encode() + b"\r\n"
        b"Fe,MgO,substitutional,PBE,formation,0.5\r\n"
        b"Co,MgO,substitutional,PBE,formation,0.75\r\n"
    )
    frame = read_table(path)
    assert list(frame.columns[:6]) == list(REQUIRED_COLUMNS)
    assert frame["element"].tolist() == ["Fe", "Co"]
    assert frame["quantity"].tolist() == ["formation", "formation"]
    assert frame["value"].tolist() == [0.5, 0.75]
    assert frame["_line"].tolist() == [2, 3]


def test_padded_headers_and_lower_case_symbols(tmp_path):
    path = write_lines(tmp_path, [
        " Element , HOST ,Site,Method ,quantity, Value ",
        " fe , MgO ,  Substitutional ,  PBE , E_form , 1.0 ",
        "CO,MgO,Substitutional,PBE,E_form,2.0",
    ])
    frame = read_table(path)
    assert frame["element"].tolist() == ["Fe", "Co"]
    # host, site, method and quantity are stripped but keep their case
    assert frame["host"].tolist() == ["MgO", "MgO"]
    assert frame["site"].tolist() == ["Substitutional", "Substitutional"]
    assert frame["quantity"].tolist() == ["E_form", "E_form"]
    assert frame["value"].tolist() == [1.0, 2.0]


def test_extra_columns_are_kept_unchanged_in_order(tmp_path):
    path = write_lines(tmp_path, [
        'Run Folder,element,host,site,method,quantity,value, Comment ',
        '  runs/a  ,Fe,MgO,sub,PBE,E,1.0,"spin, high"',
        ',W,MgO,sub,PBE,E,2.0,  ',
        '007,Mo,MgO,sub,PBE,E,3.0,"said ""ok"""',
    ])
    frame = read_table(path)
    assert list(frame.columns) == list(REQUIRED_COLUMNS) + [
        "Run Folder", " Comment ", "_file", "_line"]
    assert frame["Run Folder"].tolist() == ["  runs/a  ", "", "007"]
    assert frame[" Comment "].tolist() == ["spin, high", "  ", 'said "ok"']


def test_quoted_field_over_two_lines_keeps_physical_line_numbers(tmp_path):
    path = write_lines(tmp_path, [
        HEADER + ",note",
        'Fe,MgO,sub,PBE,E,1.0,"line one',
        'line two"',
        "W,MgO,sub,PBE,E,zzz,",
    ])
    raises_at(path, 4, "'zzz' is not a number")


def test_all_blank_rows_are_skipped(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0", ",,,,,", "  ,,, ,,", "W,MgO,sub,PBE,E,2"])
    frame = read_table(path)
    assert frame["_line"].tolist() == [2, 5]


# ----------------------------------------------------------------------------- errors


def test_missing_file(tmp_path):
    path = tmp_path / "absent.csv"
    with pytest.raises(TableError, match="file not found") as caught:
        read_table(path)
    assert str(caught.value).startswith(f"{path}: ")


def test_folder_instead_of_file(tmp_path):
    with pytest.raises(TableError, match="folder"):
        read_table(tmp_path)


def test_empty_file(tmp_path):
    raises_at(write_text(tmp_path, ""), 1, "empty")
    raises_at(write_text(tmp_path, "\ufeff \r\n\r\n", name="blank.csv"), 1, "empty")


def test_header_only(tmp_path):
    raises_at(write_lines(tmp_path, [HEADER]), 1, "header row but no data rows")


def test_binary_file(tmp_path):
    path = tmp_path / "table.csv"
    path.write_bytes(HEADER.encode() + b"\nFe,MgO,sub,PBE,E,1.0\n\x00\x01\x02")
    raises_at(path, 3, "not a text file")


def test_utf16_file_is_not_read_as_text(tmp_path):
    path = tmp_path / "table.csv"
    path.write_bytes((HEADER + "\nFe,MgO,sub,PBE,E,1.0\n").encode("utf-16"))
    raises_at(path, 1, "UTF-16")


def test_workbook_with_csv_name(tmp_path):
    workbook = openpyxl.Workbook()
    workbook.active.append(list(REQUIRED_COLUMNS))
    path = tmp_path / "table.csv"
    workbook.save(path)
    raises_at(path, 1, "looks like an Excel workbook")


def test_text_that_is_not_utf8(tmp_path):
    path = tmp_path / "table.csv"
    path.write_bytes(
        (HEADER + ",note\nFe,MgO,sub,PBE,E,1.0,ok\nW,MgO,sub,PBE,E,2.0,caf\xe9\n").encode("cp1252")
    )
    message = raises_at(path, 3, "not UTF-8")
    assert "0xE9" in message and "CSV UTF-8" in message


@pytest.mark.parametrize("delimiter, name", [(";", "semicolons"), ("\t", "tabs")])
def test_wrong_delimiter(tmp_path, delimiter, name):
    lines = [HEADER.replace(",", delimiter), delimiter.join("Fe MgO sub PBE E 1,5".split())]
    message = raises_at(write_lines(tmp_path, lines), 1, "use commas as the delimiter")
    assert name in message


def test_missing_required_columns(tmp_path):
    path = write_lines(tmp_path, ["Element,host,energy", "Fe,MgO,1.0"])
    message = raises_at(path, 1, "missing required column")
    assert "'site', 'method', 'quantity', 'value'" in message
    assert "found columns: 'Element', 'host', 'energy'" in message
    assert "host/site/method/quantity" in message


def test_missing_columns_names_a_misformed_wide_column(tmp_path):
    path = write_lines(tmp_path, ["element,MgO/sub/PBE", "Fe,1.0"])
    message = raises_at(path, 1, "missing required column")
    assert "'MgO/sub/PBE' is not 4 non-empty parts" in message


def test_blank_element(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0", "  ,MgO,sub,PBE,E,2.0"])
    raises_at(path, 3, "element is blank")


@pytest.mark.parametrize("typed, suggestion", [
    ("Fee", "did you mean Fe"),
    ("iron", "did you mean Fe"),
    ("26", r"did you mean Fe \(element number 26\)"),
    ("Fe2+", "did you mean Fe"),
    ("Wx", "did you mean W"),
])
def test_unknown_element_with_suggestion(tmp_path, typed, suggestion):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0", f"{typed},MgO,sub,PBE,E,2.0"])
    message = raises_at(path, 3, suggestion)
    assert f"unknown element '{typed}'" in message


def test_unknown_element_without_a_confident_suggestion(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Q,MgO,sub,PBE,E,2.0"])
    message = raises_at(path, 2, "unknown element 'Q'")
    assert "did you mean" not in message


@pytest.mark.parametrize("column", ["host", "site", "method", "quantity"])
def test_blank_key(tmp_path, column):
    fields = dict(element="Fe", host="MgO", site="sub", method="PBE", quantity="E", value="1")
    fields[column] = "   "
    path = write_lines(tmp_path, [HEADER, "Co,MgO,sub,PBE,E,1.0", ",".join(fields.values())])
    raises_at(path, 3, f"{column} is blank")


def test_separator_inside_a_long_key(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub/a,PBE,E,1.0"])
    raises_at(path, 2, "site 'sub/a' contains '/'")


@pytest.mark.parametrize("text, fragment", [
    ("abc", "'abc' is not a number"),
    ("1_000", "'1_000' is not a number"),
    ("-1.2 eV", r"write the number only \(-1.2\), in eV"),
    ('"1,5"', r"decimal comma; write it with a decimal point \(1.5\)"),
    ("nan", "'nan', not a finite number"),
    ("-inf", "'-inf', not a finite number"),
    ("1e400", "overflows to infinity"),
    ("1000.5", "absurd magnitude.*meV or J.*expects eV"),
    ("-2500", "absurd magnitude"),
    ("", "value is blank"),
])
def test_bad_values(tmp_path, text, fragment):
    path = write_lines(tmp_path, [HEADER, "Co,MgO,sub,PBE,E,1.0", f"Fe,MgO,sub,PBE,E,{text}"])
    raises_at(path, 3, fragment)


def test_largest_accepted_magnitude(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Co,MgO,sub,PBE,E,-1000", "Fe,MgO,sub,PBE,E,+.5e3"])
    assert read_table(path)["value"].tolist() == [-1000.0, 500.0]


def test_conflicting_duplicates(tmp_path):
    path = write_lines(tmp_path, [
        HEADER, "Fe,MgO,sub,PBE,E,1.0", "W,MgO,sub,PBE,E,3.0", " fe ,MgO, sub ,PBE,E,1.25",
    ])
    message = raises_at(path, 4, "conflicting duplicate")
    assert "1.25" in message and "1.0" in message and "line 2" in message


def test_wrong_number_of_fields(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0", "W,MgO,sub,PBE,E,1,5"])
    message = raises_at(path, 3, "7 fields but the header has 6")
    assert "decimal comma" in message
    raises_at(write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,1.0"], name="short.csv"), 2,
              "5 fields but the header has 6")


def test_unclosed_quote(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0", 'W,MgO,"sub,PBE,E,2.0'])
    raises_at(path, 3, "double quote")


@pytest.mark.parametrize("name", ["std", " Status ", "LO", "_line", "_mine"])
def test_reserved_column_name(tmp_path, name):
    path = write_lines(tmp_path, [HEADER + f",{name}", "Fe,MgO,sub,PBE,E,1.0,x"])
    message = raises_at(path, 1, "reserved name")
    assert "rename it" in message and repr(name) in message


def test_repeated_column_name(tmp_path):
    path = write_lines(tmp_path, [HEADER + ",Value", "Fe,MgO,sub,PBE,E,1.0,2.0"])
    raises_at(path, 1, "columns 6 and 7 are both named 'value'")


def test_data_under_a_column_without_name(tmp_path):
    path = write_lines(tmp_path, [HEADER + ",", "Fe,MgO,sub,PBE,E,1.0,", "W,MgO,sub,PBE,E,2.0,oops"])
    raises_at(path, 3, "column 7 has no name")
    fine = write_lines(tmp_path, [HEADER + ",", "Fe,MgO,sub,PBE,E,1.0,"], name="fine.csv")
    assert list(read_table(fine).columns) == list(REQUIRED_COLUMNS) + ["_file", "_line"]


def test_wide_column_name_that_is_not_four_parts(tmp_path):
    path = write_lines(tmp_path, [
        "element,MgO/sub/PBE/E,MgO/sub//E,MgO/sub/PBE/E/extra", "Fe,1.0,2.0,3.0",
    ])
    message = raises_at(path, 1, "'MgO/sub//E' is not a wide-layout name")
    assert "exactly 4 non-empty parts" in message
    path = write_lines(tmp_path, ["element,MgO/sub/PBE/E,a/b/c/d/e", "Fe,1.0,2.0"], name="five.csv")
    raises_at(path, 1, "'a/b/c/d/e' is not a wide-layout name")


def test_first_problem_in_file_order_is_reported(tmp_path):
    path = write_lines(tmp_path, [
        HEADER,
        "Fe,MgO,sub,PBE,E,1.0",
        "Fee,MgO,sub,PBE,E,2.0",  # first problem
        "W,MgO,sub,PBE,E,abc",
        "Fe,MgO,sub,PBE,E,9.0",
    ])
    raises_at(path, 3, "unknown element 'Fee'")


def test_bad_layout_argument(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0"])
    with pytest.raises(ValueError, match="layout must be one of"):
        read_table(path, layout="tall")


def test_sheet_given_for_a_text_file(tmp_path):
    path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0"])
    with pytest.raises(TableError, match="not a workbook"):
        read_table(path, sheet="data")


# ----------------------------------------------------------------------------- duplicates


def test_exact_duplicates_are_merged_with_a_notice(tmp_path):
    path = write_lines(tmp_path, [
        HEADER + ",note",
        "Co,MgO,sub,PBE,E,0.1,a",
        "Fe,MgO,sub,PBE,E,1.0,first",
        "W,MgO,sub,PBE,E,2.0,b",
        "Co,MgO,int,PBE,E,0.2,c",
        " FE , MgO ,sub,PBE,E,1.000,second",
        "Co,MgO,sub,PBE,E,0.1,a",
    ])
    frame = read_table(path)
    assert frame["_line"].tolist() == [2, 3, 4, 5]
    assert frame.loc[frame["element"] == "Fe", "note"].tolist() == ["first"]
    notices = frame.attrs["notices"]
    assert len(notices) == 2
    assert notices[0].startswith(
        f"{path}:6: same as line 3 (element, host, site, method, quantity and value); kept line 3"
    )
    assert "'note' differ" in notices[0]
    assert notices[1] == (
        f"{path}:7: same as line 2 (element, host, site, method, quantity and value); kept line 2"
    )


# ----------------------------------------------------------------------------- wide layout


def test_wide_layout_equals_the_same_long_table(tmp_path):
    long_path = write_lines(tmp_path, [
        HEADER + ",batch",
        "Fe,MgO,sub,PBE,E_form,1.5,b1",
        "Fe,MgO,int,PBE,E_form,2.5,b1",
        "Fe,ZnO,sub,HSE,E_bind,-0.5,b1",
        "W,MgO,sub,PBE,E_form,3.0,b2",
        "Mo,ZnO,sub,HSE,E_bind,-0.25,b3",
    ], name="long.csv")
    wide_path = write_lines(tmp_path, [
        "element, MgO / sub / PBE / E_form ,MgO/int/PBE/E_form,batch,ZnO/sub/HSE/E_bind",
        "fe,1.5,2.5,b1,-0.5",
        "W,3.0,,b2,",
        "Mo,, ,b3,-0.25",
    ], name="wide.csv")
    long_frame = read_table(long_path)
    wide_frame = read_table(wide_path)
    assert wide_frame["_line"].tolist() == [2, 2, 2, 3, 4]
    columns = list(REQUIRED_COLUMNS) + ["batch"]
    pd.testing.assert_frame_equal(
        long_frame[columns].reset_index(drop=True), wide_frame[columns].reset_index(drop=True)
    )
    assert table_hash(long_frame) == table_hash(wide_frame)
    pd.testing.assert_frame_equal(to_wide(long_frame), to_wide(wide_frame))
    forced = read_table(wide_path, layout="wide")
    pd.testing.assert_frame_equal(forced, wide_frame)


def test_wide_layout_notices_and_errors(tmp_path):
    path = write_lines(tmp_path, ["element,MgO/sub/PBE/E", "Fe,1.0", "W,", "Co,oops"])
    raises_at(path, 4, "column 'MgO/sub/PBE/E' 'oops' is not a number")
    path = write_lines(tmp_path, ["element,MgO/sub/PBE/E,note", "Fe,1.0,x", "W,,y"], name="n.csv")
    frame = read_table(path)
    assert frame.attrs["notices"] == [f"{path}:3: W has no computed cells; nothing read from this row"]
    path = write_lines(tmp_path, ["element,MgO/sub/PBE/E", "Fe,1.0", "Fe,1.5"], name="c.csv")
    raises_at(path, 3, "Fe in 'MgO/sub/PBE/E': conflicting duplicate")
    path = write_lines(tmp_path, ["element,MgO/sub/PBE/E,host", "Fe,1.0,MgO"], name="h.csv")
    raises_at(path, 1, "column 'host' does not belong in a wide table")
    path = write_lines(tmp_path, ["element,MgO/sub/PBE/E,MgO /sub/PBE/ E", "Fe,1.0,1.0"], name="d.csv")
    raises_at(path, 1, "name the same host/site/method/quantity")
    path = write_lines(tmp_path, ["element,MgO/sub/PBE/E", "Fe,", "W,"], name="e.csv")
    raises_at(path, 1, "not one computed cell")


def test_layout_forcing(tmp_path):
    wide_path = write_lines(tmp_path, ["element,MgO/sub/PBE/E", "Fe,1.0"], name="wide.csv")
    message = raises_at(wide_path, 1, "missing required column", layout="long")
    assert "'host'" in message
    long_path = write_lines(tmp_path, [HEADER, "Fe,MgO,sub,PBE,E,1.0"], name="long.csv")
    raises_at(long_path, 1, "column 'host' does not belong in a wide table", layout="wide")
    # with a value column, auto reads long and a '/' column is only an extra column
    mixed = write_lines(tmp_path, [HEADER + ",a/b/c/d", "Fe,MgO,sub,PBE,E,1.0,2.0"], name="m.csv")
    assert read_table(mixed)["a/b/c/d"].tolist() == ["2.0"]


# ----------------------------------------------------------------------------- workbooks


def make_workbook(path, rows, sheet_title=None, first_sheet_rows=None):
    workbook = openpyxl.Workbook()
    sheet = workbook.active
    if first_sheet_rows is not None:
        sheet.title = "notes"
        for row in first_sheet_rows:
            sheet.append(row)
        sheet = workbook.create_sheet(sheet_title or "data")
    elif sheet_title:
        sheet.title = sheet_title
    for row in rows:
        sheet.append(row)
    workbook.save(path)
    return path


def test_xlsx_long_table(tmp_path):
    path = make_workbook(tmp_path / "table.xlsx", [
        [" Element ", "host", "site", "method", "quantity", "value", "count", "note"],
        ["fe", "MgO", "sub", "PBE", "E", 1 / 3, 3, "ok"],
        [None, None, None, None, None, None, None, None],
        ["W", "MgO", "sub", "PBE", "E", -3.141592653589793, None, None],
        ["Mo", "MgO", "sub", "PBE", "E", "1e-17", 4.5, True],
    ])
    frame = read_table(path)
    assert frame["element"].tolist() == ["Fe", "W", "Mo"]
    assert frame["_line"].tolist() == [2, 4, 5]
    # openpyxl stores floats with 16 significant digits ("%.16g"), which these survive exactly
    assert frame["value"].tolist() == [1 / 3, -3.141592653589793, 1e-17]
    assert frame["count"].tolist() == ["3", "", "4.5"]
    assert frame["note"].tolist() == ["ok", "", "TRUE"]


def test_xlsx_wide_table_on_a_named_sheet(tmp_path):
    path = make_workbook(
        tmp_path / "table.xlsx",
        [["element", "MgO/sub/PBE/E", "MgO/int/PBE/E"], ["Fe", 1.5, None], ["W", 2, -0.5]],
        sheet_title="energies",
        first_sheet_rows=[["note"], ["invented demo workbook"]],
    )
    frame = read_table(path, sheet="energies")
    assert frame["element"].tolist() == ["Fe", "W", "W"]
    assert frame["site"].tolist() == ["sub", "sub", "int"]
    assert frame["value"].tolist() == [1.5, 2.0, -0.5]
    assert frame["_line"].tolist() == [2, 3, 3]
    pd.testing.assert_frame_equal(read_table(path, sheet=1), frame)
    raises_at(path, 1, r"missing required column\(s\) 'element'")  # first sheet: a note
    with pytest.raises(TableError, match="sheet 'missing' not found; the workbook has: 'notes', 'energies'"):
        read_table(path, sheet="missing")
    with pytest.raises(TableError, match="sheet number 5 does not exist"):
        read_table(path, sheet=5)


def test_xlsx_errors(tmp_path):
    path = make_workbook(tmp_path / "bad.xlsx", [list(REQUIRED_COLUMNS), ["Fe", "MgO", "sub", "PBE", "E", "abc"]])
    raises_at(path, 2, "'abc' is not a number")
    path = make_workbook(tmp_path / "formula.xlsx", [list(REQUIRED_COLUMNS), ["Fe", "MgO", "sub", "PBE", "E", "=1+1"]])
    raises_at(path, 2, "cell F2 holds the formula '=1\\+1' with no saved result")
    path = make_workbook(tmp_path / "beyond.xlsx", [list(REQUIRED_COLUMNS), ["Fe", "MgO", "sub", "PBE", "E", 1.0, "stray"]])
    raises_at(path, 2, "column 7 has no name")
    path = make_workbook(tmp_path / "header.xlsx", [list(REQUIRED_COLUMNS)])
    raises_at(path, 1, "no data rows")
    path = make_workbook(tmp_path / "empty.xlsx", [])
    raises_at(path, 1, "empty")
    broken = tmp_path / "broken.xlsx"
    broken.write_bytes(b"this is not a zip archive")
    with pytest.raises(TableError, match="cannot open as an Excel workbook"):
        read_table(broken)
    old = tmp_path / "old.xls"
    old.write_bytes(b"\xd0\xcf\x11\xe0")
    with pytest.raises(TableError, match="save it as .xlsx"):
        read_table(old)


# ----------------------------------------------------------------------------- writing


def test_write_table_round_trip_bit_for_bit(tmp_path):
    values = [0.1 + 0.2, 1e-17, -3.141592653589793, 5e-324, -0.0, 999.9999999999999, 1 / 3]
    elements = ["Fe", "W", "Mo", "Co", "Ni", "Cu", "Zn"]
    lines = [HEADER + ",note"] + [
        f"{element},MgO,sub,PBE,E,{value!r},\"a, b\"" for element, value in zip(elements, values)
    ]
    frame = read_table(write_lines(tmp_path, lines))
    before = frame.copy(deep=True)
    target = tmp_path / "out" / "written.csv"
    write_table(frame, target)
    pd.testing.assert_frame_equal(frame, before)  # the caller's frame is untouched
    raw = target.read_bytes()
    assert not raw.startswith(b"\xef\xbb\xbf") and b"\r" not in raw
    assert raw.decode("utf-8").splitlines()[0] == HEADER + ",note"
    assert list(target.parent.iterdir()) == [target]  # no temporary file left behind
    again = read_table(target)
    assert np.array_equal(again["value"].to_numpy().view(np.int64),
                          np.asarray(values, dtype=np.float64).view(np.int64))
    assert again["note"].tolist() == ["a, b"] * len(values)
    assert "_file" in again.columns and again["_file"].iloc[0] == str(target)


# ----------------------------------------------------------------------------- hashing


def test_table_hash_ignores_row_order_and_extra_columns(tmp_path):
    rows = ["Fe,MgO,sub,PBE,E,1.0", "W,MgO,sub,PBE,E,2.0", "Mo,ZnO,int,HSE,B,-0.5"]
    first = read_table(write_lines(tmp_path, [HEADER] + rows, name="a.csv"))
    shuffled = read_table(write_lines(
        tmp_path, [HEADER + ",note"] + [row + f",n{index}" for index, row in enumerate(reversed(rows))],
        name="b.csv",
    ))
    digest = table_hash(first)
    assert len(digest) == 64 and int(digest, 16) >= 0
    assert table_hash(shuffled) == digest
    changed = first.copy()
    changed.loc[0, "value"] = np.nextafter(1.0, 2.0)  # one unit in the last place
    assert table_hash(changed) != digest
    renamed = first.copy()
    renamed.loc[0, "site"] = "int"
    assert table_hash(renamed) != digest


# ----------------------------------------------------------------------------- summaries


@pytest.fixture
def coverage_frame(tmp_path):
    path = write_lines(tmp_path, [
        "element,MgO/sub/PBE/E,MgO/int/PBE/E,ZnO/sub/HSE/E",
        "Fe,1.0,2.0,3.0",
        "W,1.5,,",
        "Mo,0.5,0.25,",
        "Co,-1.0,,",
    ])
    return read_table(path)


def test_to_wide(coverage_frame):
    wide = to_wide(coverage_frame)
    assert wide.index.name == "element"
    assert wide.index.tolist() == ["Fe", "W", "Mo", "Co"]
    assert wide.columns.tolist() == ["MgO/sub/PBE/E", "MgO/int/PBE/E", "ZnO/sub/HSE/E"]
    assert (wide.dtypes == np.float64).all()
    assert wide.loc["Mo", "MgO/int/PBE/E"] == 0.25
    assert math.isnan(wide.loc["W", "ZnO/sub/HSE/E"])
    assert int(wide.notna().to_numpy().sum()) == len(coverage_frame)


def test_coverage_counts(coverage_frame):
    table = coverage(coverage_frame)
    assert table["column"].tolist() == ["MgO/sub/PBE/E", "MgO/int/PBE/E", "ZnO/sub/HSE/E"]
    assert table["n_elements_computed"].tolist() == [4, 2, 1]
    assert table["n_elements"].tolist() == [4, 4, 4]
    assert table["fraction_computed"].tolist() == [1.0, 0.5, 0.25]
    assert table.attrs["totals"] == {
        "n_rows": 7, "n_elements": 4, "n_columns": 3, "n_cells": 12, "n_computed": 7,
        "fraction_computed": 7 / 12,
    }


def test_coverage_text(coverage_frame):
    text = coverage_text(coverage_frame)
    lines = text.splitlines()
    assert text.endswith("\n")
    assert lines[0].split() == ["rows", "read", "7"]
    assert lines[1].split() == ["elements", "4"]
    assert lines[3].split() == ["computed", "cells", "7", "of", "12", "(58.3", "%)"]
    table_lines = lines[lines.index("computed cells per host / site / method / quantity:") + 1:]
    assert table_lines[0].split() == ["host", "site", "method", "quantity", "elements",
                                      "computed", "share"]
    assert table_lines[1].split() == ["MgO", "sub", "PBE", "E", "4", "of", "4", "100.0", "%"]
    assert table_lines[3].split() == ["ZnO", "sub", "HSE", "E", "1", "of", "4", "25.0", "%"]
    # aligned: every table line ends its share column at the same place
    assert len({len(line) for line in table_lines}) == 1


def test_to_wide_refuses_repeated_cells(coverage_frame):
    doubled = pd.concat([coverage_frame, coverage_frame.iloc[[0]]], ignore_index=True)
    with pytest.raises(TableError, match="appears more than once"):
        to_wide(doubled)


# ----------------------------------------------------------------------------- outside checks


def test_symbols_follow_the_iupac_periodic_table(tmp_path):
    # IUPAC Periodic Table of the Elements, 2022: Z = 1 H, 26 Fe, 74 W, 79 Au, 92 U, 118 Og.
    expected = {1: "H", 26: "Fe", 74: "W", 79: "Au", 92: "U", 118: "Og"}
    lines = [HEADER] + [f" {symbol.lower()} ,MgO,sub,PBE,E,{number}.0"
                        for number, symbol in expected.items()]
    frame = read_table(write_lines(tmp_path, lines))
    read_back = {atomic_number(element): element for element in frame["element"]}
    assert read_back == expected


def test_every_symbol_in_mendeleev_data_is_accepted(tmp_path):
    # Element symbols as shipped in mendeleev's bundled database (mendeleev, L. M. Mentel,
    # "mendeleev - A Python resource for properties of chemical elements, ions and isotopes").
    folder = Path(list(importlib.util.find_spec("mendeleev").submodule_search_locations)[0])
    connection = sqlite3.connect(f"{(folder / 'elements.db').as_uri()}?mode=ro", uri=True)
    try:
        shipped = connection.execute(
            "SELECT atomic_number, symbol FROM elements ORDER BY atomic_number").fetchall()
    finally:
        connection.close()
    assert len(shipped) == 118
    lines = [HEADER] + [f"{symbol.upper()},MgO,sub,PBE,E,{number}" for number, symbol in shipped]
    frame = read_table(write_lines(tmp_path, lines))
    assert [(atomic_number(element), element) for element in frame["element"]] == shipped


def test_summaries_of_an_empty_selection(coverage_frame):
    empty = coverage_frame.iloc[0:0]
    assert len(coverage(empty)) == 0
    assert coverage(empty).attrs["totals"]["n_cells"] == 0
    assert "0 of 0 (n/a)" in coverage_text(empty)
    assert table_hash(empty) != table_hash(coverage_frame)
