"""Model folders: the fitted surrogate plus a manifest that says what made it.

A folder holds ``surrogate.joblib`` and ``manifest.json``. The manifest records the
input table's hash, each file's SHA-256 and size, package versions, the seed, the
levels, the descriptors (with unit and source) and the cross-validation metrics.
Loading checks every file against the manifest first and refuses a folder that does
not match. A joblib file runs code when it is loaded: open model folders only from
hands you trust.
"""

import hashlib
import io
import json
from importlib import metadata
from pathlib import Path

import joblib
import numpy as np

from dopantgap import __version__, elements
from dopantgap.atomic import write_bytes_atomic, write_text_atomic
from dopantgap.errors import ModelFolderError
from dopantgap.table import table_hash

__all__ = ["MANIFEST_NAME", "MODEL_FILE_NAME", "load_model", "read_manifest", "save_model"]

MANIFEST_NAME = "manifest.json"
MODEL_FILE_NAME = "surrogate.joblib"
_FORMAT = "dopantgap-model-folder"
_FORMAT_VERSION = 1
_PACKAGES = ("numpy", "scipy", "pandas", "scikit-learn", "joblib", "mendeleev")


def _sha256(data):
    return hashlib.sha256(data).hexdigest()


def _versions():
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


def save_model(surrogate, folder, source=None, validation=None):
    """Write a fitted surrogate and its manifest to ``folder`` (created if needed).

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    folder : str or Path
    source : str or None, default=None
        Where the table came from (a path), recorded in the manifest.
    validation : DataFrame or None, default=None
        ``validate.validation_metrics`` output (learners and baselines, out of fold),
        recorded in the manifest under ``validation``.

    Returns
    -------
    dict
        The manifest written.
    """
    folder = Path(folder)
    buffer = io.BytesIO()
    joblib.dump(surrogate, buffer, compress=3)
    model_bytes = buffer.getvalue()
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
        "files": {MODEL_FILE_NAME: {"sha256": _sha256(model_bytes), "bytes": len(model_bytes)}},
        "versions": _versions(),
        "seed": int(surrogate.random_state),
        "learner": surrogate.learner_,
        "levels": list(surrogate.levels_),
        "correction": bool(surrogate.correction),
        "descriptors": [
            {"name": name, "unit": descriptors[name].unit, "source": descriptors[name].source}
            for name in surrogate.descriptors_
        ],
        "host_relative": list(elements.HOST_RELATIVE_NAMES),
        "hosts": _plain(surrogate.compositions_),
        "cross_validation": _plain(surrogate.cv_metrics_.to_dict(orient="records")),
        "calibration_borrowed": sorted(surrogate.calibration_.borrowed_),
    }
    if validation is not None:
        manifest["validation"] = _plain(validation.to_dict(orient="records"))
    write_bytes_atomic(folder / MODEL_FILE_NAME, model_bytes)
    # the manifest last: a folder with a manifest is a complete folder
    write_text_atomic(folder / MANIFEST_NAME, json.dumps(manifest, indent=2, sort_keys=True) + "\n")
    return manifest


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


def load_model(folder):
    """Load a model folder after checking every file against its manifest.

    Parameters
    ----------
    folder : str or Path

    Returns
    -------
    surrogate : Surrogate
    manifest : dict

    Raises
    ------
    ModelFolderError
        Missing, truncated or altered files, or a manifest from elsewhere.
    """
    folder = Path(folder)
    manifest = read_manifest(folder)
    for name, expected in manifest.get("files", {}).items():
        path = folder / name
        if not path.is_file():
            raise ModelFolderError(f"{path}: missing from the model folder; fit the model again.")
        data = path.read_bytes()
        if len(data) != expected.get("bytes") or _sha256(data) != expected.get("sha256"):
            raise ModelFolderError(
                f"{path}: does not match its SHA-256 in {MANIFEST_NAME} (truncated or altered); "
                f"refusing to load it. Fit the model again."
            )
    with (folder / MODEL_FILE_NAME).open("rb") as handle:
        surrogate = joblib.load(handle)
    return surrogate, manifest
