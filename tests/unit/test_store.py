"""Tests of model folders (dopantgap.store): round trip, manifest, refusal of bad folders.

The data are invented (dopantgap.world), not physics.
"""

import hashlib
import json
import pathlib
import shutil
from importlib import metadata

import joblib
import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

import dopantgap
from dopantgap import elements
from dopantgap.errors import ModelFolderError
from dopantgap.features import DEFAULT_DESCRIPTORS
from dopantgap.store import (
    DESCRIPTORS_FILE_NAME,
    MANIFEST_NAME,
    MODEL_FILE_NAME,
    load_model,
    read_manifest,
    save_model,
)
from dopantgap.surrogate import Surrogate
from dopantgap.table import table_hash
from dopantgap.world import invent_world, observe

SEED = 5
SYMBOLS = ("Li", "B", "N", "O", "Na", "Mg", "Al", "P", "S", "Ca", "Ti", "Fe", "Cu", "Zn")
CELL_COLUMNS = ["element", "host", "site", "method", "quantity"]


@pytest.fixture(autouse=True, scope="module")
def _one_thread():
    # on the shared 2-core machine, two BLAS threads fighting a busy neighbour made one
    # fit 4x slower; a single thread keeps the module to seconds
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="module")
def world():
    return invent_world(element_symbols=SYMBOLS, seed=7)


@pytest.fixture(scope="module")
def table(world):
    # Fe is never computed, so loaded models also have to predict a new element
    return observe(world, expensive_fraction=0.35, absent=("Fe",), seed=7)


def _fit(table):
    return Surrogate(learner="gp", n_folds=3, random_state=SEED).fit(table)


@pytest.fixture(scope="module")
def surrogate(table):
    return _fit(table)


@pytest.fixture(scope="module")
def saved(surrogate, tmp_path_factory):
    folder = tmp_path_factory.mktemp("model") / "fitted"
    manifest = save_model(surrogate, folder, source="invented.csv")
    return folder, manifest


@pytest.fixture()
def copy_of_saved(saved, tmp_path):
    """A private copy of the saved folder that a test may damage."""
    folder = tmp_path / "copy"
    shutil.copytree(saved[0], folder)
    return folder


def _cells(world):
    return world[CELL_COLUMNS].drop_duplicates().reset_index(drop=True)


def test_load_gives_identical_predictions(surrogate, saved, world):
    folder, manifest = saved
    loaded, loaded_manifest = load_model(folder)
    assert loaded_manifest == manifest
    cells = _cells(world)
    expected = surrogate.predict(cells)
    assert set(expected["scenario"]) >= {"", "new-element", "new-cell"}
    pd.testing.assert_frame_equal(loaded.predict(cells), expected, check_exact=True)
    joint_cells = cells[(cells["element"] == "Fe") & (cells["method"] == "gga") & (cells["quantity"] == "E_sol")]
    for original, reloaded in zip(surrogate.predict_joint(joint_cells), loaded.predict_joint(joint_cells)):
        np.testing.assert_array_equal(original, reloaded)


def test_manifest_records_what_made_the_model(surrogate, saved, table):
    folder, manifest = saved
    on_disk = json.loads((folder / MANIFEST_NAME).read_text(encoding="utf-8"))
    assert on_disk == manifest
    assert read_manifest(folder) == manifest

    assert manifest["table"]["sha256"] == table_hash(table)
    # the table hash ignores row order but not values
    assert manifest["table"]["sha256"] == table_hash(table.sample(frac=1.0, random_state=1))
    changed = table.copy()
    changed.loc[0, "value"] += 1e-9
    assert manifest["table"]["sha256"] != table_hash(changed)
    assert manifest["table"]["rows"] == len(table)
    assert manifest["table"]["elements"] == len(SYMBOLS) - 1
    assert manifest["table"]["source"] == "invented.csv"

    # file hashes and sizes checked with hashlib on the bytes on disk
    on_disk = {name: (folder / name).read_bytes() for name in (MODEL_FILE_NAME, DESCRIPTORS_FILE_NAME)}
    assert manifest["files"] == {
        name: {"sha256": hashlib.sha256(data).hexdigest(), "bytes": len(data)} for name, data in on_disk.items()
    }

    versions = manifest["versions"]
    assert versions["dopantgap"] == dopantgap.__version__
    for package in ("numpy", "scipy", "pandas", "scikit-learn", "joblib", "mendeleev"):
        assert versions[package] == metadata.version(package)
    assert manifest["seed"] == SEED
    assert manifest["learner"] == "gp"
    assert manifest["levels"] == ["gga", "hyb"]

    units = {descriptor.name: descriptor.unit for descriptor in elements.DESCRIPTORS}
    assert [entry["name"] for entry in manifest["descriptors"]] == list(DEFAULT_DESCRIPTORS)
    for entry in manifest["descriptors"]:
        assert entry["unit"] == units[entry["name"]]
        assert entry["source"]
    assert {entry["unit"] for entry in manifest["descriptors"]} >= {"pm", "eV"}

    records = manifest["cross_validation"]
    # JSON keeps floats exactly (shortest repr), so the records compare equal
    assert records == surrogate.cv_metrics_.to_dict(orient="records")
    scenarios = {record["scenario"] for record in records}
    assert scenarios == {"new-cell", "new-element", "upgrade"}
    for record in records:
        assert set(record) >= {"learner", "scenario", "quantity", "n", "mae", "rmse",
                               "coverage_raw", "coverage_calibrated"}
        assert record["n"] > 0 and record["mae"] >= 0 and record["rmse"] >= record["mae"]


def _assert_refused(folder, *fragments):
    with pytest.raises(ModelFolderError) as caught:
        load_model(folder)
    message = str(caught.value)
    for fragment in fragments:
        assert str(fragment) in message
    return message


def test_flipped_byte_is_refused(copy_of_saved):
    path = copy_of_saved / MODEL_FILE_NAME
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0x01
    path.write_bytes(bytes(data))
    _assert_refused(copy_of_saved, path, "SHA-256", "altered")


def test_truncated_model_file_is_refused(copy_of_saved):
    path = copy_of_saved / MODEL_FILE_NAME
    path.write_bytes(path.read_bytes()[:-100])
    _assert_refused(copy_of_saved, path, "SHA-256", "truncated")


def test_model_file_replaced_by_another_loadable_file_is_refused(copy_of_saved, surrogate):
    # a complete, loadable joblib file, just not the one the manifest recorded
    path = copy_of_saved / MODEL_FILE_NAME
    joblib.dump(surrogate, path, compress=1)
    assert joblib.load(path) is not None
    _assert_refused(copy_of_saved, path, "SHA-256")


def test_missing_model_file_is_refused(copy_of_saved):
    path = copy_of_saved / MODEL_FILE_NAME
    path.unlink()
    _assert_refused(copy_of_saved, path, "missing")


def test_missing_manifest_is_refused_with_what_to_do(copy_of_saved):
    path = copy_of_saved / MANIFEST_NAME
    path.unlink()
    _assert_refused(copy_of_saved, path, "missing", "dopantgap fit")


def test_folder_that_does_not_exist_is_refused(tmp_path):
    folder = tmp_path / "never-written"
    _assert_refused(folder, folder, "no such model folder", "dopantgap fit")


@pytest.mark.parametrize(
    "content, fragment",
    [
        (json.dumps({"format": "some-other-tool", "format_version": 1}), "not a dopantgap model manifest"),
        (json.dumps(["a", "list"]), "not a dopantgap model manifest"),
        ("{ this is not json", "not a readable manifest"),
        (b"\xff\xfe\x00binary", "not a readable manifest"),
    ],
    ids=["other-format", "not-an-object", "broken-json", "not-utf8"],
)
def test_manifest_from_elsewhere_is_refused(copy_of_saved, content, fragment):
    path = copy_of_saved / MANIFEST_NAME
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    _assert_refused(copy_of_saved, path, fragment)


def test_manifest_of_another_format_version_is_refused(copy_of_saved):
    path = copy_of_saved / MANIFEST_NAME
    manifest = json.loads(path.read_text(encoding="utf-8"))
    manifest["format_version"] = 99
    path.write_text(json.dumps(manifest), encoding="utf-8")
    _assert_refused(copy_of_saved, path, "99", "fit the model again")


def test_edited_manifest_hash_is_refused(copy_of_saved):
    path = copy_of_saved / MANIFEST_NAME
    manifest = json.loads(path.read_text(encoding="utf-8"))
    manifest["files"][MODEL_FILE_NAME]["sha256"] = "0" * 64
    path.write_text(json.dumps(manifest), encoding="utf-8")
    _assert_refused(copy_of_saved, copy_of_saved / MODEL_FILE_NAME, "SHA-256")


def test_same_seed_and_table_give_the_same_model(surrogate, saved, table, world, tmp_path):
    again = _fit(table)
    manifest = save_model(again, tmp_path / "again", source="invented.csv")
    # nothing in the folder depends on when or where it was written
    assert manifest == saved[1]
    assert (tmp_path / "again" / MODEL_FILE_NAME).read_bytes() == (saved[0] / MODEL_FILE_NAME).read_bytes()
    loaded, _ = load_model(tmp_path / "again")
    cells = _cells(world)
    pd.testing.assert_frame_equal(loaded.predict(cells), surrogate.predict(cells), check_exact=True)


def test_save_leaves_only_the_folder_files(saved):
    assert sorted(path.name for path in saved[0].iterdir()) == sorted(
        [MANIFEST_NAME, MODEL_FILE_NAME, DESCRIPTORS_FILE_NAME]
    )
    # nothing beside the folder either (the folder is written beside it and swapped in)
    assert [path.name for path in saved[0].parent.iterdir()] == [saved[0].name]


def test_interrupted_save_keeps_the_previous_model(copy_of_saved, surrogate, monkeypatch):
    before = {path.name: path.read_bytes() for path in copy_of_saved.iterdir()}
    real_write_bytes = pathlib.Path.write_bytes

    def disk_full(self, data):
        real_write_bytes(self, data[: len(data) // 2])
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(pathlib.Path, "write_bytes", disk_full)
    with pytest.raises(OSError, match="No space left"):
        save_model(surrogate, copy_of_saved)
    monkeypatch.undo()
    # no half-written file under any name, no temporary left behind
    assert sorted(path.name for path in copy_of_saved.iterdir()) == sorted(before)
    assert [path.name for path in copy_of_saved.parent.iterdir()] == [copy_of_saved.name]
    for name, data in before.items():
        assert (copy_of_saved / name).read_bytes() == data
    load_model(copy_of_saved)


def test_interrupted_first_save_leaves_no_loadable_folder(surrogate, tmp_path, monkeypatch):
    folder = tmp_path / "first"
    real_write_bytes = pathlib.Path.write_bytes

    def fail_on_manifest(self, data):
        if self.name == MANIFEST_NAME:
            raise OSError(5, "Input/output error")
        return real_write_bytes(self, data)

    monkeypatch.setattr(pathlib.Path, "write_bytes", fail_on_manifest)
    with pytest.raises(OSError):
        save_model(surrogate, folder)
    monkeypatch.undo()
    # the folder is swapped in whole or not at all, and nothing is left beside it
    assert list(tmp_path.iterdir()) == []
    _assert_refused(folder, folder, "no such model folder")
