"""The summary at the top of the report: what was learned, how far to trust it, the
candidates and the next picks."""

import pandas as pd

from dopantgap.calibration import SCENARIOS, undercovered_scenarios
from dopantgap.reporting.page import escaped

__all__ = ["findings_html"]

# picks and candidates named in the summary (common practice, no source)
_SUMMARY_ROWS = 5


_SCENARIO_WORDS = {
    "new-element": "an element never computed",
    "new-cell": "a missing cell of a computed element",
    "upgrade": "a dear-level cell whose cheap level is known",
    "sparse-host": "a cell of a host with a first few computed cells",
    "new-host": "a host with no computed cell",
}


def _trust_lines(surrogate, manifest):
    """One line per scenario: typical error and out-of-fold coverage, and the best hand rule."""
    metrics = surrogate.cv_metrics_
    pooled = metrics[(metrics["quantity"] == "all") & metrics["chosen"].astype(bool)]
    stored = pd.DataFrame((manifest or {}).get("validation") or [])
    narrow = {row["scenario"] for row in undercovered_scenarios(metrics)}
    lines = []
    for scenario in SCENARIOS:
        row = pooled[pooled["scenario"] == scenario]
        if len(row) == 0:
            continue
        row = row.iloc[0]
        text = (
            f"{_SCENARIO_WORDS.get(scenario, scenario)} ({scenario}, {int(row['n'])} hidden cells): "
            f"typical error {float(row['mae']):.2f} eV; {float(row['coverage_calibrated']):.0%} inside the "
            f"90 % interval, out of fold"
        )
        if scenario in narrow:
            text += " (<strong>too narrow</strong>: fewer than chance explains; compute a few such cells first)"
        if len(stored) and {"scenario", "model", "quantity", "mae"} <= set(stored.columns):
            rules = stored[(stored["scenario"] == scenario) & (stored["quantity"] == "all")
                           & stored["model"].astype(str).str.contains("baseline")]
            if len(rules):
                best = rules.loc[rules["mae"].astype(float).idxmin()]
                verdict = "beats" if float(row["mae"]) < float(best["mae"]) else "does NOT beat"
                text += f"; {verdict} the best hand rule ({escaped(best['model'])}, {float(best['mae']):.2f} eV)"
        lines.append(f"<li>{text}.</li>")
    return lines


def _site_lines(preference, levels):
    """Per host and quantity at the dearest level: how many site choices are settled."""
    if preference is None or len(preference) == 0:
        return []
    best = preference[preference["rank"] == 1]
    lines = []
    for (host, quantity), rows in best.groupby(["host", "quantity"], sort=False):
        methods = [level for level in levels if level in set(rows["method"])]
        rows = rows[rows["method"] == methods[-1]].drop_duplicates("element")
        settled = rows[rows["p_lowest"].astype(float) > 0.9]
        common = rows["site"].value_counts()
        lines.append(
            f"<li>{escaped(quantity)} in {escaped(host)} at {escaped(methods[-1])}: the lowest site is settled "
            f"(P &gt; 0.9) for {len(settled)} of {len(rows)} elements; most often "
            f"{escaped(common.index[0])} ({int(common.iloc[0])} elements).</li>"
        )
    return lines


def _candidate_lines(filled, columns):
    """Per main column: the predicted cells with the lowest values (the candidates to compute)."""
    lines = []
    for host, site, method, quantity in columns:
        rows = filled[(filled["host"] == host) & (filled["site"] == site) & (filled["method"] == method)
                      & (filled["quantity"] == quantity) & (filled["status"] == "predicted")]
        if len(rows) == 0:
            continue
        lowest = rows.sort_values("value", kind="stable").head(_SUMMARY_ROWS)
        names = ", ".join(
            f"<b>{escaped(row.element)}</b> {float(row.value):.2f} ± {float(row.std):.2f}"
            for row in lowest.itertuples(index=False)
        )
        lines.append(f"<li>{escaped(quantity)}, {escaped(host)} {escaped(site)}, {escaped(method)} (eV): {names}</li>")
    return lines


def findings_html(surrogate, manifest, filled, preference, picks, columns, extrapolated):
    """The answer first: what was learned, how far to trust it, candidates and next picks."""
    n_predicted = int((filled["status"] == "predicted").sum())
    learned = [
        f"<li>{len(surrogate.table_)} computed cells of {surrogate.table_['element'].nunique()} elements "
        f"learned; {n_predicted} missing cells estimated.</li>",
        *_site_lines(preference, list(surrogate.levels_)),
    ]
    trust = _trust_lines(surrogate, manifest)
    if extrapolated:
        trust.append(
            f"<li>{len(extrapolated)} element(s) lie outside the training data "
            f"({escaped(', '.join(extrapolated))}): their numbers are extrapolations (see the cautions).</li>"
        )
    candidates = _candidate_lines(filled, columns)
    if picks is not None and len(picks):
        shown = picks.head(_SUMMARY_ROWS)
        names = "".join(
            f"<li>{escaped(row.element)} in {escaped(row.host)} {escaped(row.site)}, {escaped(row.method)}, "
            f"{escaped(row.quantity)}</li>"
            for row in shown.itertuples(index=False)
        )
        next_picks = f"<ol>{names}</ol>" + (
            f'<p class="note">{len(picks) - len(shown)} more under Next calculations.</p>'
            if len(picks) > len(shown) else ""
        )
    else:
        next_picks = (
            "<p>No picks given: run <code>dopantgap next MODEL_DIR --out NEXT.csv</code> and pass "
            "<code>--picks NEXT.csv</code>.</p>"
        )
    return (
        '<div class="findings" id="findings">'
        f"<h3>What was learned</h3><ul>{''.join(learned)}</ul>"
        f"<h3>How far to trust it (grouped cross-validation, whole elements held out)</h3><ul>{''.join(trust)}</ul>"
        "<h3>Candidates: the lowest predicted values of the main columns (value ± 1 std)</h3>"
        f"<ul>{''.join(candidates) or '<li>No predicted cell in the main columns.</li>'}</ul>"
        f"<h3>Next calculations</h3>{next_picks}"
        "</div>"
    )
