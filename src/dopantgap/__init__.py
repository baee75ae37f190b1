"""dopantgap: fill, prioritise and explain tables of DFT impurity energies.

The Python API mirrors the command line::

    import dopantgap as dg
    table = dg.read_table("energies.csv")
    model = dg.Surrogate(random_state=0).fit(table)
    filled = dg.fill_table(model, element_symbols=["Ti", "V"])
    sites = dg.site_preference(model)
    picks = dg.pick_next(model, count=5, method="hyb", cost={"gga": 1, "hyb": 30})
    explained = dg.explain_model(model)
    checked = dg.validate_table(table)       # out-of-fold error per scenario, with baselines
    worst = dg.element_breakdown(checked)    # per element, the worst intervals first
    dg.save_model(model, "models/mine")
"""

__version__ = "0.1.0"

from dopantgap.calibration import SCENARIOS
from dopantgap.elements import DESCRIPTORS, descriptor_table, element_flags
from dopantgap.errors import DopantgapError, ModelFolderError, ModelVersionWarning, TableError
from dopantgap.fill import fill_table
from dopantgap.picker import pick_next
from dopantgap.sites import site_preference
from dopantgap.store import load_model, save_model
from dopantgap.surrogate import Surrogate
from dopantgap.table import coverage, read_table, to_wide, write_table

__all__ = [
    "DESCRIPTORS",
    "DopantgapError",
    "ModelFolderError",
    "ModelVersionWarning",
    "SCENARIOS",
    "Surrogate",
    "TableError",
    "__version__",
    "build_report",
    "coverage",
    "descriptor_table",
    "element_breakdown",
    "element_flags",
    "explain_model",
    "fill_table",
    "fold_honesty",
    "group_breakdown",
    "load_model",
    "pick_next",
    "read_table",
    "save_model",
    "site_preference",
    "to_wide",
    "validate_table",
    "write_table",
]

# the heavier consumers (shap, matplotlib) load on first use, so the command line starts fast
_LAZY = {
    "build_report": ("dopantgap.report", "build_report"),
    "element_breakdown": ("dopantgap.breakdown", "element_breakdown"),
    "explain_model": ("dopantgap.explain", "explain_model"),
    "fold_honesty": ("dopantgap.breakdown", "fold_honesty"),
    "group_breakdown": ("dopantgap.breakdown", "group_breakdown"),
    # not "validate": importing the submodule dopantgap.validate would shadow the name
    "validate_table": ("dopantgap.validate", "validate"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attribute = _LAZY[name]
        return getattr(importlib.import_module(module), attribute)
    raise AttributeError(f"module 'dopantgap' has no attribute {name!r}")
