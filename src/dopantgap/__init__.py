"""dopantgap: fill, prioritise and explain tables of DFT impurity energies.

The Python API mirrors the command line::

    import dopantgap as dg
    table = dg.read_table("energies.csv")
    model = dg.Surrogate(random_state=0).fit(table)
    filled = dg.fill_table(model, element_symbols=["Ti", "V"])
    sites = dg.site_preference(model)
    picks = dg.pick_next(model, count=5, method="hyb", cost={"gga": 1, "hyb": 30})
    traps = dg.screen(model, [dg.Window("E_bind", float("-inf"), -0.3), dg.LowestSite("sub_Zn")])
    explained = dg.explain_model(model)
    checked = dg.validate_table(table)       # out-of-fold error per scenario, with baselines
    worst = dg.element_breakdown(checked)    # per element, the worst intervals first
    dg.save_model(model, "models/mine")
"""

__version__ = "0.1.0"

from dopantgap.errors import DopantgapError, ModelFolderError, ModelVersionWarning, TableError

__all__ = [
    "DESCRIPTORS",
    "DopantgapError",
    "LowestSite",
    "ModelFolderError",
    "ModelVersionWarning",
    "SCENARIOS",
    "SiteGap",
    "SiteProperties",
    "Surrogate",
    "TableError",
    "Window",
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
    "screen",
    "site_preference",
    "to_wide",
    "validate_table",
    "write_table",
]

# Everything but the exceptions loads on first use: numpy, pandas, scipy and scikit-learn
# take seconds to import, and `dopantgap --help` or a mistyped option should answer at once
_LAZY = {
    "DESCRIPTORS": ("dopantgap.elements", "DESCRIPTORS"),
    "SCENARIOS": ("dopantgap.calibration", "SCENARIOS"),
    "Surrogate": ("dopantgap.surrogate", "Surrogate"),
    "coverage": ("dopantgap.table", "coverage"),
    "descriptor_table": ("dopantgap.elements", "descriptor_table"),
    "element_flags": ("dopantgap.elements", "element_flags"),
    "fill_table": ("dopantgap.fill", "fill_table"),
    "load_model": ("dopantgap.store", "load_model"),
    "pick_next": ("dopantgap.picker", "pick_next"),
    "read_table": ("dopantgap.table", "read_table"),
    "save_model": ("dopantgap.store", "save_model"),
    "site_preference": ("dopantgap.sites", "site_preference"),
    "to_wide": ("dopantgap.table", "to_wide"),
    "write_table": ("dopantgap.table", "write_table"),
    "build_report": ("dopantgap.report", "build_report"),
    "element_breakdown": ("dopantgap.breakdown", "element_breakdown"),
    "explain_model": ("dopantgap.explain", "explain_model"),
    "fold_honesty": ("dopantgap.breakdown", "fold_honesty"),
    "group_breakdown": ("dopantgap.breakdown", "group_breakdown"),
    # not "validate": importing the submodule dopantgap.validate would shadow the name
    "validate_table": ("dopantgap.validate", "validate"),
    "screen": ("dopantgap.screening", "screen"),
    "Window": ("dopantgap.screening", "Window"),
    "LowestSite": ("dopantgap.screening", "LowestSite"),
    "SiteGap": ("dopantgap.screening", "SiteGap"),
    "SiteProperties": ("dopantgap.hosts", "SiteProperties"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attribute = _LAZY[name]
        value = getattr(importlib.import_module(module), attribute)
        globals()[name] = value  # looked up once
        return value
    raise AttributeError(f"module 'dopantgap' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
