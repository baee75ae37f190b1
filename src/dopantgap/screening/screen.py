"""Screen elements for a purpose: the probability that every condition holds, and a verdict.

For each element, host and method, the cells the conditions read are drawn together
from the model's calibrated joint (``joint.missing_joint``: an element's sites in one
quantity are correlated through the model, and an expensive-level cell through its
cheap level; computed cells enter with their own value and no spread). The share of
draws in which every condition holds is the probability. Quantities are learned by
separate models, so draws of different quantities are independent.
"""

import math
import numbers

import numpy as np
import pandas as pd

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.fill import outside_levels, unfamiliar_elements
from dopantgap.gaussian import smooth_root
from dopantgap.hosts import SiteProperties
from dopantgap.joint import cell_grid, missing_joint
from dopantgap.reproducible import seed_integer
from dopantgap.screening.conditions import (
    LowestSite,
    SiteGap,
    Window,
    parse_lowest_site,
    parse_site_gap,
    parse_window_condition,
    resolve,
)
from dopantgap.screening.deciding import decisive_calculation
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS
from dopantgap.thermo import bound_vacancy_fraction, check_temperature, site_populations

__all__ = ["BINDING_SIGNS", "VERDICTS", "binding_convention", "screen"]

#: Verdicts, from the probability that every condition holds.
VERDICTS = ("yes", "undecided", "no")
#: Which sign of the binding quantity means a bound pair.
BINDING_SIGNS = ("negative", "positive")
# Draws per element for the verdict's entropy after a candidate calculation (common
# random numbers across candidates; common practice, no source).
_DECIDING_DRAWS = 2000
# A binding-energy column whose computed values carry one sign this often is taken to
# show the table's convention (common practice, no source).
_CLEAR_SIGN_SHARE = 0.8
_MIN_SIGNED_VALUES = 5


def _conditions(conditions):
    checked = []
    for condition in conditions or ():
        if isinstance(condition, (Window, LowestSite, SiteGap)):
            checked.append(condition)
        elif isinstance(condition, str) and ":" in condition and condition.split(":", 1)[0] in (
            "window", "lowest-site", "site-gap"
        ):
            kind, text = condition.split(":", 1)
            parser = {"window": parse_window_condition, "lowest-site": parse_lowest_site, "site-gap": parse_site_gap}
            checked.append(parser[kind](text, option=f"--{kind}"))
        else:
            raise DopantgapError(
                f"{condition!r} is not a screening condition; give Window, LowestSite or SiteGap objects, "
                f"or text such as 'window:E_bind:-inf:-0.3', 'lowest-site:sub_Zn', 'site-gap:sub_Zn:int_hex:0.5'."
            )
    if not checked:
        raise DopantgapError("screen needs at least one condition: --window, --lowest-site or --site-gap.")
    return checked


def _probability_option(value, option, low, high):
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not low < float(value) < high:
        raise DopantgapError(f"{option} must lie strictly between {low:g} and {high:g}, got {value!r}.")
    return float(value)


def _binding_quantity(binding, quantities):
    """The quantity (and optional site) whose cells are vacancy binding energies."""
    if binding is None:
        named = [quantity for quantity in quantities if "bind" in quantity.lower()]
        return (named[0], None) if len(named) == 1 else (None, None)
    quantity, _, site = str(binding).partition("@")
    quantity, site = quantity.strip(), site.strip() or None
    if quantity not in quantities:
        raise DopantgapError(
            f"--binding: {quantity!r} is not a quantity of the model; choose one of {', '.join(quantities)}."
        )
    return quantity, site


def binding_convention(table, quantity, binding_sign):
    """The convention (which sign is bound) and a note; refuse a default the table contradicts."""
    values = table.loc[table["quantity"] == quantity, "value"].to_numpy(dtype=float)
    positive_share = float(np.mean(values > 0)) if len(values) else 0.0
    negative_share = float(np.mean(values < 0)) if len(values) else 0.0
    stated = binding_sign is not None
    sign = "negative" if binding_sign is None else binding_sign
    if sign not in BINDING_SIGNS:
        raise DopantgapError(f"binding_sign must be 'negative' or 'positive' (the sign of a bound pair), got {sign!r}.")
    against = positive_share if sign == "negative" else negative_share
    note = (
        f"{quantity}: {'negative' if sign == 'negative' else 'positive'} = bound "
        f"({'as stated' if stated else 'the default, as in the demo'}); trapping uses Lomer's E_b = "
        f"{'-' if sign == 'negative' else ''}{quantity}."
    )
    if len(values) >= _MIN_SIGNED_VALUES and against >= _CLEAR_SIGN_SHARE:
        other = "positive" if sign == "negative" else "negative"
        message = (
            f"{against:.0%} of the {len(values)} computed {quantity} values are {other}, so in this table "
            f"{other} seems to mean bound, but the screen reads {sign} as bound"
        )
        if not stated:
            raise DopantgapError(
                f"{message}; say which: --binding-{other} ({other} = bound) or --binding-{sign} "
                f"({sign} = bound, to keep the default)."
            )
        note += f" Caution: {message}, as you stated."
    return sign, note


class _Setting:
    """What one (host, method) screens: resolved conditions and the cells they read."""

    def __init__(self, host, method, resolved, quantities, sites):
        self.host = host
        self.method = method
        self.resolved = resolved
        self.quantities = quantities  # ordered
        self.sites = sites  # quantity -> sites (in table order)
        self.keys = [(quantity, site) for quantity in quantities for site in sites[quantity]]
        self.index = {key: position for position, key in enumerate(self.keys)}


def _cell_label(host, site, method, quantity):
    return f"{host}/{site}/{method}/{quantity}"


def screen(
    surrogate,
    conditions,
    temperature=None,
    concentration=1e-3,
    site_properties=None,
    coordination=None,
    binding=None,
    binding_sign=None,
    element_symbols=(),
    hosts=None,
    methods=None,
    confidence=0.9,
    level=0.9,
    cost=None,
    n_draws=20000,
    random_state=0,
):
    """The probability that every condition holds, per element, host and method.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    conditions : sequence
        ``Window``, ``LowestSite`` and ``SiteGap`` objects (or their text, e.g.
        ``"window:E_bind:-inf:-0.3"``, ``"lowest-site:sub_Zn"``,
        ``"site-gap:sub_Zn:int_tet_Zn:0.5"``), combined with AND. All energies in eV.
    temperature : float or None, default=None
        Kelvin. Adds Boltzmann site populations for every quantity with two or more
        sites in the host, and the share of vacancies bound to the dopant (Lomer's
        relation) for the binding quantity.
    concentration : float, default=1e-3
        Dopant site fraction x on the binding site, for trapping.
    site_properties : SiteProperties or None
        Site multiplicities (default 1 each, said in the notes) and coordinations.
    coordination : float or None
        Z for every host, overriding the host file's.
    binding : str or None
        ``QUANTITY[@SITE]`` of the vacancy binding energy; None: the one quantity whose
        name contains "bind", if any.
    binding_sign : {"negative", "positive"} or None
        Which sign means bound. None: negative (as in the demo), refused when 80 % or
        more of the computed binding values are positive.
    element_symbols : sequence of str, default=()
        Elements to add to those of the table.
    hosts, methods : sequence of str or None
        Hosts and methods to screen; None: every host where the conditions can be read,
        and every method.
    confidence : float, default=0.9
        Verdict ``yes`` when P >= confidence, ``no`` when P <= 1 - confidence.
    level : float, default=0.9
        Content of the intervals shown (cells, populations, trapping).
    cost : dict or None
        Method -> cost of one calculation, to rank the decisive calculation (default 1).
    n_draws : int, default=20000
        Joint draws per element, host and method (the probability's sampling error is
        at most 0.5 / sqrt(n_draws), 0.0035 for 20000; exact for computed cells).
    random_state : int, default=0
        Seed of the draws.

    Returns
    -------
    DataFrame
        One row per element, host and method, ranked by probability within each host
        and method: ``probability``, ``verdict`` (a ``yes`` that rests on cells outside
        what the model has seen is called ``undecided``, and ``verdict_note`` says
        why), one ``P: <condition>`` column per
        condition, per cell read ``<quantity>@<site>`` (value, eV) with ``lo``, ``hi``
        and ``status``, ``outside_domain`` with ``domain_note``, ``caution`` (radioactive
        or toxic), for undecided rows the ``decisive_cell`` with its expected entropy
        drop ``decisive_gain_bits`` and ``decisive_cost``, with a temperature
        ``pop <site>`` populations (median, ``lo``, ``hi``) and ``bound_vacancies``
        (share of vacancies next to a dopant, median, ``lo``, ``hi``), and
        ``conditions``. ``frame.attrs["notes"]`` lists what the screen assumed.
    """
    resolved_conditions = _conditions(conditions)
    confidence = _probability_option(confidence, "--confidence", 0.5, 1.0)
    level = _probability_option(level, "--level", 0.0, 1.0)
    if isinstance(n_draws, bool) or not isinstance(n_draws, numbers.Integral) or n_draws < 100:
        raise DopantgapError(f"n_draws must be a whole number of at least 100, got {n_draws!r}.")
    if temperature is not None:
        temperature = check_temperature(temperature)
    site_properties = site_properties or SiteProperties()
    costs = dict(cost or {})
    table = surrogate.table_
    quantities = list(dict.fromkeys(table["quantity"]))
    levels = list(surrogate.levels_)
    for condition in resolved_conditions:
        named = condition.quantity
        if named is not None and named not in quantities:
            raise DopantgapError(
                f"{condition.label}: {named!r} is not a quantity of the model; choose one of {', '.join(quantities)}."
            )
    wanted_methods = levels if methods is None else list(methods)
    for method in wanted_methods:
        if method not in levels:
            raise DopantgapError(f"--method: {method!r} is not a method of the model; choose one of {', '.join(levels)}.")
    all_hosts = list(dict.fromkeys(table["host"]))
    wanted_hosts = all_hosts if hosts is None else list(hosts)
    for host in wanted_hosts:
        if host not in all_hosts:
            raise DopantgapError(f"--host: {host!r} is not a host of the model; choose one of {', '.join(all_hosts)}.")
    notes = []
    binding_quantity, binding_site = (None, None)
    sign = None
    if temperature is not None:
        binding_quantity, binding_site = _binding_quantity(binding, quantities)
        if binding_quantity is not None:
            sign, sign_note = binding_convention(table, binding_quantity, binding_sign)
            notes.append(sign_note)
    columns = table[["host", "site", "method", "quantity"]].drop_duplicates()

    settings = []
    for host in wanted_hosts:
        for method in wanted_methods:
            present = columns[(columns["host"] == host) & (columns["method"] == method)]
            sites = {q: list(dict.fromkeys(part["site"])) for q, part in present.groupby("quantity", sort=False)}
            resolved, why = [], None
            for condition in resolved_conditions:
                tied, why = resolve(condition, host, sites)
                if tied is None:
                    break
                resolved.append(tied)
            if why is not None:
                if hosts is not None and methods is not None:
                    raise DopantgapError(f"{condition.label}: {host} at {method} {why}.")
                notes.append(f"{host} at {method} not screened: it {why} ({condition.label}).")
                continue
            used = list(dict.fromkeys(key[0] for tied in resolved for key in tied.cells))
            if temperature is not None:
                used += [q for q, s in sites.items() if len(s) >= 2 and q not in used]
                if binding_quantity in sites and binding_quantity not in used:
                    used.append(binding_quantity)
            settings.append(_Setting(host, method, resolved, used, {q: sites[q] for q in used}))
    if not settings:
        raise DopantgapError("no host and method of the model has every cell the conditions read; " + " ".join(notes))

    grid = cell_grid(surrogate, element_symbols)
    symbols = list(dict.fromkeys(grid["element"]))
    core = table[list(REQUIRED_COLUMNS)]
    known = surrogate._known(core)
    rng = np.random.default_rng(seed_integer(random_state))
    width = max(len(setting.keys) for setting in settings)
    normals = rng.standard_normal((int(n_draws), width))
    deciding_normals = rng.standard_normal((_DECIDING_DRAWS, width))
    flags = elements.element_flags(symbols)
    unfamiliar = unfamiliar_elements(surrogate, symbols)
    tail = (1.0 - level) / 2.0
    condition_text = " AND ".join(condition.label for condition in resolved_conditions)
    multiplicity_defaults = set()
    records = []
    for setting in settings:
        host, method = setting.host, setting.method
        blocks, block_index = {}, {}
        for quantity in setting.quantities:
            quantity_levels = surrogate.quantity_levels_[quantity]
            below = quantity_levels[: quantity_levels.index(method) + 1]
            rows = grid[(grid["host"] == host) & (grid["quantity"] == quantity) & grid["method"].isin(below)]
            block = missing_joint(surrogate, rows, quantity, below, known)
            blocks[quantity] = block
            block_index[quantity] = (
                {} if block is None else {
                    key: position
                    for position, key in enumerate(block.cells[list(KEY_COLUMNS)].itertuples(index=False, name=None))
                }
            )
        read_keys = list(dict.fromkeys(key for tied in setting.resolved for key in tied.cells))
        read_cells = pd.DataFrame(
            [
                {"element": e, "host": host, "site": s, "method": method, "quantity": q}
                for e in symbols for q, s in read_keys
            ],
            columns=list(KEY_COLUMNS),
        )
        summary = surrogate.predict(read_cells, level=level)
        summary_index = {
            key: position
            for position, key in enumerate(summary[list(KEY_COLUMNS)].itertuples(index=False, name=None))
        }
        outside = outside_levels(surrogate, summary)
        outside_reasons = {
            row.element: f"{row.quantity} at {row.method}: {row.reason}" for row in outside.itertuples(index=False)
        }
        condition_quantities = set(key[0] for key in read_keys)
        for element in symbols:
            n = len(setting.keys)
            mean = np.empty(n)
            cov = np.zeros((n, n))
            open_positions = {}
            for position, (quantity, site) in enumerate(setting.keys):
                cell = (element, host, site, method, quantity)
                value = known.get(cell)
                if value is not None:
                    mean[position] = value
                    continue
                where = block_index[quantity][cell]
                mean[position] = blocks[quantity].mean[where]
                open_positions[position] = (quantity, where)
            for a, (qa, wa) in open_positions.items():
                for b, (qb, wb) in open_positions.items():
                    if qa == qb:
                        cov[a, b] = blocks[qa].cov[wa, wb]
            draws = np.repeat(mean[None, :], len(normals), axis=0)
            if open_positions:
                opened = np.array(sorted(open_positions))
                draws[:, opened] += normals[:, : len(opened)] @ smooth_root(cov[np.ix_(opened, opened)]).T
            held_each = [tied.holds(draws, setting.index) for tied in setting.resolved]
            held = np.logical_and.reduce(held_each)
            probability = float(held.mean())
            verdict = "yes" if probability >= confidence else ("no" if probability <= 1.0 - confidence else "undecided")
            reasons = []
            if element in unfamiliar:
                reasons.append(f"outside the table's elements: {unfamiliar[element]}")
            if element in outside_reasons:
                reasons.append(outside_reasons[element])
            note = ""
            if verdict == "yes" and reasons and open_positions:
                # a yes sends someone to the furnace or the cluster: it must not rest on an
                # extrapolation, however confident the extrapolation looks
                verdict = "undecided"
                note = f"P >= {confidence:g} but outside what the model has seen: a calculation should confirm it"
            record = {"element": element, "host": host, "method": method, "probability": probability, "verdict": verdict,
                      "verdict_note": note}
            for tied, each in zip(setting.resolved, held_each):
                record[f"P: {tied.label}"] = float(each.mean())
            for quantity, site in read_keys:
                row = summary_index[(element, host, site, method, quantity)]
                label = f"{quantity}@{site}"
                record[label] = float(summary["value"].iat[row])
                record[f"{label} lo"] = float(summary["lo"].iat[row])
                record[f"{label} hi"] = float(summary["hi"].iat[row])
                record[f"{label} status"] = summary["status"].iat[row]
            record["outside_domain"] = bool(reasons)
            record["domain_note"] = "; ".join(reasons)
            record["caution"] = flags.at[element, "note"]
            record["decisive_cell"], record["decisive_gain_bits"], record["decisive_cost"] = "", np.nan, np.nan
            if verdict == "undecided" and open_positions:
                candidates = []
                for quantity in condition_quantities:
                    block = blocks[quantity]
                    if block is None:
                        continue
                    mine = np.flatnonzero(block.cells["element"].to_numpy() == element)
                    for where in mine:
                        column = np.zeros(n + 1)
                        for position, (q, w) in open_positions.items():
                            if q == quantity:
                                column[position] = block.cov[where, w]
                        column[-1] = block.cov[where, where]
                        key = tuple(block.cells.loc[where, list(KEY_COLUMNS)])
                        candidates.append((_cell_label(*key[1:]), column, key[3]))
                best = decisive_calculation(
                    mean, cov, candidates, setting.resolved, setting.index, deciding_normals, costs
                )
                if best is not None:
                    record["decisive_cell"], record["decisive_gain_bits"], record["decisive_cost"] = best
                elif note:
                    # the model sees nothing left to learn, but its certainty is an
                    # extrapolation: the cell it is least sure of is the one to check
                    position = max(open_positions, key=lambda p: cov[p, p])
                    quantity, site = setting.keys[position]
                    record["decisive_cell"] = _cell_label(host, site, method, quantity)
                    record["decisive_cost"] = float(costs.get(method, 1.0))
            if temperature is not None:
                _thermodynamics(
                    record, setting, draws, temperature, site_properties, multiplicity_defaults, tail,
                    binding_quantity, binding_site, sign, concentration, coordination, notes,
                )
            record["conditions"] = condition_text
            records.append(record)
    frame = pd.DataFrame(records)
    frame = frame.sort_values(["host", "method", "probability"], ascending=[True, True, False], kind="stable")
    frame.insert(3, "rank", frame.groupby(["host", "method"]).cumcount() + 1)
    frame = frame.reset_index(drop=True)
    if temperature is not None and multiplicity_defaults:
        shown = ", ".join(f"{host} {site}" for host, site in sorted(multiplicity_defaults))
        notes.append(
            f"site multiplicities not given for {shown}: 1 per formula unit assumed (add a 'multiplicity' "
            f"column to the host file)."
        )
    notes.append(
        f"probabilities from {int(n_draws)} joint draws per element (sampling error at most "
        f"{0.5 / math.sqrt(n_draws):.3f}; exact where every cell read is computed); draws of different "
        f"quantities are independent, as the model learns each quantity on its own."
    )
    frame.attrs["notes"] = list(dict.fromkeys(notes))
    return frame


def _band(values, tail):
    """Lower bound, median and upper bound of draws (one sort; exact for constant draws)."""
    if values[0] == values[-1] and np.all(values == values[0]):
        value = float(values[0])
        return value, value, value
    low, middle, high = np.quantile(values, [tail, 0.5, 1.0 - tail])
    return float(low), float(middle), float(high)


def _thermodynamics(record, setting, draws, temperature, site_properties, multiplicity_defaults, tail,
                    binding_quantity, binding_site, sign, concentration, coordination, notes):
    """Site populations and bound vacancies at ``temperature``, as median and band over the draws."""
    host = setting.host
    site_quantities = [q for q in setting.quantities if len(setting.sites[q]) >= 2]
    for quantity in site_quantities:
        sites = setting.sites[quantity]
        weights, defaulted = site_properties.multiplicities(host, sites)
        multiplicity_defaults.update((host, site) for site in defaulted)
        energies = draws[:, [setting.index[(quantity, site)] for site in sites]]
        populations = site_populations(energies, temperature, weights)
        prefix = "pop " if len(site_quantities) == 1 else f"pop {quantity}@"
        for position, site in enumerate(sites):
            low, middle, high = _band(populations[:, position], tail)
            record[f"{prefix}{site}"], record[f"{prefix}{site} lo"], record[f"{prefix}{site} hi"] = middle, low, high
    if binding_quantity is None or binding_quantity not in setting.sites:
        return
    sites = setting.sites[binding_quantity]
    site = binding_site
    if site is None:
        if len(sites) != 1:
            notes.append(
                f"trapping not computed in {host}: {binding_quantity} has {len(sites)} sites there; "
                f"name one with --binding {binding_quantity}@SITE."
            )
            return
        site = sites[0]
    if site not in sites:
        notes.append(f"trapping not computed in {host}: no {binding_quantity} cell at site {site}.")
        return
    z = coordination if coordination is not None else site_properties.coordination_of(host, site)
    if z is None:
        notes.append(
            f"trapping not computed in {host}: no coordination for {site}; give --coordination Z or a "
            f"'coordination' column in the host file."
        )
        return
    values = draws[:, setting.index[(binding_quantity, site)]]
    lomer_binding = -values if sign == "negative" else values
    fraction = bound_vacancy_fraction(lomer_binding, concentration, z, temperature)
    low, middle, high = _band(fraction, tail)
    record["bound_vacancies"], record["bound_vacancies lo"], record["bound_vacancies hi"] = middle, low, high
    notes.append(
        f"bound vacancies in {host}: Lomer's relation with Z = {z:g} ({site}), x = {concentration:g}, "
        f"T = {temperature:g} K."
    )
