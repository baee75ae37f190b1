"""Do explain's fast paths matter? Each against the public path it replaces, on the demo.

The demo table is INVENTED (``dopantgap.demo``). Prints, for the targets of one site-choice
group and the table's elements, the wall time and the largest difference in SHAP values of

1. boosted trees (the demo table refitted with ``learner="boost"``): the trees rewritten over
   the descriptors and explained by shap's Tree SHAP (``explain/trees.py``, which reads the
   fitted ``HistGradientBoostingRegressor``'s private ``_predictors`` and
   ``_baseline_prediction``) against shap's exact enumeration of the same model function
   through the learners' public ``predict``;
2. the Gaussian process of ``models/demo``: the mean evaluated from the fitted kernel's
   public parts (``explain/stages.py``) against the learner's own ``predict``.

Measured 2026-12-04 on two cores shared with other jobs (load average 4.8), the four
site-choice targets of ``E_sol | C | gga`` and the 57 table elements: Gaussian process
8.7 s direct against 121 s through ``predict`` (14x, largest difference 2e-11 eV);
boosted trees (fitted in 340 s) 1.1 s by Tree SHAP against 125 s by enumeration (118x).
The boosted trees' largest difference, 7e-3 to 1e-2 eV for a few elements (Cs, Zr, Hf),
is not an error of either path: those elements' descriptor values (electronegativity
1.33 ...) sit exactly on a split threshold (a midpoint of two training values), where
rounding at 1e-16 decides the branch; elsewhere the two agree to 1e-6 eV.

A fast path is kept only while it is clearly faster; ``tests/integration/test_explain.py``
(``test_tree_explainer_agrees_with_exact_enumeration``) guards the tree path's values against
library changes. Run ``python benchmarks/bench_explain_paths.py`` once (a few minutes on
two cores); do not loop it on a shared machine.
"""

import os
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
DEMO_MODEL = ROOT / "models" / "demo"


def _timed(function):
    started = time.perf_counter()
    result = function()
    return result, time.perf_counter() - started


def _site_group(surrogate):
    from dopantgap.explain.targets import _target_table

    targets = _target_table(surrogate)
    first = targets[targets["kind"] == "site-choice"]["group"].iat[0]
    return list(targets.loc[targets["group"] == first, "target"])


def _compare(label, fast, public):
    (fast_result, fast_time), (public_result, public_time) = fast, public
    difference = float(np.max(np.abs(
        fast_result.shap_values["shap"].to_numpy() - public_result.shap_values["shap"].to_numpy()
    )))
    print(
        f"{label}: fast path {fast_time:.1f} s ({fast_result.shap_method}), public path "
        f"{public_time:.1f} s ({public_result.shap_method}); {public_time / max(fast_time, 1e-9):.1f}x; "
        f"largest |SHAP difference| {difference:.1e} eV"
    )


def main():
    from unittest import mock

    from dopantgap.demo import demo_table
    from dopantgap.explain import explain_model
    from dopantgap.explain import explanation as explanation_module
    from dopantgap.explain import stages
    from dopantgap.store import load_model
    from dopantgap.surrogate import Surrogate

    print(f"load average at start: {os.getloadavg()[0]:.2f} ({os.cpu_count()} cores)")
    surrogate, _manifest = load_model(DEMO_MODEL)
    names = _site_group(surrogate)
    explain_model(surrogate, targets=names[:1])  # shap's one-off compilation, not timed
    fast = _timed(lambda: explain_model(surrogate, targets=names))

    def no_direct_path(self):
        raise stages._Unsupported

    with mock.patch.object(stages._StageColumns, "_prepare_fast", no_direct_path):
        public = _timed(lambda: explain_model(surrogate, targets=names))
    _compare(f"Gaussian process (models/demo, {len(names)} site-choice targets)", fast, public)

    boosted, fit_time = _timed(lambda: Surrogate(learner="boost", n_folds=3, random_state=0).fit(demo_table()))
    print(f"boosted trees fitted on the invented demo table in {fit_time:.0f} s")
    names = _site_group(boosted)
    fast = _timed(lambda: explain_model(boosted, targets=names))
    with mock.patch.object(explanation_module, "_tree_ensembles", lambda function, n_features, evaluated=None: None):
        public = _timed(lambda: explain_model(boosted, targets=names))
    _compare(f"boosted trees ({len(names)} site-choice targets)", fast, public)


if __name__ == "__main__":
    main()
