"""Package-level promises: the public names, the shipped demo data and model folder."""

import json
from pathlib import Path

import pandas as pd

import dopantgap
from dopantgap.demo import demo_table
from dopantgap.table import read_table, table_hash

ROOT = Path(__file__).resolve().parents[2]


def test_all_is_sorted_and_complete():
    module = type(dopantgap)
    public = {
        name for name in dir(dopantgap)
        if not name.startswith("_") and not isinstance(getattr(dopantgap, name), module)
    }
    assert dopantgap.__all__ == sorted(dopantgap.__all__)
    assert public <= set(dopantgap.__all__)
    for name in dopantgap.__all__:
        assert hasattr(dopantgap, name), name


def test_shipped_demo_table_is_the_invented_function():
    shipped = read_table(ROOT / "data_demo" / "invented_impurities.csv")
    made = demo_table()
    columns = ["element", "host", "site", "method", "quantity", "value", "note"]
    pd.testing.assert_frame_equal(shipped[columns].reset_index(drop=True), made[columns].reset_index(drop=True))
    assert (shipped["note"] == "invented").all()


def test_demo_model_folder_was_made_from_the_demo_table():
    manifest = json.loads((ROOT / "models" / "demo" / "manifest.json").read_text())
    assert manifest["table"]["sha256"] == table_hash(demo_table())
