"""A standing fuzz test of the reader: mutated tables give a table or one line naming the file.

Random mutations of a valid (INVENTED) table: bytes inserted, replaced and cut; a byte-order
mark; CRLF and CR line ends; quoting; NaN, infinities, huge and odd numbers; text in any
script and control characters; empty and header-only files; missing, repeated and blank
columns; blank rows; workbook names on text. Every outcome must be a table or a
:class:`~dopantgap.errors.TableError` of one line that starts with the file's name, never
another exception. What a read table feeds (the suspect-value search, the in-memory checks,
the coverage, the wide layout) must hold up too.

Bounded for CI: a fixed number of examples per test, derandomised so that a failure is
reproducible. The deadline guards against a hang (a read of these few-kB files takes
milliseconds); it is not a speed target.
"""

import os
import warnings
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from dopantgap.errors import SuspectValueWarning, TableError
from dopantgap.table import check_frame, coverage_text, read_table, suspect_values, to_wide

FUZZ = settings(
    # DOPANTGAP_FUZZ_EXAMPLES=5000 DOPANTGAP_FUZZ_RANDOM=1 hunts deeper, with fresh draws
    max_examples=int(os.environ.get("DOPANTGAP_FUZZ_EXAMPLES", "400")),
    derandomize=not os.environ.get("DOPANTGAP_FUZZ_RANDOM"),
    deadline=timedelta(seconds=10),
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
    database=None,
)

LONG_ROWS = [
    ["element", "host", "site", "method", "quantity", "value", "note"],
    ["Fe", "MgO", "sub_Mg", "gga", "E_sol", "1.52", "run 1"],
    ["Co", "MgO", "sub_Mg", "gga", "E_sol", "1.31", ""],
    ["Ni", "MgO", "int_oct", "gga", "E_sol", "2.75", "a, b"],
    ["Fe", "MgO", "sub_Mg", "hyb", "E_sol", "1.78", ""],
    ["Cu", "MgO", "sub_Mg", "gga", "E_bind", "-0.91", ""],
    ["Zn", "MgO", "sub_Mg", "gga", "E_bind", "-1.05", ""],
]
WIDE_ROWS = [
    ["element", "MgO/sub_Mg/gga/E_sol", "MgO/int_oct/gga/E_sol", "note"],
    ["Fe", "1.52", "2.81", "x"],
    ["Co", "1.31", "", ""],
    ["Ni", "", "2.75", "y"],
]
ODD_NUMBERS = [
    "nan", "NaN", "inf", "-inf", "Infinity", "1e999", "-1e400", "1e-400", "9" * 400, "1" * 5000,
    "1_000", "1,5", "1.5 eV", "0x1p3", "\u0661\u0662", "\u00b2", "+.5", "-.", ".", "1e", "--1",
    "1.2.3", "\u221e", "0", "-0.0", "999.9999", "1000.0001", "1" * 4301 + "x", "-340.8", "1e-300",
    "5e-324", "-999", " 2.5 ", "2.5e+02",
]
ODD_TEXT = [
    "", " ", "\t", "\x1b[31m", "\n", "\r", '"', '""', "\u202e", "\u00a0", "\ufeff", "/", "Fe/MgO",
    "sUb_mG", "GGA", "SI", "caution", "_line", "std", "\ud7ff", "\U0001f600", "x" * 3000,
]


def to_csv_text(rows, line_end="\n", quote_all=False):
    def cell(text):
        if quote_all or any(mark in text for mark in (",", '"', "\n", "\r")):
            return '"' + text.replace('"', '""') + '"'
        return text

    return line_end.join(",".join(cell(field) for field in row) for row in rows) + line_end


@st.composite
def mutated_rows(draw):
    rows = [list(row) for row in draw(st.sampled_from([LONG_ROWS, WIDE_ROWS]))]
    for _ in range(draw(st.integers(0, 4))):
        # cell-level changes are drawn more often than the ones that wreck the layout
        kind = draw(st.sampled_from([
            "cell", "number", "number", "text", "text", "cell", "drop_column", "repeat_column",
            "blank_row", "blank_row", "cut_rows", "extra_field", "short_row", "header_only",
            "swap_rows",
        ]))
        if not rows or not rows[0]:
            break
        width = len(rows[0])
        if kind in ("cell", "number", "text"):
            row = draw(st.integers(0, len(rows) - 1))
            if not rows[row]:
                continue
            column = draw(st.integers(0, len(rows[row]) - 1))
            if kind == "number":
                rows[row][column] = draw(st.sampled_from(ODD_NUMBERS))
            elif kind == "text":
                rows[row][column] = draw(st.sampled_from(ODD_TEXT))
            else:
                rows[row][column] = draw(st.text(max_size=12))
        elif kind == "drop_column" and width > 1:
            column = draw(st.integers(0, width - 1))
            rows = [row[:column] + row[column + 1:] for row in rows]
        elif kind == "repeat_column":
            column = draw(st.integers(0, width - 1))
            rows = [row + [row[column]] if column < len(row) else row for row in rows]
        elif kind == "blank_row":
            position = draw(st.integers(0, len(rows)))
            rows.insert(position, draw(st.sampled_from([[""] * width, [" "] * width, [""], []])))
        elif kind == "cut_rows":
            rows = rows[: draw(st.integers(0, len(rows)))]
        elif kind == "extra_field" and len(rows) > 1:
            rows[draw(st.integers(1, len(rows) - 1))].append(draw(st.sampled_from(["", "x", "1.0"])))
        elif kind == "short_row" and len(rows) > 1:
            row = draw(st.integers(1, len(rows) - 1))
            rows[row] = rows[row][: draw(st.integers(0, len(rows[row])))]
        elif kind == "header_only":
            rows = rows[:1]
        elif kind == "swap_rows" and len(rows) > 2:
            first, second = draw(st.integers(0, len(rows) - 1)), draw(st.integers(0, len(rows) - 1))
            rows[first], rows[second] = rows[second], rows[first]
    return rows


@st.composite
def table_bytes(draw):
    rows = draw(mutated_rows())
    text = to_csv_text(rows, line_end=draw(st.sampled_from(["\n", "\r\n", "\r"])),
                       quote_all=draw(st.booleans()))
    data = text.encode("utf-8", errors="surrogatepass")
    if draw(st.booleans()):
        data = b"\xef\xbb\xbf" + data
    for _ in range(draw(st.sampled_from([0, 0, 0, 1, 1, 2, 3]))):
        kind = draw(st.sampled_from(["insert", "replace", "cut", "stray_quote", "truncate"]))
        position = draw(st.integers(0, len(data)))
        if kind == "insert":
            data = data[:position] + draw(st.binary(min_size=1, max_size=4)) + data[position:]
        elif kind == "replace" and position < len(data):
            data = data[:position] + draw(st.binary(min_size=1, max_size=1)) + data[position + 1:]
        elif kind == "cut":
            data = data[:position] + data[position + draw(st.integers(1, 8)):]
        elif kind == "stray_quote":
            data = data[:position] + b'"' + data[position:]
        else:
            data = data[:position]
    return data


def read_or_refuse(path):
    """The table, or None after checking the refusal is one line naming the file."""
    try:
        return read_table(path)
    except TableError as error:
        message = str(error)
        assert "\n" not in message and "\r" not in message, message
        assert message.startswith(f"{path}:") or message.startswith(f"{path} "), message
        return None


def downstream_holds(frame):
    """What a read table feeds raises nothing but a one-line TableError."""
    assert list(frame.columns[:6]) == ["element", "host", "site", "method", "quantity", "value"]
    assert np.isfinite(frame["value"]).all()
    suspect_values(frame)
    coverage_text(frame)
    to_wide(frame)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SuspectValueWarning)
        checked = check_frame(frame, suspect_values="warn")
    pd.testing.assert_frame_equal(checked, frame)


@FUZZ
@given(data=table_bytes(), suffix=st.sampled_from([".csv", ".csv", ".csv", ".txt", ".xlsx"]))
def test_mutated_tables_read_or_are_refused_in_one_line(tmp_path_factory, data, suffix):
    path = tmp_path_factory.mktemp("fuzz") / f"table{suffix}"
    path.write_bytes(data)
    frame = read_or_refuse(path)
    if frame is not None:
        downstream_holds(frame)


@FUZZ
@given(data=st.binary(max_size=300))
def test_arbitrary_bytes_read_or_are_refused_in_one_line(tmp_path_factory, data):
    path = tmp_path_factory.mktemp("fuzz") / "table.csv"
    path.write_bytes(data)
    frame = read_or_refuse(path)
    if frame is not None:
        downstream_holds(frame)


LABELS = st.sampled_from(["sub_Mg", "int_oct", "seg", "gga", "hyb", "E_sol", "E_bind", "MgO", "GaN", "C",
                          "sub_mg", "Hyb", "int oct", "\u00e9t\u00e9", "\x1b[1m"])
VALUES = st.one_of(st.floats(-1000, 1000), st.sampled_from([0.0, -0.0, 1e-300, 999.999, -340.8, 1.5]))


@FUZZ
@given(rows=st.lists(st.tuples(st.sampled_from(["Fe", "Co", "Ni", "Cu", "Zn", "Ti", "V", "Cr", "Mn", "fe"]),
                               LABELS, LABELS, LABELS, LABELS, VALUES), min_size=1, max_size=40))
def test_readable_tables_of_any_values_hold_up_downstream(tmp_path_factory, rows):
    """Tables that read (any finite values, labels of any kind) feed the rest without error."""
    lines = [["element", "host", "site", "method", "quantity", "value"]]
    lines += [[element, host, site, method, quantity, repr(value)] for element, host, site, method, quantity, value in rows]
    path = tmp_path_factory.mktemp("fuzz") / "table.csv"
    path.write_text(to_csv_text(lines), encoding="utf-8")
    frame = read_or_refuse(path)
    if frame is not None:
        downstream_holds(frame)


CELLS = st.one_of(
    st.none(), st.just(float("nan")), st.booleans(), st.integers(min_value=-(10 ** 400), max_value=10 ** 400),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8), st.sampled_from(ODD_TEXT + ODD_NUMBERS),
    st.sampled_from(["Fe", "co", " Ni ", "MgO", "sub_Mg", "gga", "E_sol", "1.5", "-0.9"]),
)


@FUZZ
@given(rows=st.lists(st.fixed_dictionaries({
    "element": CELLS, "host": CELLS, "site": CELLS, "method": CELLS, "quantity": CELLS, "value": CELLS,
}), max_size=6), drop=st.sampled_from([None, "value", "host"]))
def test_frames_in_memory_pass_or_are_refused_in_one_line(rows, drop):
    names = ["element", "host", "site", "method", "quantity", "value"]
    # built column by column as objects: older pandas overflows inferring a dtype for
    # integers like 10**400, before dopantgap ever sees the frame
    frame = pd.DataFrame({name: pd.Series([row[name] for row in rows], dtype=object)
                          for name in names})
    if drop:
        frame = frame.drop(columns=drop)
    before = frame.copy()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", SuspectValueWarning)
            checked = check_frame(frame, suspect_values="warn")
    except TableError as error:
        assert "\n" not in str(error) and "\r" not in str(error)
    else:
        assert checked["value"].dtype == np.float64 and np.isfinite(checked["value"]).all()
    pd.testing.assert_frame_equal(frame, before)


@pytest.mark.parametrize("text", ["", "\ufeff", ",,,\n", "\n\n\r\n", " , ,\n,,\n", "element,host\n"])
def test_empty_blank_and_header_only_files(tmp_path, text):
    path = tmp_path / "table.csv"
    path.write_text(text, encoding="utf-8")
    assert read_or_refuse(path) is None
