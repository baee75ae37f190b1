"""An explanation's tables written as CSV files and its figures drawn as PNG files.

Outputs
-------
:func:`write_explanation` writes ``targets.csv``, ``importance.csv`` (target, feature,
importance), ``shap_values.csv`` (target, element, feature, feature_value, shap) and
``base_values.csv`` (target, element, base_value, prediction). :func:`write_figures`
draws ``summary_<slug>.png`` per target and ``breakdown_<slug>_<Element>.png`` per
target and chosen element (``dopantgap explain`` chooses the ``--elements`` given, or
else the table's first three elements). Measured on ``models/demo`` (invented demo
table, 40 targets x 57 elements, two cores): explain 11 s, plus about 10 s for shap's
one-off compilation in each new process; the command, figures included, 46 s
(``benchmarks/bench_explain.py``).
"""

import re
from pathlib import Path

from dopantgap.errors import DopantgapError
from dopantgap.explain.explanation import _canonical
from dopantgap.table import write_table

__all__ = ["EXPLANATION_FILES", "target_slug", "target_slugs", "write_explanation", "write_figures"]

#: Files written by :func:`write_explanation`.
EXPLANATION_FILES = ("targets.csv", "importance.csv", "shap_values.csv", "base_values.csv")


def write_explanation(explanation, out_dir):
    """Write the explanation's tables as CSV files in ``out_dir`` (atomically).

    Parameters
    ----------
    explanation : Explanation
    out_dir : str or Path
        Folder, created if needed; receives :data:`EXPLANATION_FILES`.

    Returns
    -------
    list of Path
        The files written.
    """
    out_dir = Path(out_dir)
    frames = {
        "targets.csv": explanation.targets,
        "importance.csv": explanation.importance,
        "shap_values.csv": explanation.shap_values,
        "base_values.csv": explanation.base_values,
    }
    written = []
    for name in EXPLANATION_FILES:
        path = out_dir / name
        write_table(frames[name], path)
        written.append(path)
    return written


def target_slugs(targets):
    """Target name -> unique file-name form (a clash gets its position appended)."""
    slugs = {}
    for position, target in enumerate(targets):
        slug = target_slug(target)
        slugs[target] = slug if slug not in slugs.values() else f"{slug}_{position}"
    return slugs


def _draw_target(importance, shap_values, base_values, target, element_symbols, paths):
    from dopantgap.plots import breakdown_figure, importance_figure, save_png

    save_png(importance_figure(importance, shap_values, target), paths[0])
    for symbol, path in zip(element_symbols, paths[1:]):
        save_png(breakdown_figure(shap_values, base_values, target, symbol), path)


def write_figures(explanation, out_dir, element_symbols, progress=None):
    """Draw ``summary_<slug>.png`` per target and ``breakdown_<slug>_<Element>.png``.

    Parameters
    ----------
    explanation : Explanation
    out_dir : str or Path
    element_symbols : sequence of str
        Elements to draw a breakdown of, for every target (they must be explained).
    progress : object with ``update(n)`` or None
        Told once per target drawn.

    Returns
    -------
    list of Path
    """
    out_dir = Path(out_dir)
    symbols = _canonical(element_symbols)
    explained = set(explanation.base_values["element"])
    missing = [symbol for symbol in symbols if symbol not in explained]
    if missing:
        raise DopantgapError(f"{missing[0]} was not explained; pass it to explain_model first.")
    written = []
    for target, slug in target_slugs(explanation.targets["target"]).items():
        paths = [out_dir / f"summary_{slug}.png"] + [
            out_dir / f"breakdown_{slug}_{symbol}.png" for symbol in symbols
        ]
        written.extend(paths)
        # drawing in worker processes was measured slower: their start-up outweighs it
        _draw_target(
            explanation.importance[explanation.importance["target"] == target],
            explanation.shap_values[explanation.shap_values["target"] == target],
            explanation.base_values[explanation.base_values["target"] == target],
            target,
            symbols,
            paths,
        )
        if progress is not None:
            progress.update(1)
    return written


def target_slug(target):
    """File-name form of a target name: ``E_sol | ZnS | gga | int_hex - sub_Zn`` ->
    ``E_sol_ZnS_gga_int_hex_minus_sub_Zn``."""
    text = str(target).replace(" - ", " minus ")
    text = re.sub(r"[^A-Za-z0-9.+]+", "_", text).strip("_")
    return text or "target"
