"""What several commands share: option helpers, model loading, cautions, output checks."""

import argparse
import os
import sys
from collections.abc import Callable
from pathlib import Path
from typing import NamedTuple

from dopantgap.errors import DopantgapError

_CAUTION = (
    "Estimates guide which calculations to run; they do not replace calculation, "
    "experiment or local safety rules."
)


class Command(NamedTuple):
    """One subcommand: ``add_parser(commands)`` declares its options, ``run(arguments, say)`` does it."""

    add_parser: Callable
    run: Callable


def _seed(text):
    """A --seed value: a whole number of at least 0 (what every random draw takes)."""
    try:
        value = int(text)
    except ValueError:
        value = -1
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number >= 0 (e.g. --seed 0)")
    return value


def add_table_options(command):
    """The TABLE argument with --layout and --sheet, for commands that read a table."""
    command.add_argument("table", metavar="TABLE", help="CSV or XLSX table, long or wide layout")
    command.add_argument(
        "--layout", choices=("auto", "long", "wide"), default="auto",
        help="table layout (default: auto: wide when there is no 'value' column)",
    )
    command.add_argument("--sheet", default=None, help="worksheet name of an XLSX file")


def add_suspect_option(command):
    """--suspect-values, for commands that fit a table."""
    command.add_argument(
        "--suspect-values", choices=("refuse", "warn"), default="refuse",
        help="values a meV or kJ/mol slip or a flipped sign would explain: refuse the table "
             "(default) or keep them with a warning each ('check' lists them)",
    )


def add_scheduler_option(command):
    """--scheduler, for commands whose fits can run on a Dask cluster."""
    command.add_argument(
        "--scheduler", default=None, metavar="ADDRESS",
        help="send the independent fits (learners, folds) to the Dask scheduler at ADDRESS, "
             "e.g. tcp://HOST:8786 (default: $DOPANTGAP_SCHEDULER, else this machine's cores; "
             "needs pip install \"dopantgap[cluster]\")",
    )


def say_suspects(policy, say, table):
    """List suspect values before a fit refuses them, or warn of each one kept."""
    import warnings

    from dopantgap.errors import SuspectValueWarning
    from dopantgap.table import shown, suspect_values

    suspects = suspect_values(table)
    if policy == "warn":
        for message in suspects["message"]:
            # on stderr, and even with --quiet: a value kept against the check must be seen
            print(f"WARNING: suspect value kept (--suspect-values warn): {shown(message)}", file=sys.stderr)
        # listed here once; the library's warning of each would repeat them
        warnings.filterwarnings("ignore", category=SuspectValueWarning)
    elif len(suspects) > 1:
        for message in suspects["message"]:
            say(f"suspect value: {shown(message)}")


def add_version_option(command):
    """--accept-other-versions, for every command that loads a model folder (added last)."""
    command.add_argument(
        "--accept-other-versions", action="store_true",
        help="load a model made with other versions of scikit-learn, dopantgap, numpy, scipy, "
        "pandas or joblib (its predictions may differ from those it gave when fitted)",
    )


def _load_model(arguments, folder, say):
    """``store.load_model`` with --accept-other-versions; what differs is said as notes."""
    import warnings

    from dopantgap.store import ModelVersionWarning, load_model

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ModelVersionWarning)
        loaded = load_model(folder, allow_version_drift=arguments.accept_other_versions)
    for warning in caught:
        if issubclass(warning.category, ModelVersionWarning):
            say(f"note: {warning.message}")
        else:
            warnings.warn_explicit(warning.message, warning.category, warning.filename, warning.lineno)
    return loaded


# Options naming a file or folder that a command writes.
_OUTPUT_OPTIONS = {"out": "--out", "sites_out": "--sites-out"}


# store.MANIFEST_NAME, repeated so that a path with no manifest above it is passed without
# importing store (numpy, pandas, scikit-learn: seconds); a test keeps the two equal
_MANIFEST_NAME = "manifest.json"


def _manifest_above(path):
    """Whether ``path`` or a folder above it holds a file named like a model manifest."""
    path = Path(os.path.abspath(path))
    return any((folder / _MANIFEST_NAME).is_file() for folder in (path, *path.parents))


def _refuse_outputs_in_model_folders(arguments):
    """Refuse, before any work, an output inside a model folder: the folder would then
    refuse to load (it holds only the files its manifest lists) or lose a file."""
    for attribute, option in _OUTPUT_OPTIONS.items():
        path = getattr(arguments, attribute, None)
        if path is None or (arguments.command == "fit" and attribute == "out"):
            continue  # fit's --out is a model folder: store.check_model_target judges it
        if not _manifest_above(path):
            continue  # no manifest anywhere above: certainly not inside a model folder
        from dopantgap.store import model_folder_containing

        folder = model_folder_containing(path)
        if folder is not None:
            raise DopantgapError(
                f"{option} {path}: lies inside the model folder {folder}, which holds only what "
                f"'fit' wrote (another file there makes it refuse to load); write it elsewhere."
            )


def _number_option(text, option, minimum, kind=int):
    """A whole (or real) number option, refused with a one-line message."""
    try:
        value = kind(str(text).strip())
    except ValueError:
        value = None
    if value is None or value < minimum:
        shown = "whole number" if kind is int else "number"
        raise DopantgapError(f"{option} must be a {shown} of at least {minimum}, got {text!r}.")
    return value


def _say_outside_levels(say, outside):
    """One caution line per level listing the elements whose estimates extrapolate it."""
    for method, part in outside.groupby("method", sort=False):
        per_element = part.groupby("element", sort=False).agg(
            n_cells=("n_cells", "sum"), reason=("reason", "first"), nearest=("nearest", "first")
        )
        names = [
            f"{element} ({row.nearest})" if row.nearest else element for element, row in per_element.iterrows()
        ]
        n_cells = int(per_element["n_cells"].sum())
        verb = "lies" if len(names) == 1 else "lie"
        say(
            f"caution: at {method}, {', '.join(names)} {verb} outside what was computed at that level "
            f"(in brackets the nearest element computed there; {n_cells} cell{'s' * (n_cells != 1)}, "
            f"e.g. {per_element.index[0]}: {per_element['reason'].iat[0]}): those estimates extrapolate "
            f"the step between levels; computing one of them is the way to check."
        )

