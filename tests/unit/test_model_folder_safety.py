"""Model folders that cannot run planted code, version drift, the stored descriptor table,
and folders that writing must not harm (dopantgap.store, dopantgap.atomic).

The data are invented (dopantgap.world), not physics.
"""

import hashlib
import json
import os
import pathlib
import shutil
import subprocess
import sys
from io import BytesIO

import joblib
import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

from dopantgap import atomic, elements
from dopantgap.cli import main
from dopantgap.elements import descriptors as element_descriptors
from dopantgap.elements import host_relative
from dopantgap.errors import ModelFolderError
from dopantgap.store import (
    DESCRIPTORS_FILE_NAME,
    MANIFEST_NAME,
    MODEL_FILE_NAME,
    ModelVersionWarning,
    check_model_target,
    installed_versions,
    load_model,
    save_model,
    version_drift,
)
from dopantgap.surrogate import Surrogate
from dopantgap.world import invent_world, observe

SYMBOLS = ("Li", "B", "N", "O", "Na", "Mg", "Al", "P", "S", "Ca")
CELL_COLUMNS = ["element", "host", "site", "method", "quantity"]


@pytest.fixture(autouse=True, scope="module")
def _one_thread():
    # the shared two-core machine: one BLAS thread per process keeps the fits short
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="module")
def world():
    return invent_world(element_symbols=SYMBOLS + ("Fe",), seed=3)


@pytest.fixture(scope="module")
def surrogate(world):
    # Fe is never computed: loaded models must predict an element no table had
    table = observe(world, expensive_fraction=0.4, absent=("Fe",), seed=3)
    return Surrogate(learner="gp", n_folds=2, random_state=0).fit(table)


@pytest.fixture(scope="module")
def saved(surrogate, tmp_path_factory):
    folder = tmp_path_factory.mktemp("model") / "fitted"
    save_model(surrogate, folder, source="invented.csv")
    return folder


@pytest.fixture()
def folder(saved, tmp_path):
    """A private copy of the saved folder that a test may damage."""
    copy = tmp_path / "model"
    shutil.copytree(saved, copy)
    return copy


def _new_element_cells(world):
    cells = world[CELL_COLUMNS].drop_duplicates()
    return cells[cells["element"] == "Fe"].reset_index(drop=True)


def _edit_manifest(folder, change):
    path = folder / MANIFEST_NAME
    manifest = json.loads(path.read_text(encoding="utf-8"))
    change(manifest)
    path.write_text(json.dumps(manifest), encoding="utf-8")


def _refusal(folder, capsys, *fragments, **options):
    """The one-line refusal of the library and of the command line, checked alike."""
    with pytest.raises(ModelFolderError) as caught:
        load_model(folder, **options)
    message = str(caught.value)
    assert "\n" not in message
    for fragment in fragments:
        assert str(fragment) in message
    assert main(["fill", str(folder), "--out", str(folder.parent / "filled.csv")]) == 2
    printed = capsys.readouterr()
    assert printed.err.count("\n") == 1 and "Traceback" not in printed.err
    assert printed.err.startswith("dopantgap fill: ")
    assert not (folder.parent / "filled.csv").exists()
    return message


# ----------------------------------------------------------------- planted code


class _Planted:
    """Unpickling this object writes a file: what a hostile pickle could do instead."""

    def __init__(self, marker):
        self.marker = pathlib.Path(marker)

    def __reduce__(self):
        return pathlib.Path.write_text, (self.marker, "planted code ran")


def _planted_bytes(marker):
    buffer = BytesIO()
    joblib.dump(_Planted(marker), buffer, compress=3)
    return buffer.getvalue()


def _entry(data):
    return {"sha256": hashlib.sha256(data).hexdigest(), "bytes": len(data)}


def test_the_planted_pickle_does_run_code_when_loaded_unchecked(tmp_path):
    # the premise of the tests below: joblib.load of these bytes writes the marker
    marker = tmp_path / "marker"
    joblib.load(BytesIO(_planted_bytes(marker)))
    assert marker.read_text() == "planted code ran"


def _plant_empty_files(folder, data):
    (folder / MODEL_FILE_NAME).write_bytes(data)
    _edit_manifest(folder, lambda manifest: manifest.update(files={}))


def _plant_model_unlisted(folder, data):
    (folder / MODEL_FILE_NAME).write_bytes(data)
    _edit_manifest(folder, lambda manifest: manifest["files"].pop(MODEL_FILE_NAME))


def _plant_hash_mismatch(folder, data):
    (folder / MODEL_FILE_NAME).write_bytes(data)


def _plant_listed_extra(folder, data):
    (folder / "extra.joblib").write_bytes(data)
    _edit_manifest(folder, lambda manifest: manifest["files"].update({"extra.joblib": _entry(data)}))


def _plant_unlisted_extra(folder, data):
    (folder / "extra.joblib").write_bytes(data)


def _plant_files(value):
    def plant(folder, data):
        (folder / MODEL_FILE_NAME).write_bytes(data)
        _edit_manifest(folder, lambda manifest: manifest.update(files=value))

    return plant


def _plant_entry(entry_of):
    def plant(folder, data):
        (folder / MODEL_FILE_NAME).write_bytes(data)
        _edit_manifest(folder, lambda manifest: manifest["files"].update({MODEL_FILE_NAME: entry_of(data)}))

    return plant


@pytest.mark.parametrize(
    "plant, fragment",
    [
        (_plant_empty_files, "does not list surrogate.joblib"),
        (_plant_model_unlisted, "does not list surrogate.joblib"),
        (_plant_hash_mismatch, "does not match its SHA-256"),
        (_plant_files(None), "'files' entry is missing"),
        (_plant_files(["surrogate.joblib"]), "'files' entry is a list"),
        (_plant_files("surrogate.joblib"), "'files' entry is a str"),
        (_plant_entry(lambda data: {"sha256": 12345, "bytes": len(data)}), "not a SHA-256 and a size"),
        (_plant_entry(lambda data: {"sha256": None, "bytes": len(data)}), "not a SHA-256 and a size"),
        (_plant_entry(lambda data: {"sha256": _entry(data)["sha256"], "bytes": str(len(data))}),
         "not a SHA-256 and a size"),
        (_plant_entry(lambda data: [_entry(data)["sha256"], len(data)]), "not a SHA-256 and a size"),
        (_plant_listed_extra, "'extra.joblib', which is not part of a model folder"),
        (_plant_unlisted_extra, "extra.joblib: not listed in manifest.json"),
    ],
    ids=[
        "files-empty", "model-not-listed", "hash-mismatch", "files-null", "files-list",
        "files-string", "hash-number", "hash-null", "size-string", "entry-list",
        "extra-listed", "extra-unlisted",
    ],
)
def test_planted_code_never_runs(folder, tmp_path, capsys, plant, fragment):
    marker = tmp_path / "marker"
    plant(folder, _planted_bytes(marker))
    _refusal(folder, capsys, folder, fragment)
    assert not marker.exists()


def test_a_truncated_descriptor_table_is_refused(folder, capsys):
    path = folder / DESCRIPTORS_FILE_NAME
    path.write_bytes(path.read_bytes()[:-50])
    _refusal(folder, capsys, path, "does not match its SHA-256")


def test_a_descriptor_table_that_does_not_match_the_model_is_refused(folder, capsys):
    # a consistent but edited folder (hash updated with the file): the two copies disagree
    path = folder / DESCRIPTORS_FILE_NAME
    table = pd.read_csv(path, index_col=0)
    table.loc["Fe", "covalent_radius"] += 1.0
    data = table.to_csv(lineterminator="\n").encode()
    path.write_bytes(data)
    _edit_manifest(folder, lambda manifest: manifest["files"].update({DESCRIPTORS_FILE_NAME: _entry(data)}))
    _refusal(folder, capsys, path, "differs from the descriptors inside surrogate.joblib")


def test_an_unreadable_descriptor_table_is_refused(folder, capsys):
    data = b"element,period\nH,not-a-number\n"
    (folder / DESCRIPTORS_FILE_NAME).write_bytes(data)
    _edit_manifest(folder, lambda manifest: manifest["files"].update({DESCRIPTORS_FILE_NAME: _entry(data)}))
    _refusal(folder, capsys, DESCRIPTORS_FILE_NAME, "fit the model again")


def test_a_file_browser_entry_does_not_spoil_a_folder(folder):
    (folder / ".DS_Store").write_bytes(b"\x00\x00\x00\x01Bud1")
    load_model(folder)


# ----------------------------------------------------------------- version drift


def _bumped(version, part):
    """``version`` with its major (0), minor (1) or patch (2) number one higher."""
    numbers = [int(number) for number in version.split(".")[:3]] + [0, 0]
    numbers[part] += 1
    return ".".join(str(number) for number in numbers[: part + 1] + [0] * (2 - part))


def _record(folder, package, version):
    _edit_manifest(folder, lambda manifest: manifest["versions"].update({package: version}))


@pytest.mark.parametrize(
    "package, part",
    [("scikit-learn", 1), ("scikit-learn", 0), ("dopantgap", 1), ("numpy", 0), ("scipy", 0), ("pandas", 0)],
)
def test_a_version_difference_that_could_change_predictions_is_refused(folder, capsys, package, part):
    recorded = _bumped(installed_versions()[package], part)
    _record(folder, package, recorded)
    message = _refusal(folder, capsys, folder, f"{package} {recorded} -> {installed_versions()[package]}",
                       "--accept-other-versions", "allow_version_drift=True")
    assert "could change" in message
    with pytest.warns(ModelVersionWarning, match=package):
        loaded, _ = load_model(folder, allow_version_drift=True)
    assert loaded.levels_


@pytest.mark.parametrize("package, part", [("scikit-learn", 2), ("numpy", 1), ("scipy", 2), ("joblib", 1)])
def test_a_small_version_difference_loads_with_a_warning(folder, package, part):
    recorded = _bumped(installed_versions()[package], part)
    _record(folder, package, recorded)
    with pytest.warns(ModelVersionWarning, match=f"{package} {recorded} -> "):
        load_model(folder)


def test_unrecorded_versions_are_refused(folder, capsys):
    _edit_manifest(folder, lambda manifest: manifest.pop("versions"))
    _refusal(folder, capsys, "scikit-learn None -> ")


def test_version_drift_compares_release_numbers():
    installed = installed_versions()
    assert version_drift(installed) == []
    drift = version_drift({**installed, "scikit-learn": "0.1.0", "numpy": installed["numpy"] + "rc1"})
    assert {(item.package, item.refuses) for item in drift} == {("scikit-learn", True), ("numpy", False)}


def test_the_command_line_goes_on_when_told_and_says_what_differs(folder, capsys, tmp_path):
    recorded = _bumped(installed_versions()["scikit-learn"], 1)
    _record(folder, "scikit-learn", recorded)
    out = tmp_path / "filled.csv"
    assert main(["fill", str(folder), "--out", str(out), "--accept-other-versions"]) == 0
    printed = capsys.readouterr().out
    assert f"note: {folder}: made with other package versions (scikit-learn {recorded} -> " in printed
    assert out.is_file()


# ------------------------------------------------------- the stored descriptor table


def test_the_folder_stores_every_elements_descriptors(saved, surrogate):
    stored = pd.read_csv(saved / DESCRIPTORS_FILE_NAME, index_col=0)
    assert len(stored) == 118 and list(stored.columns) == list(elements.DESCRIPTOR_NAMES)
    # the text reads back bit for bit (shortest round-trip float text, Python's float())
    loaded, _ = load_model(saved)
    pd.testing.assert_frame_equal(loaded.descriptor_values_, elements.descriptor_table(), check_exact=True)
    assert stored.loc["Fe", "covalent_radius"] == elements.descriptor_table(["Fe"]).at["Fe", "covalent_radius"]


@pytest.fixture()
def other_mendeleev(monkeypatch):
    """Descriptor values as a later mendeleev might give them: three of them changed."""
    table, mask, radioactive = element_descriptors._full_tables()
    changed = table.copy()
    changed.loc["Fe", ["covalent_radius", "electronegativity_pauling"]] *= 1.2
    changed.loc["Mg", "ionisation_energy_1"] += 0.5

    def full_tables():
        return changed, mask, radioactive

    for module in (element_descriptors, host_relative):
        monkeypatch.setattr(module, "_full_tables", full_tables)
    return changed


def test_a_loaded_model_predicts_with_its_own_descriptors(saved, surrogate, world, other_mendeleev):
    cells = _new_element_cells(world)
    expected = surrogate.predict(cells)
    loaded, _ = load_model(saved)
    pd.testing.assert_frame_equal(loaded.predict(cells), expected, check_exact=True)
    # refreshed on a grown table, it keeps them too (recorded rounds, replays)
    refreshed = loaded.refreshed(loaded.table_)
    assert refreshed.descriptor_values_ is loaded.descriptor_values_
    # the changed numbers would have mattered: an encoder reading the installed table
    stage = next(iter(loaded.stages_.values()))
    stage_cells = cells[(cells["quantity"] == stage.quantity) & (cells["method"] == stage.method)]
    own = stage.encoder.transform(stage_cells)
    stage.encoder.descriptor_values = None
    try:
        assert not np.array_equal(stage.encoder.transform(stage_cells), own)
    finally:
        stage.encoder.descriptor_values = loaded.descriptor_values_


def test_a_model_fitted_after_the_change_uses_the_new_numbers(surrogate, other_mendeleev):
    table = surrogate.table_
    refitted = Surrogate(learner="gp", n_folds=2, random_state=0).fit(table)
    assert refitted.descriptor_values_.at["Fe", "covalent_radius"] == other_mendeleev.at["Fe", "covalent_radius"]
    assert refitted.descriptor_values_.at["Fe", "covalent_radius"] != surrogate.descriptor_values_.at[
        "Fe", "covalent_radius"
    ]


def test_another_mendeleev_is_noted_with_how_many_values_differ(folder, other_mendeleev):
    _record(folder, "mendeleev", "0.0.1")
    with pytest.warns(ModelVersionWarning, match=r"mendeleev 0\.0\.1, installed .*: 3 descriptor values differ"):
        load_model(folder)


# --------------------------------------------------------- writing must not harm


def test_fit_out_that_would_replace_its_input_is_refused_before_any_work(tmp_path, capsys, monkeypatch):
    def no_fit(*args, **kwargs):
        raise AssertionError("the fit started")

    monkeypatch.setattr(Surrogate, "fit", no_fit)
    row = "element,host,site,method,quantity,value\nMg,GaN,sub_Ga,gga,E_sol,1.0\n"
    data = tmp_path / "data"
    data.mkdir()
    table = data / "table.csv"
    table.write_text(row)
    hosts = data / "hosts.csv"
    hosts.write_text("host,formula\ndiamond,C\n")
    elsewhere = tmp_path / "table.csv"
    elsewhere.write_text(row)
    for arguments, named in (
        ([str(table), "--out", str(table)], table),
        ([str(table), "--out", str(data)], table),
        ([str(elsewhere), "--out", str(data), "--hosts", str(hosts)], hosts),
    ):
        assert main(["fit", *arguments]) == 2
        error = capsys.readouterr().err
        assert error.count("\n") == 1 and f"would replace {named}, which this fit reads" in error
    assert sorted(path.name for path in data.iterdir()) == ["hosts.csv", "table.csv"]
    assert table.read_text() == row


def test_fit_out_over_a_folder_of_other_files_is_refused(tmp_path):
    notes = tmp_path / "results"
    notes.mkdir()
    (notes / "notes.txt").write_text("a year of work")
    with pytest.raises(ModelFolderError, match="holds 'notes.txt'.*not part of a model folder"):
        check_model_target(notes)
    assert (notes / "notes.txt").read_text() == "a year of work"


def test_outputs_inside_a_model_folder_are_refused(folder, capsys):
    before = {path.name: path.read_bytes() for path in folder.iterdir()}
    for command in (
        ["fill", str(folder), "--out", str(folder / MODEL_FILE_NAME)],
        ["fill", str(folder), "--out", str(folder / "filled.csv")],
        ["fill", str(folder), "--out", str(folder.parent / "filled.csv"), "--sites-out", str(folder / "sites.csv")],
        ["next", str(folder), "--out", str(folder / "next.csv")],
        ["explain", str(folder), "--out", str(folder / "explained")],
        ["report", str(folder), "--out", str(folder / "report.html")],
        ["fit", "table.csv", "--out", str(folder / "inner")],
    ):
        assert main(command) == 2
        error = capsys.readouterr().err
        assert error.count("\n") == 1 and f"inside the model folder {folder}" in error
    assert {path.name: path.read_bytes() for path in folder.iterdir()} == before
    load_model(folder)


def test_a_folder_write_that_fails_leaves_the_old_folder(tmp_path, monkeypatch):
    target = tmp_path / "model"
    atomic.write_folder_atomic(target, {"a": b"old a", "b": b"old b"})
    real_write_bytes = pathlib.Path.write_bytes

    def fail_on_b(self, data):
        if self.name == "b":
            raise OSError(28, "No space left on device")
        return real_write_bytes(self, data)

    monkeypatch.setattr(pathlib.Path, "write_bytes", fail_on_b)
    with pytest.raises(OSError, match="No space"):
        atomic.write_folder_atomic(target, {"a": b"new a", "b": b"new b"})
    monkeypatch.undo()
    assert {path.name: path.read_bytes() for path in target.iterdir()} == {"a": b"old a", "b": b"old b"}
    assert [path.name for path in tmp_path.iterdir()] == ["model"]


def test_a_folder_is_swapped_in_without_the_exchange_too(tmp_path, monkeypatch):
    # the two-rename path, for systems without renameat2's exchange
    monkeypatch.setattr(atomic, "_exchange", lambda first, second: False)
    target = tmp_path / "model"
    atomic.write_folder_atomic(target, {"a": b"1"})
    atomic.write_folder_atomic(target, {"b": b"2"})
    assert {path.name: path.read_bytes() for path in target.iterdir()} == {"b": b"2"}
    assert [path.name for path in tmp_path.iterdir()] == ["model"]


def test_folders_left_by_a_killed_run_are_removed(tmp_path):
    finished = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                              text=True, check=True)
    gone = int(finished.stdout)
    abandoned = tmp_path / f".model.new-{gone}-x1"
    abandoned.mkdir()
    running = tmp_path / f".model.new-{os.getpid()}-x2"  # a live process's: left alone
    running.mkdir()
    atomic.write_folder_atomic(tmp_path / "model", {"a": b"1"})
    assert sorted(path.name for path in tmp_path.iterdir()) == sorted(["model", running.name])
