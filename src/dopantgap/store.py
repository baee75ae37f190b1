"""Model folders: the fitted surrogate, the descriptors it was fitted with, and a manifest.

A folder holds ``surrogate.joblib`` (the fitted model), ``descriptors.csv`` (every
element's descriptors as the model was fitted with them: the model predicts with these
numbers, whatever mendeleev is installed later) and ``manifest.json``. The manifest
records the input table's hash, each file's SHA-256 and size, package versions, the
seed, the levels, the descriptors (with unit and source) and the cross-validation
metrics.

Loading reads each file once, checks it against the manifest and unpickles the very
bytes it checked. It refuses a manifest that does not list every file the folder needs,
a folder holding a file its manifest does not list, and (unless told to go on) a model
made with versions of scikit-learn, dopantgap, numpy, scipy, pandas or joblib whose
differences could change its predictions without a sign. The hashes sit beside the
files they protect: they detect damage, not tampering. A joblib file runs code when it
is loaded: open model folders only from hands you trust.

Writing builds the whole folder beside the target and swaps it in at the end
(``atomic.write_folder_atomic``): an interrupted fit leaves the previous model as it was.
"""

import csv
import hashlib
import io
import json
import os
import re
import warnings
from importlib import metadata
from pathlib import Path
from typing import NamedTuple

import joblib
import numpy as np
import pandas as pd
from sklearn.exceptions import InconsistentVersionWarning

from dopantgap import __version__, elements
from dopantgap.atomic import write_folder_atomic
from dopantgap.errors import DopantgapError, ModelFolderError, ModelVersionWarning
from dopantgap.table import table_hash
from dopantgap.surrogate.stages import correction_forms

__all__ = [
    "DESCRIPTORS_FILE_NAME",
    "MANIFEST_NAME",
    "MODEL_FILES",
    "MODEL_FILE_NAME",
    "ModelVersionWarning",
    "VersionDifference",
    "check_model_target",
    "installed_versions",
    "load_model",
    "model_folder_containing",
    "read_manifest",
    "save_model",
    "version_drift",
]

MANIFEST_NAME = "manifest.json"
MODEL_FILE_NAME = "surrogate.joblib"
DESCRIPTORS_FILE_NAME = "descriptors.csv"
#: Every file a model folder needs besides its manifest; the manifest must list each.
MODEL_FILES = (MODEL_FILE_NAME, DESCRIPTORS_FILE_NAME)
_FORMAT = "dopantgap-model-folder"
_FORMAT_VERSION = 2
_PACKAGES = ("numpy", "scipy", "pandas", "scikit-learn", "joblib", "mendeleev")
# Package -> how many leading version numbers (1: major, 2: major.minor) must agree for
# a model to load without being told to go on; any other difference is a warning.
# scikit-learn changes its estimators' fitted state between minor releases (it warns on
# any pickle of another version) and so may dopantgap; numpy, scipy, pandas and joblib
# read their own pickles across minor releases (common practice, no source).
_REFUSE_UNLESS_SAME = {"scikit-learn": 2, "dopantgap": 2, "numpy": 1, "scipy": 1, "pandas": 1, "joblib": 1}
# Files an operating system's file browser may add to any folder; never read.
_SYSTEM_FILES = frozenset({".DS_Store", "Thumbs.db", "desktop.ini"})
# Hidden files the atomic writes of model folder format 1 could leave behind.
_OLD_PARTIAL = re.compile(r"^\.(manifest\.json|surrogate\.joblib)\..*\.part$")
_SHA256 = re.compile(r"^[0-9a-f]{64}$")


class VersionDifference(NamedTuple):
    """One package whose version differs from the one a model was made with."""

    package: str
    recorded: object
    installed: object
    refuses: bool

    def __str__(self):
        return f"{self.package} {self.recorded} -> {self.installed}"


def _sha256(data):
    return hashlib.sha256(data).hexdigest()


def installed_versions():
    """Versions of dopantgap and the packages a model folder records, as installed now."""
    versions = {"dopantgap": __version__}
    for package in _PACKAGES:
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            versions[package] = None
    return versions


def _plain(value):
    """JSON-safe copy of metric values (NumPy scalars to Python)."""
    if isinstance(value, dict):
        return {str(key): _plain(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(item) for item in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def _descriptor_csv(values):
    """The model's descriptor table as CSV bytes (shortest round-trip float text)."""
    return values.to_csv(lineterminator="\n").encode("utf-8")


def _is_model_folder(folder):
    """Whether ``folder`` holds a manifest of a dopantgap model folder (any format)."""
    try:
        manifest = json.loads((folder / MANIFEST_NAME).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return False
    return isinstance(manifest, dict) and manifest.get("format") == _FORMAT


def model_folder_containing(path):
    """The model folder that ``path`` is, or lies inside, or None.

    Parameters
    ----------
    path : str or Path
        Any path, existing or not.

    Returns
    -------
    Path or None
        The nearest folder among ``path`` and its parents that holds a dopantgap model
        manifest.
    """
    path = Path(os.path.abspath(path))
    for candidate in (path, *path.parents):
        if candidate.is_dir() and _is_model_folder(candidate):
            return candidate
    return None


def _inside(path, folder):
    """Whether ``path`` is ``folder`` or lies inside it (both resolved)."""
    path, folder = Path(os.path.realpath(path)), Path(os.path.realpath(folder))
    return path == folder or folder in path.parents


def check_model_target(folder, inputs=()):
    """Refuse, before any work, a model folder that writing would harm.

    Writing a model folder replaces the whole folder, so it may replace only a folder
    that holds nothing but model folder files (or nothing at all).

    Parameters
    ----------
    folder : str or Path
        Where a model folder is to be written. A symbolic link is followed.
    inputs : sequence of str or Path or None, default=()
        Files the fit reads (the table, a host file); None entries are skipped.

    Returns
    -------
    Path
        The folder to write (the link's target for a symbolic link).

    Raises
    ------
    ModelFolderError
        If the folder would hold or replace an input, lies inside another model
        folder, is a file, or holds files that are not part of a model folder.
    """
    folder = Path(folder)
    if folder.is_symlink():
        folder = Path(os.path.realpath(folder))
    for source in inputs:
        if source is not None and _inside(source, folder):
            raise ModelFolderError(
                f"{folder}: the model folder would replace {source}, which this fit reads "
                f"(a model folder is written whole); choose another folder for the model."
            )
    outer = model_folder_containing(folder.parent)
    if outer is not None:
        raise ModelFolderError(
            f"{folder}: lies inside the model folder {outer}, which would then refuse to load "
            f"(it holds only the files its manifest lists); choose a folder outside it."
        )
    if os.path.lexists(folder) and not folder.is_dir():
        raise ModelFolderError(f"{folder}: is a file, not a folder; choose a folder name for the model.")
    if folder.is_dir():
        known = {MANIFEST_NAME, *MODEL_FILES, *_SYSTEM_FILES}
        foreign = sorted(
            entry.name for entry in folder.iterdir()
            if entry.name not in known and not _OLD_PARTIAL.match(entry.name)
        )
        if foreign:
            raise ModelFolderError(
                f"{folder}: holds {foreign[0]!r}"
                + (f" and {len(foreign) - 1} other entries" if len(foreign) > 1 else "")
                + ", which are not part of a model folder; writing the model replaces the whole "
                "folder, so choose a new folder (or move them out)."
            )
    return folder


def save_model(surrogate, folder, source=None, validation=None):
    """Write a fitted surrogate, its descriptor table and its manifest to ``folder``.

    The folder is written whole beside ``folder`` and swapped in at the end, so an
    interrupted save leaves the previous folder (if any) as it was.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    folder : str or Path
        Created if needed; an existing model folder there is replaced (see
        :func:`check_model_target` for what is refused).
    source : str or None, default=None
        Where the table came from (a path), recorded in the manifest.
    validation : DataFrame or None, default=None
        ``validate.validation_metrics`` output (learners and baselines, out of fold),
        recorded in the manifest under ``validation``.

    Returns
    -------
    dict
        The manifest written.

    Raises
    ------
    ModelFolderError
        Where :func:`check_model_target` refuses the folder.
    """
    folder = check_model_target(folder)
    buffer = io.BytesIO()
    joblib.dump(surrogate, buffer, compress=3)
    contents = {
        MODEL_FILE_NAME: buffer.getvalue(),
        DESCRIPTORS_FILE_NAME: _descriptor_csv(surrogate.descriptor_values_),
    }
    descriptors = {d.name: d for d in elements.DESCRIPTORS}
    manifest = {
        "format": _FORMAT,
        "format_version": _FORMAT_VERSION,
        "table": {
            "source": None if source is None else str(source),
            "sha256": table_hash(surrogate.table_),
            "rows": int(len(surrogate.table_)),
            "elements": int(surrogate.table_["element"].nunique()),
        },
        "files": {name: {"sha256": _sha256(data), "bytes": len(data)} for name, data in contents.items()},
        "versions": installed_versions(),
        # the integer the fit drew from (random_state may be None or a generator;
        # models fitted before seed_ existed had a plain int)
        "seed": int(getattr(surrogate, "seed_", surrogate.random_state)),
        "learner": surrogate.learner_,
        "levels": list(surrogate.levels_),
        "correction": bool(surrogate.correction),
        "correction_forms": correction_forms(surrogate),
        "descriptors": [
            {"name": name, "unit": descriptors[name].unit, "source": descriptors[name].source}
            for name in surrogate.descriptors_
        ],
        "host_relative": list(elements.HOST_RELATIVE_NAMES),
        "hosts": _plain(surrogate.compositions_),
        "cross_validation": _plain(surrogate.cv_metrics_.to_dict(orient="records")),
        "first_look": _first_look_records(surrogate),
        "calibration_borrowed": sorted(surrogate.calibration_.borrowed_),
    }
    if validation is not None:
        manifest["validation"] = _plain(validation.to_dict(orient="records"))
    contents[MANIFEST_NAME] = (json.dumps(manifest, indent=2, sort_keys=True) + "\n").encode("utf-8")
    write_folder_atomic(folder, contents)
    return manifest


def _first_look_records(surrogate):
    """The fit's first look (``Surrogate.first_look_``) as plain records, or None."""
    record = getattr(surrogate, "first_look_", None)
    return None if record is None else _plain(record.to_dict(orient="records"))


def read_manifest(folder):
    """The manifest of a model folder, checked for shape (not yet the files)."""
    folder = Path(folder)
    path = folder / MANIFEST_NAME
    if not folder.is_dir():
        raise ModelFolderError(
            f"{folder}: no such model folder; make one with 'dopantgap fit TABLE --out {folder}'."
        )
    if not path.is_file():
        raise ModelFolderError(
            f"{path}: missing; this is not a complete model folder (an interrupted fit?). "
            f"Run 'dopantgap fit TABLE --out {folder}' again."
        )
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as error:
        raise ModelFolderError(f"{path}: not a readable manifest ({error}); fit the model again.") from error
    if not isinstance(manifest, dict) or manifest.get("format") != _FORMAT:
        raise ModelFolderError(f"{path}: not a dopantgap model manifest; fit the model again.")
    if manifest.get("format_version") != _FORMAT_VERSION:
        raise ModelFolderError(
            f"{path}: model folder format {manifest.get('format_version')!r}, this dopantgap reads "
            f"{_FORMAT_VERSION}; fit the model again with this version."
        )
    return manifest


def _release(version):
    """(major, minor, patch) of a version string; None when it has no leading number."""
    match = re.match(r"\s*(\d+)(?:\.(\d+))?(?:\.(\d+))?", version) if isinstance(version, str) else None
    return None if match is None else tuple(int(part or 0) for part in match.groups())


def version_drift(recorded):
    """How the package versions a model was made with differ from those installed.

    Parameters
    ----------
    recorded : dict
        Package -> version, as in a manifest's ``versions``.

    Returns
    -------
    list of VersionDifference
        One per package that differs; ``refuses`` is True where the difference could
        change predictions without a sign (scikit-learn or dopantgap major or minor
        version; numpy, scipy, pandas or joblib major version; an unknown version).
        mendeleev is not compared here: the folder keeps its own descriptor table.
    """
    installed = installed_versions()
    recorded = recorded if isinstance(recorded, dict) else {}
    differences = []
    for package, parts in _REFUSE_UNLESS_SAME.items():
        then, now = recorded.get(package), installed.get(package)
        if then == now:
            continue
        then_release, now_release = _release(then), _release(now)
        refuses = then_release is None or now_release is None or then_release[:parts] != now_release[:parts]
        differences.append(VersionDifference(package, then, now, refuses))
    return differences


def _listed_files(manifest, path):
    """The manifest's file list, refused unless it lists exactly the files a folder needs."""
    files = manifest.get("files")
    if not isinstance(files, dict):
        shown = "missing" if files is None else f"a {type(files).__name__}"
        raise ModelFolderError(
            f"{path}: its 'files' entry is {shown}, not the folder's files with their SHA-256; "
            f"refusing to load the folder. Fit the model again."
        )
    for name in MODEL_FILES:
        if name not in files:
            raise ModelFolderError(
                f"{path}: does not list {name} with its SHA-256, so it cannot be checked; "
                f"refusing to load the folder. Fit the model again."
            )
    for name, entry in files.items():
        if name not in MODEL_FILES:
            raise ModelFolderError(
                f"{path}: lists {name!r}, which is not part of a model folder; refusing to load "
                f"the folder. Fit the model again."
            )
        size = entry.get("bytes") if isinstance(entry, dict) else None
        digest = entry.get("sha256") if isinstance(entry, dict) else None
        if (
            not isinstance(digest, str) or not _SHA256.match(digest)
            or isinstance(size, bool) or not isinstance(size, int) or size < 0
        ):
            raise ModelFolderError(
                f"{path}: the entry of {name} is not a SHA-256 and a size in bytes; refusing to "
                f"load the folder. Fit the model again."
            )
    return files


def _checked_bytes(path, entry):
    """The file's bytes, read once, refused unless they match their manifest entry."""
    if not path.is_file():
        raise ModelFolderError(f"{path}: missing from the model folder; fit the model again.")
    data = path.read_bytes()
    if len(data) != entry["bytes"] or _sha256(data) != entry["sha256"]:
        raise ModelFolderError(
            f"{path}: does not match its SHA-256 in {MANIFEST_NAME} (truncated or altered); "
            f"refusing to load it. Fit the model again."
        )
    return data


def _refuse_unlisted(folder, files):
    """Refuse a folder that holds an entry its manifest does not list."""
    expected = {MANIFEST_NAME, *files, *_SYSTEM_FILES}
    unlisted = sorted(name for name in os.listdir(folder) if name not in expected)
    if unlisted:
        raise ModelFolderError(
            f"{folder / unlisted[0]}: not listed in {MANIFEST_NAME}"
            + (f" (nor {len(unlisted) - 1} other entries)" if len(unlisted) > 1 else "")
            + "; a model folder holds only the files its manifest lists, so refusing to load "
            "it. Move the file out of the folder, or fit the model again."
        )


def _check_versions(folder, manifest, allow_version_drift):
    """Refuse or warn about package versions that differ from the recorded ones."""
    differences = version_drift(manifest.get("versions"))
    if not differences:
        return differences
    serious = [difference for difference in differences if difference.refuses]
    listed = ", ".join(str(difference) for difference in differences)
    if serious and not allow_version_drift:
        raise ModelFolderError(
            f"{folder}: made with other package versions ({listed}; made with -> installed): "
            f"its predictions could change without a sign. Fit the model again with these "
            f"versions, or load it anyway with --accept-other-versions "
            f"(Python: load_model(..., allow_version_drift=True))."
        )
    warnings.warn(
        ModelVersionWarning(
            f"{folder}: made with other package versions ({listed}; made with -> installed); "
            f"loaded all the same: its predictions may differ from those it gave when fitted."
        ),
        stacklevel=3,
    )
    return differences


def _read_descriptor_values(path, data):
    """The descriptor table a model folder stores, checked for shape."""
    try:
        # Python's float() reads the shortest round-trip text back to the same bits
        header, *rows = csv.reader(io.StringIO(data.decode("utf-8")))
        table = pd.DataFrame(
            [[float(cell) for cell in row[1:]] for row in rows],
            index=pd.Index([row[0] for row in rows], name=header[0]),
            columns=header[1:],
        )
        return elements.check_descriptor_values(table, str(path))
    except DopantgapError as error:
        raise ModelFolderError(f"{error}; fit the model again.") from None
    except (ValueError, IndexError, UnicodeDecodeError) as error:
        raise ModelFolderError(f"{path}: not a readable descriptor table ({error}); fit the model again.") from None


def _unpickled(path, data, quiet):
    """The surrogate in ``data`` (the bytes already checked), or a one-line refusal."""
    from dopantgap.surrogate import Surrogate  # the heavy import only where a model is read

    with warnings.catch_warnings():
        if quiet:
            # the version difference has been stated once already, in our own words
            warnings.simplefilter("ignore", InconsistentVersionWarning)
        try:
            surrogate = joblib.load(io.BytesIO(data))
        except Exception as error:  # whatever the pickle raises, the user gets one line
            reason = (str(error).strip().splitlines() or [""])[0]
            raise ModelFolderError(
                f"{path}: cannot be read by this installation ({type(error).__name__}: {reason}); "
                f"fit the model again."
            ) from None
    if not isinstance(surrogate, Surrogate):
        raise ModelFolderError(f"{path}: holds a {type(surrogate).__name__}, not a dopantgap model; fit the model again.")
    return surrogate


def _note_descriptor_drift(folder, manifest, stored):
    """Say how the installed mendeleev's numbers differ from the ones the model uses."""
    then = (manifest.get("versions") or {}).get("mendeleev")
    now = installed_versions().get("mendeleev")
    if then == now or now is None:
        return
    try:
        installed = elements.descriptor_table()
    except DopantgapError:
        return  # mendeleev unreadable: the model needs only its own table
    differing = int((installed.to_numpy() != stored.to_numpy()).sum())
    if differing:
        warnings.warn(
            ModelVersionWarning(
                f"{folder}: fitted with mendeleev {then}, installed {now}: {differing} descriptor "
                f"values differ; the model predicts with its own ({DESCRIPTORS_FILE_NAME})."
            ),
            stacklevel=3,
        )


def load_model(folder, allow_version_drift=False):
    """Load a model folder after checking every file against its manifest.

    Each file is read once; the bytes checked are the bytes unpickled. Package versions
    are compared before anything is unpickled.

    Parameters
    ----------
    folder : str or Path
    allow_version_drift : bool, default=False
        Load a model made with package versions whose differences could change its
        predictions (see :func:`version_drift`); a ``ModelVersionWarning`` says what
        differs. Smaller differences always load with that warning.

    Returns
    -------
    surrogate : Surrogate
        Predicting with the descriptor table stored in the folder.
    manifest : dict

    Raises
    ------
    ModelFolderError
        Missing, truncated, altered, unlisted or extra files, a manifest from
        elsewhere, or package versions that differ (unless allowed).
    """
    folder = Path(folder)
    manifest = read_manifest(folder)
    files = _listed_files(manifest, folder / MANIFEST_NAME)
    _refuse_unlisted(folder, files)
    contents = {name: _checked_bytes(folder / name, files[name]) for name in MODEL_FILES}
    differences = _check_versions(folder, manifest, allow_version_drift)
    stored = _read_descriptor_values(folder / DESCRIPTORS_FILE_NAME, contents[DESCRIPTORS_FILE_NAME])
    surrogate = _unpickled(folder / MODEL_FILE_NAME, contents[MODEL_FILE_NAME], quiet=bool(differences))
    own = getattr(surrogate, "descriptor_values_", None)
    try:
        same = np.array_equal(elements.check_descriptor_values(own, "model").to_numpy(), stored.to_numpy())
    except DopantgapError:
        same = False
    if not same:
        raise ModelFolderError(
            f"{folder / DESCRIPTORS_FILE_NAME}: differs from the descriptors inside {MODEL_FILE_NAME}; "
            f"refusing to load the folder. Fit the model again."
        )
    _note_descriptor_drift(folder, manifest, stored)
    return surrogate, manifest
