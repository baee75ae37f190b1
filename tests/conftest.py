"""Fixtures shared by the unit and integration tests."""

import os
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SHIPPED_DEMO_MODEL = ROOT / "models" / "demo"
DEMO_TABLE = ROOT / "data_demo" / "invented_impurities.csv"


@pytest.fixture(scope="session")
def demo_model_dir(tmp_path_factory):
    """The demo model folder (invented data) that this installation can load.

    ``models/demo`` itself when it was made with exactly the installed package versions.
    Otherwise (any other version the dependency bounds allow, or an older folder format)
    a pickle is promised to load only where it was written (scikit-learn's rule for
    its estimators) and ``load_model`` would refuse or warn: the folder is rebuilt here
    the way ``models/demo`` is made (DEVELOPERS.md), once per test session.
    """
    from dopantgap.cli import main
    from dopantgap.errors import ModelFolderError
    from dopantgap.store import installed_versions, read_manifest

    try:
        current = read_manifest(SHIPPED_DEMO_MODEL).get("versions") == installed_versions()
    except ModelFolderError:
        current = False
    if current:
        return SHIPPED_DEMO_MODEL
    folder = tmp_path_factory.mktemp("demo-model") / "demo"
    table = os.path.relpath(DEMO_TABLE) if Path.cwd() == ROOT else str(DEMO_TABLE)
    assert main(["fit", table, "--learner", "gp", "--quiet", "--out", str(folder)]) == 0
    return folder
