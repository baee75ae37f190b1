"""The command line's help: its words (rounds, never campaigns) and a light start.

``dopantgap --help`` and argument errors must not wait for numpy, pandas, scipy or
scikit-learn to import; how long they take is measured in
``benchmarks/bench_startup.py``, not here. These tests check, untimed, which modules a
start loads.
"""

import subprocess
import sys

import pytest

from dopantgap import cli, store

HEAVY = ("pandas", "sklearn", "scipy", "matplotlib", "shap", "mendeleev", "numpy", "joblib")

_LOADED = (
    "import sys\n"
    "{body}\n"
    "print('loaded:', *(m for m in {heavy!r} if m in sys.modules))\n"
)


def _heavy_modules_after(body):
    """The heavy modules a fresh interpreter holds after running ``body``."""
    code = _LOADED.format(body=body, heavy=HEAVY)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                          check=False)
    assert done.returncode == 0, done.stderr
    # the last line: what the command printed (help text) comes before it
    last = done.stdout.splitlines()[-1].split()
    assert last[0] == "loaded:", done.stdout
    return last[1:]


def test_importing_the_command_line_loads_no_heavy_library():
    assert _heavy_modules_after("import dopantgap.cli") == []


@pytest.mark.parametrize("argv", [
    ["--help"],
    ["fit", "--help"],
    ["fit", "table.csv"],  # --out missing: argparse's error
    ["fit", "table.csv", "--out", "m", "--block-rows", "50"],  # below the smallest block
    ["replay", "table.csv", "--rounds", "0"],  # a number refused by the command itself
    ["add", "t.csv", "r.csv", "--out", "n.csv", "--picks", "p.csv"],  # --picks without --rounds-dir
])
def test_help_and_argument_errors_load_no_heavy_library(argv, tmp_path):
    body = (
        "import os\n"
        f"os.chdir({str(tmp_path)!r})\n"
        "from dopantgap.cli import main\n"
        "try:\n"
        f"    status = main({argv!r})\n"
        "except SystemExit as stop:\n"
        "    status = stop.code\n"
        "assert status in (0, 2), status"
    )
    assert _heavy_modules_after(body) == []


def test_public_api_still_reachable_lazily():
    code = (
        "import dopantgap as dg\n"
        "assert 'Surrogate' in dir(dg) and dg.Surrogate.__name__ == 'Surrogate'\n"
        "import dopantgap.table\n"
        "assert dg.read_table is dopantgap.table.read_table"
    )
    assert "sklearn" in _heavy_modules_after(code)


def test_the_cheap_manifest_look_uses_the_store_name():
    assert cli._MANIFEST_NAME == store.MANIFEST_NAME


# ----------------------------------------------------------------------------- words
def _help_text(argv, capsys):
    with pytest.raises(SystemExit) as stop:
        cli.main(argv)
    assert stop.value.code == 0
    return capsys.readouterr().out


def test_no_campaign_in_any_help(capsys):
    pages = {"dopantgap": _help_text(["--help"], capsys)}
    for command in cli._COMMANDS:
        pages[command] = _help_text([command, "--help"], capsys)
        assert f"usage: dopantgap {command}" in pages[command]
    for name, page in pages.items():
        assert "campaign" not in page.lower(), name
    # the rounds vocabulary is what replaced it
    assert "ROUNDS_DIR" in pages["history"]
    assert "--rounds-dir" in pages["add"] and "--rounds-dir" in pages["report"]


def test_block_rows_that_is_not_a_number_is_one_line(capsys):
    from dopantgap.cli import main

    with pytest.raises(SystemExit) as stop:
        main(["fit", "table.csv", "--out", "m", "--block-rows", "ten"])
    assert stop.value.code == 2
    error = capsys.readouterr().err
    assert "--block-rows" in error and "at least 100" in error and "Traceback" not in error
