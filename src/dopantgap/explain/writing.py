"""An explanation's tables written as CSV files and its figures drawn as PNG files.

Outputs
-------
One CSV file per kind of table, every target in it (a ``target`` column):
:func:`write_explanation` writes ``targets.csv`` (target, group, kind, quantity, host,
method, site, site_a, site_b; in question order: site choices, binding, columns),
``importance.csv`` (target, feature, importance), ``shap_values.csv`` (target, element,
feature, feature_value, unit, shap) and ``breakdowns.csv`` (target, element, base_value,
prediction, broken_down: whether the element was chosen for the figures).
:func:`write_figures` draws one figure per target group, ``explain_<group>.png``
(``explain_site_choice_E_sol_ZnS_gga.png``): the importance of every descriptor for
every target of the group, then each chosen element's breakdown for each target
(``dopantgap explain`` chooses the ``--elements`` given, or else the table's first
three elements). Measured on ``models/demo`` (invented demo table, 40 targets in 12
groups x 57 elements, two cores): see ``benchmarks/bench_explain.py``.
"""

import re
from pathlib import Path

from dopantgap.errors import DopantgapError
from dopantgap.explain.explanation import _canonical
from dopantgap.table import write_table

__all__ = [
    "EXPLANATION_FILES",
    "group_slugs",
    "target_slug",
    "target_slugs",
    "write_explanation",
    "write_figures",
]

#: Files written by :func:`write_explanation`.
EXPLANATION_FILES = ("targets.csv", "importance.csv", "shap_values.csv", "breakdowns.csv")


def write_explanation(explanation, out_dir, element_symbols=()):
    """Write the explanation's tables as CSV files in ``out_dir`` (atomically).

    Parameters
    ----------
    explanation : Explanation
    out_dir : str or Path
        Folder, created if needed; receives :data:`EXPLANATION_FILES`.
    element_symbols : sequence of str, default=()
        Elements chosen for the breakdown figures (``broken_down`` in breakdowns.csv;
        the report draws them).

    Returns
    -------
    list of Path
        The files written.
    """
    out_dir = Path(out_dir)
    chosen = set(_canonical(element_symbols))
    breakdowns = explanation.base_values.assign(
        broken_down=explanation.base_values["element"].isin(chosen)
    )
    frames = {
        "targets.csv": explanation.targets,
        "importance.csv": explanation.importance,
        "shap_values.csv": explanation.shap_values,
        "breakdowns.csv": breakdowns,
    }
    written = []
    for name in EXPLANATION_FILES:
        path = out_dir / name
        write_table(frames[name], path)
        written.append(path)
    return written


def group_slugs(groups):
    """Group name -> unique file-name form (``site choice | E_sol | ZnS | gga`` ->
    ``site_choice_E_sol_ZnS_gga``)."""
    return target_slugs(list(dict.fromkeys(groups)))


def target_slugs(targets):
    """Target name -> unique file-name form (a clash gets its position appended)."""
    slugs = {}
    for position, target in enumerate(targets):
        slug = target_slug(target)
        slugs[target] = slug if slug not in slugs.values() else f"{slug}_{position}"
    return slugs


def write_figures(explanation, out_dir, element_symbols, progress=None):
    """Draw ``explain_<group>.png``, one figure per target group.

    Parameters
    ----------
    explanation : Explanation
    out_dir : str or Path
    element_symbols : sequence of str
        Elements to break down, for every target of every group (they must be explained).
    progress : object with ``update(n)`` or None
        Told once per group drawn.

    Returns
    -------
    list of Path
    """
    from dopantgap.plots import group_figure, save_png

    out_dir = Path(out_dir)
    symbols = _canonical(element_symbols)
    explained = set(explanation.base_values["element"])
    missing = [symbol for symbol in symbols if symbol not in explained]
    if missing:
        raise DopantgapError(f"{missing[0]} was not explained; pass it to explain_model first.")
    targets = explanation.targets
    written = []
    for group, slug in group_slugs(targets["group"]).items():
        members = targets[targets["group"] == group]
        names = set(members["target"])
        path = out_dir / f"explain_{slug}.png"
        # drawing in worker processes was measured slower: their start-up outweighs it
        save_png(group_figure(
            members,
            explanation.importance[explanation.importance["target"].isin(names)],
            explanation.shap_values[explanation.shap_values["target"].isin(names)],
            explanation.base_values[explanation.base_values["target"].isin(names)],
            symbols,
        ), path)
        written.append(path)
        if progress is not None:
            progress.update(1)
    return written


def target_slug(target):
    """File-name form of a target name: ``E_sol | ZnS | gga | int_hex - sub_Zn`` ->
    ``E_sol_ZnS_gga_int_hex_minus_sub_Zn``."""
    text = str(target).replace(" - ", " minus ")
    text = re.sub(r"[^A-Za-z0-9.+]+", "_", text).strip("_")
    return text or "target"
