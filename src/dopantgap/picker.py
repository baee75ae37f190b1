"""Which cells to calculate next: a ranked batch of missing cells, each with its reason.

Candidates are the cells of the filled grid (every element of the table plus any
extra ones, times every host/site/method/quantity column of the table) that are not
computed; a computed cell is never proposed. Each candidate gets a *benefit* under
one of three goals, divided by the *cost* of its method (default 1 per method).

Goals
-----
``table`` (default)
    Expected reduction of the predictive std summed over all missing cells of the
    target method(s), in eV. For a Gaussian joint with fixed hyperparameters,
    observing cell i changes the covariance to C - C[:, i] C[i, :] / C[i, i]
    (Rasmussen & Williams 2006, "Gaussian Processes for Machine Learning", eq. 2.24
    and Algorithm 2.1, the posterior covariance after conditioning on one more
    point), so cell j's std drops from sqrt(C[j, j]) to sqrt(C[j, j] - C[j, i]^2 /
    C[i, i]). The diagonal holds the fitted white noise: C describes what a new
    calculation would return. A calculation that informs many cells therefore ranks
    above one that only settles itself. For Gaussian errors a cell's expected absolute
    error is sqrt(2 / pi) times its std, so the benefit is, up to that factor, the
    expected drop of the summed absolute error: what the table's MAE reads. Summing
    variances instead squares a lone, very uncertain cell's own share, and on replays
    with few elements at the expensive level it sent the picks to outlying elements
    (DEVELOPERS.md, *Table goal: summed std*).
``site``
    Expected reduction of the Shannon entropy, in bits, of which site is lowest in
    energy, for each element, host and method of a quantity with two or more sites in
    a host (``sites.site_quantities``). The candidate's result is drawn at
    Gauss-Hermite nodes of its predictive distribution, the joint Gaussian of that
    element's sites is conditioned on it (rank-1 update of mean and covariance), and
    the site-lowest probabilities are computed exactly for two sites and by Monte
    Carlo with common random numbers (fixed seed) for more. A candidate's benefit is
    the sum of the reductions over the questions of its own element and host at the
    target method(s): without ``method``, a cheap-level calculation counts for the
    cheap question and, through the chain below, for the expensive one. Only cells of
    such quantities and hosts are candidates.
``window``
    For ``window=(quantity, low, high)`` (eV): the probability that a cell's value lies
    inside, p = Phi((high - m) / s) - Phi((low - m) / s), and its binary entropy H(p)
    in bits, largest for undecided cells (p near 0.5). Benefit: the expected reduction
    of H(p) summed over all missing cells of that quantity at the target method(s),
    with the same Gauss-Hermite and rank-1 conditioning. Only cells of that quantity
    are candidates (the other quantities' models do not inform it).

Target methods: with ``method`` given, candidates and the cells whose uncertainty is
counted are that method's missing cells; without it, every method's. Quantities are
learned by separate models, so each quantity is a block of its own. Within a block,
the covariance between levels follows the surrogate's chain value(level k) =
value(level k-1) + correction(k): a cheap-level calculation informs the expensive
cells that rest on its predicted value, exactly as the chain carries it.

Batches
-------
The K picks are chosen one after the other: after each pick the covariance is
conditioned as if its result were known at the predicted mean (the mean does not
change, the covariance gets the rank-1 update above) and every candidate is scored
again, so a batch does not spend K calculations on one question. A pick's
``benefit`` is its benefit given the picks ranked above it; for ``site`` it can
exceed an earlier pick's, when two calculations settle a question only together
(the two competing sites of one element).

Robust picks
------------
A covariance tuned on a handful of expensive elements is itself uncertain: its length
scales, element offsets and noise could have come out otherwise with other elements.
The benefit is therefore averaged, with equal weights, over ``kernels`` plausible
versions of the model (``surrogate.plausible.plausible_surrogates``): the fitted one and
versions whose stages learned from fewer than ``surrogate.plausible.FEW_ELEMENTS``
elements re-tune their hyperparameters on a random two thirds of those elements, then
condition on all of the stage's rows (a correction kept at its column shifts gets the
Gaussian process on top, the form a refit turns to with more elements). Each version's
covariance is conditioned on every pick (``AveragedGoal``). When the versions coincide
(many elements, or ``kernels=1``) the benefit is the single kernel's. The rows (value,
std, reason) are the fitted model's.

While such versions exist the model is unsure of how its columns share information, and
a refit learns how columns differ only from cells in several of them; so the table and
window goals also spread a batch over columns (host, site, method, quantity): each
column once before any column twice (``greedy_batch(spread_columns=True)``). The site
goal does not: its questions pair two sites of one element on purpose. Measured on the
INVENTED demo world with the hybrid level kept for 6 of 61 elements and a full refit
after each round of 10 (DEVELOPERS.md): without the spread, 12 of the first 20 picks
went to one column and the refit was left at 0.068 eV against random's 0.050.

Approximations (stated so that they can be judged)
--------------------------------------------------
- Within each version, hyperparameters and the interval calibration stay fixed, and the
  calibrated covariance (raw covariance scaled by each cell's scenario factor, as
  ``predict_joint`` does) is conditioned as if it were the exact Gaussian posterior.
  The versions are a few re-tunings on subsets of elements with equal weights, not
  draws from the hyperparameters' posterior.
- An expensive-level cell whose cheap level is missing is treated as informative for
  its neighbours through the joint Gaussian, although the surrogate learns the
  correction only from cells computed at both levels.
- ``site`` scores a candidate on its own element's and host's questions only; its
  weaker effect on other elements' questions (through the shared model) is left out,
  and after a pick only questions whose covariance moved noticeably are scored again.
"""

import math
import numbers

import numpy as np
import pandas as pd

from dopantgap.errors import DopantgapError
from dopantgap.reproducible import seed_integer
from dopantgap.gaussian import (
    SETTLED_VARIANCE,
    binary_entropy,
    condition_on,
    expected_site_entropy,
    expected_window_entropy,
    site_entropy,
    site_probabilities,
    summed_std_reduction,
    summed_variance_reduction,
    window_probability,
)
from dopantgap.joint import MAX_JOINT_CELLS, cell_grid, missing_joints, shared_stage_cache
from dopantgap.sites import site_quantities
from dopantgap.progress import expect_steps, step
from dopantgap.surrogate.plausible import N_PLAUSIBLE, plausible_surrogates, uncertain_stages
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS

__all__ = [
    "AveragedGoal",
    "GOALS",
    "PICK_COLUMNS",
    "benefit_text",
    "binary_entropy",
    "condition_on",
    "expected_site_entropy",
    "expected_window_entropy",
    "greedy_batch",
    "joint_groups_text",
    "parse_cost",
    "parse_window",
    "pick_next",
    "robust_picks_text",
    "site_entropy",
    "site_probabilities",
    "summed_variance_reduction",
    "window_probability",
]

#: The acquisition rules ``pick_next`` knows (see the module docstring).
GOALS = ("table", "site", "window")

#: Columns of the frame ``pick_next`` returns, in order.
PICK_COLUMNS = (
    "element", "host", "site", "method", "quantity", "rank", "value", "std",
    "cost", "benefit", "reason", "benefit_unit", "benefit_per_cost", "scenario",
)

# A cell counts as "informed" by a calculation when its variance would drop by at least
# this share (common practice, no source: a threshold for the reason text only).
_INFORMED_SHARE = 0.05
# Monte Carlo draws per site question (common practice, no source); common random
# numbers across candidates keep the differences between candidates far more precise
# than each entropy.
_SITE_SAMPLES = 1024
# After a pick, a site question is scored again only if its covariance moved by more
# than this share of its largest variance (common practice, no source).
_SITE_RESCORE_SHARE = 1e-3
_SETTLED = SETTLED_VARIANCE
#: Smallest benefit a pick must bring to be listed, per benefit unit (common practice, no
#: source): for the table goal the std of a variance the model already treats as settled
#: (``gaussian.SETTLED_VARIANCE``: a cell teaches at least its own std, so only settled
#: cells fall below it); for the entropy goals half the last digit their reason prints,
#: so that no listed pick reads as worth nothing. ``pick_next`` stops short of ``count``
#: rather than pad its list.
USEFUL_BENEFIT = {"eV": math.sqrt(SETTLED_VARIANCE), "bits": 5e-3}
# Probability of the likeliest site from which the site goal's reason calls a preference
# leaning, nearly decided or decided (common practice, no source: words for the reader,
# the ranking uses the entropies themselves).
_SITE_WORDS = ((0.99, "decided"), (0.9, "nearly decided"), (0.6, "leaning"), (0.0, "undecided"))


# ----------------------------------------------------------------- parsing options
def parse_cost(text):
    """Costs per method from text such as ``"gga=1,hyb=30"``.

    Parameters
    ----------
    text : str or None
        Comma-separated ``method=cost`` pairs; each cost a positive number.

    Returns
    -------
    dict
        Method -> cost (float). Methods not named cost 1.

    Raises
    ------
    DopantgapError
        For a pair without ``=``, a cost that is not a positive finite number, or a
        method named twice.

    Examples
    --------
    >>> parse_cost("gga=1, hyb=30")
    {'gga': 1.0, 'hyb': 30.0}
    """
    if text is None or not str(text).strip():
        return {}
    costs = {}
    for pair in str(text).split(","):
        method, equals, number = pair.partition("=")
        method = method.strip()
        if not equals or not method:
            raise DopantgapError(
                f"--cost: {pair.strip() or '(blank)'!r} is not METHOD=COST; "
                f"write pairs separated by commas, e.g. --cost gga=1,hyb=30."
            )
        try:
            cost = float(number)
        except ValueError:
            cost = float("nan")
        if not math.isfinite(cost) or cost <= 0.0:
            raise DopantgapError(
                f"--cost: the cost of {method!r} must be a positive number, got "
                f"{number.strip() or '(blank)'!r}; e.g. --cost gga=1,hyb=30."
            )
        if method in costs:
            raise DopantgapError(f"--cost names {method!r} twice; give each method once.")
        costs[method] = cost
    return costs


def benefit_text(benefit):
    """A benefit as printed: three decimals, or two significant digits below 0.0005
    (a table of small energies has small variances, never shown as 0.000)."""
    return f"{benefit:.3f}" if abs(benefit) >= 5e-4 else f"{benefit:.1e}"


def parse_window(text):
    """The window goal's ``QUANTITY:LOW:HIGH`` (eV), e.g. ``"E_bind:-1.2:-0.4"``.

    Returns
    -------
    tuple
        (quantity, low, high) with low < high.

    Raises
    ------
    DopantgapError
        For another layout, bounds that are not numbers, or low >= high.
    """
    parts = str(text).split(":")
    example = "e.g. --window E_bind:-1.2:-0.4"
    if len(parts) != 3 or not parts[0].strip():
        raise DopantgapError(
            f"--window: {str(text)!r} is not QUANTITY:LOW:HIGH; {example} (bounds in eV)."
        )
    quantity = parts[0].strip()
    try:
        low, high = float(parts[1]), float(parts[2])
    except ValueError:
        raise DopantgapError(
            f"--window: the bounds of {str(text)!r} must be numbers in eV; {example}."
        ) from None
    if not (math.isfinite(low) and math.isfinite(high)) or low >= high:
        raise DopantgapError(
            f"--window: LOW must be below HIGH (both finite, eV), got {parts[1].strip()} "
            f"and {parts[2].strip()}; {example}."
        )
    return quantity, low, high



# ------------------------------------------------------------------------ goals
class _TableGoal:
    unit = "eV"

    def __init__(self, blocks):
        self.blocks = blocks

    def scores(self, block_index):
        return summed_std_reduction(self.blocks[block_index].cov)

    def picked(self, block_index, cell):
        block = self.blocks[block_index]
        block.cov = condition_on(block.cov, cell)

    def reason(self, block_index, cell, benefit, std):
        block = self.blocks[block_index]
        cov = block.cov
        pivot = cov[cell, cell]
        reduction = cov[:, cell] ** 2 / pivot
        variance = np.diag(cov)
        informed = (reduction >= _INFORMED_SHARE * np.maximum(variance, _SETTLED)) & (variance > _SETTLED)
        informed[cell] = False
        methods = block.cells["method"].to_numpy()[informed]
        counts = pd.Series(methods).value_counts(sort=False) if len(methods) else pd.Series(dtype=int)
        if len(counts) == 0:
            reach = "informs no other missing cell noticeably"
        elif len(counts) == 1:
            number = int(counts.iloc[0])
            reach = f"informs {number} other missing {counts.index[0]} cell{'s' * (number != 1)}"
        else:
            parts = ", ".join(f"{int(n)} {m}" for m, n in counts.items())
            reach = f"informs {int(counts.sum())} other missing cells ({parts})"
        own = f"own std {std:.2f} eV"
        left = math.sqrt(max(pivot, 0.0))
        if abs(left - std) > 0.005:
            # the batch's earlier picks already taught part of what this cell holds
            own += f", {left:.2f} eV given the picks above"
        return f"{reach} (summed std -{benefit_text(benefit)} eV; {own})"


class _WindowGoal:
    unit = "bits"

    def __init__(self, blocks, low, high):
        self.blocks = blocks
        self.low, self.high = low, high

    def scores(self, block_index):
        block = self.blocks[block_index]
        current, expected = expected_window_entropy(block.mean, block.cov, self.low, self.high)
        return np.clip(current - expected, 0.0, None)

    def picked(self, block_index, cell):
        block = self.blocks[block_index]
        block.cov = condition_on(block.cov, cell)

    def reason(self, block_index, cell, benefit, std):
        block = self.blocks[block_index]
        p = float(window_probability(block.mean[cell], std, self.low, self.high))
        verdict = "undecided" if 0.2 <= p <= 0.8 else ("likely" if p > 0.8 else "unlikely")
        return (
            f"{block.quantity} in [{self.low:g}, {self.high:g}] eV {verdict}: P(inside)={p:.2f}; "
            f"expected entropy -{benefit:.2f} bits summed over {len(block.cells)} missing cells"
        )


class _SiteGoal:
    """Questions: (element, host, method) of a site quantity; sites' joint from the block."""

    unit = "bits"

    def __init__(self, blocks, grid, known, site_qs, random_state):
        self.blocks = blocks
        rng = np.random.default_rng(random_state)
        self.questions = []  # dicts: block, sites, members (block index or -1), fixed values
        self.by_cell = []  # per block: cell -> list of question indices
        max_sites = 2
        for block_index, block in enumerate(blocks):
            by_cell = {}
            self.by_cell.append(by_cell)
            if block.quantity not in site_qs:
                continue
            index = {key: i for i, key in enumerate(block.cells[list(KEY_COLUMNS)].itertuples(index=False, name=None))}
            rows = grid[(grid["quantity"] == block.quantity) & grid["host"].isin(set(block.cells["host"]))]
            methods = set(block.cells["method"])
            for (element, host, method), part in rows.groupby(["element", "host", "method"], sort=False):
                if method not in methods:
                    continue
                sites = list(dict.fromkeys(part["site"]))
                if len(sites) < 2:
                    continue
                keys = [(element, host, site, method, block.quantity) for site in sites]
                members = np.array([index.get(key, -1) for key in keys])
                if (members < 0).all():
                    continue  # every site computed: nothing to learn here
                fixed = np.array([known.get(key, np.nan) for key in keys])
                if ((members < 0) & np.isnan(fixed)).any():
                    continue  # a site in another joint (a host cut by site): not weighed here
                self.questions.append(
                    {"block": block_index, "element": element, "host": host, "method": method,
                     "sites": sites, "members": members, "fixed": fixed}
                )
                max_sites = max(max_sites, len(sites))
        self.normals = rng.standard_normal((_SITE_SAMPLES, max_sites))
        # candidates of a question: missing cells of the same element and host (any target level)
        for question_index, question in enumerate(self.questions):
            block = self.blocks[question["block"]]
            same = np.flatnonzero(
                (block.cells["element"].to_numpy() == question["element"])
                & (block.cells["host"].to_numpy() == question["host"])
            )
            question["candidates"] = same
            for cell in same:
                self.by_cell[question["block"]].setdefault(int(cell), []).append(question_index)
        self.reductions = [None] * len(self.questions)
        self.current = [None] * len(self.questions)
        for question_index in range(len(self.questions)):
            self._score_question(question_index)

    def _joint(self, question):
        block = self.blocks[question["block"]]
        members = question["members"]
        open_ = members >= 0
        mean = question["fixed"].copy()
        mean[open_] = block.mean[members[open_]]
        cov = np.zeros((len(members), len(members)))
        cov[np.ix_(open_, open_)] = block.cov[np.ix_(members[open_], members[open_])]
        return mean, cov, open_

    def _score_question(self, question_index):
        question = self.questions[question_index]
        block = self.blocks[question["block"]]
        mean, cov, open_ = self._joint(question)
        probabilities = site_probabilities(mean, cov, self.normals)
        current = float(site_entropy(probabilities))
        reductions = {}
        for cell in question["candidates"]:
            column = np.zeros(len(mean) + 1)
            column[:-1][open_] = block.cov[question["members"][open_], cell]
            column[-1] = block.cov[cell, cell]
            if column[-1] <= _SETTLED:
                reductions[int(cell)] = 0.0
                continue
            expected = expected_site_entropy(mean, cov, column, self.normals)
            reductions[int(cell)] = max(current - expected, 0.0)
        self.reductions[question_index] = reductions
        self.current[question_index] = (current, probabilities)
        question["cov_seen"] = cov

    def scores(self, block_index):
        scores = np.zeros(len(self.blocks[block_index].cells))
        for cell, question_indices in self.by_cell[block_index].items():
            scores[cell] = sum(self.reductions[q].get(cell, 0.0) for q in question_indices)
        return scores

    def candidate_mask(self, block_index):
        mask = np.zeros(len(self.blocks[block_index].cells), dtype=bool)
        mask[list(self.by_cell[block_index])] = True
        return mask

    def picked(self, block_index, cell):
        block = self.blocks[block_index]
        block.cov = condition_on(block.cov, cell)
        for question_index, question in enumerate(self.questions):
            if question["block"] != block_index:
                continue
            _mean, cov, _open = self._joint(question)
            moved = np.max(np.abs(cov - question["cov_seen"]))
            if moved > _SITE_RESCORE_SHARE * max(np.max(np.diag(question["cov_seen"])), _SETTLED):
                self._score_question(question_index)

    def reason(self, block_index, cell, benefit, std):
        question_indices = self.by_cell[block_index].get(cell, [])
        best = max(question_indices, key=lambda q: self.reductions[q].get(cell, 0.0))
        question = self.questions[best]
        current, probabilities = self.current[best]
        order = np.argsort(-probabilities, kind="stable")[:2]
        shown = ", ".join(f"P({question['sites'][i]})={probabilities[i]:.2f}" for i in order)
        top = float(probabilities[order[0]])
        verdict = next(word for floor, word in _SITE_WORDS if top >= floor)
        if verdict == "leaning":
            verdict = f"leaning to {question['sites'][order[0]]}"
        reduction = abs(self.reductions[best].get(cell, 0.0))
        text = (
            f"{question['method']} site preference in {question['host']} {verdict}: {shown}; "
            f"entropy {current:.2f} bits, expected -{reduction:.2f}"
        )
        others = len([q for q in question_indices if q != best and self.reductions[q].get(cell, 0.0) > 0.005])
        if others:
            text += f" (-{benefit:.2f} bits counting the other method's question too)"
        return text


class AveragedGoal:
    """A goal's benefit averaged, with equal weights, over the goals of plausible versions
    of the model (``surrogate.plausible.plausible_surrogates``).

    Every version's covariance is conditioned on each pick, so a pick's benefit is its
    average benefit given the picks above under each version. Rows, reasons and the
    std column are the first (the fitted) version's; only the benefit is averaged.

    Parameters
    ----------
    rules : list of goal objects
        The same goal built on each version's blocks (the same cells, in the same order).
    """

    def __init__(self, rules):
        first = rules[0]
        for other in rules[1:]:
            if len(other.blocks) != len(first.blocks) or any(
                len(a.cells) != len(b.cells) for a, b in zip(first.blocks, other.blocks)
            ):
                raise ValueError("every version's goal must hold the same cells")
        self.rules = list(rules)
        self.unit = first.unit
        self.blocks = first.blocks
        if hasattr(first, "candidate_mask"):
            self.candidate_mask = first.candidate_mask

    def scores(self, block_index):
        return np.mean([rule.scores(block_index) for rule in self.rules], axis=0)

    def picked(self, block_index, cell):
        for rule in self.rules:
            rule.picked(block_index, cell)

    def reason(self, block_index, cell, benefit, std):
        return self.rules[0].reason(block_index, cell, benefit, std)


# ------------------------------------------------------------------------ picking
def robust_picks_text(picks):
    """One line saying how a pick list was made robust, or "" when it was not.

    Parameters
    ----------
    picks : DataFrame
        ``pick_next`` output (its ``attrs`` are read).

    Returns
    -------
    str
    """
    kernels = int(picks.attrs.get("kernels", 1))
    if kernels <= 1:
        return ""
    spread = " and each column picked once before any twice" if picks.attrs.get("spread_columns") else ""
    return (f"benefits averaged over {kernels} plausible versions of the model{spread}: its parts learned "
            "from few elements were re-tuned on subsets of them, so the list does not lean on one guess "
            "of how cells share information")


def joint_groups_text(picks):
    """One line saying that a quantity's missing cells were weighed in groups of hosts,
    or "" when every quantity was weighed in one joint.

    Parameters
    ----------
    picks : DataFrame
        ``pick_next`` output (its ``attrs`` are read).

    Returns
    -------
    str
    """
    groups = picks.attrs.get("joint_groups") or {}
    if not groups:
        return ""
    parts = ", ".join(f"{quantity} in {n} groups" for quantity, n in groups.items())
    return (f"too many missing cells to weigh in one joint (at most {MAX_JOINT_CELLS} per quantity): "
            f"{parts} (whole hosts where they fit); a pick's benefit counts the cells of its own group only")


def _check_versions(kernels):
    """The number of plausible kernels as an int >= 1."""
    if isinstance(kernels, bool) or not isinstance(kernels, (int, np.integer)) or kernels < 1:
        raise DopantgapError(f"kernels must be a whole number of at least 1, got {kernels!r}.")
    return int(kernels)


def _check_count(count):
    """The number of picks as an int >= 1 (command-line text accepted)."""
    number = None
    if isinstance(count, (int, np.integer)) and not isinstance(count, bool):
        number = int(count)
    elif isinstance(count, str) and count.strip().isdigit():
        number = int(count.strip())
    if number is None or number < 1:
        raise DopantgapError(
            f"--count must be a whole number of at least 1, got {count!r}; e.g. --count 10."
        )
    return number


def _candidates(rule, block_index):
    """Cells of a block the goal may propose (the site goal: cells of a site question)."""
    mask = getattr(rule, "candidate_mask", None)
    if mask is None:
        return np.ones(len(rule.blocks[block_index].cells), dtype=bool)
    return mask(block_index)


def greedy_batch(rule, count, cell_costs=None, spread_columns=False, progress=None):
    """The batch a goal ranks: one pick after the other, each scored given those above.

    Parameters
    ----------
    rule : goal object
        One of the module's goals (or ``AveragedGoal``) built on ``MissingJoint`` blocks:
        ``blocks``, ``unit``, ``scores(b)``, ``picked(b, cell)``, ``reason(...)``. Its
        blocks' covariances are conditioned on the picks (changed in place).
    count : int
        Most picks; fewer come back when fewer candidates bring ``USEFUL_BENEFIT``.
    cell_costs : list of ndarray or None, default=None
        Cost of each block's cells (default 1 each); the ranking score is benefit / cost.
    spread_columns : bool, default=False
        Take each column (host, site, method, quantity) once before any column twice: a
        candidate in a column the batch already holds is eligible only when no other
        column has a useful one (then every column is free again).
    progress : object or None, default=None
        Told ``update(1)`` after each pick (``progress.step``).

    Returns
    -------
    list of tuple
        ``(block, cell, benefit, benefit_per_cost, std, reason)`` per pick, best first;
        ``std`` is the cell's std before any pick.
    """
    blocks = rule.blocks
    if cell_costs is None:
        cell_costs = [np.ones(len(block.cells)) for block in blocks]
    stds = [np.sqrt(np.clip(np.diag(block.cov), 0.0, None)) for block in blocks]
    allowed = [_candidates(rule, b) for b in range(len(blocks))]
    scores = [rule.scores(b) for b in range(len(blocks))]
    columns = [
        list(block.cells[["host", "site", "method", "quantity"]].itertuples(index=False, name=None))
        for block in blocks
    ]
    used = set()
    ranked = []
    for _ in range(count):
        useful = [allowed[b] & (np.abs(scores[b]) >= USEFUL_BENEFIT[rule.unit]) for b in range(len(blocks))]
        if spread_columns and used:
            fresh = [mask & ~np.array([key in used for key in columns[b]], dtype=bool)
                     for b, mask in enumerate(useful)]
            if any(mask.any() for mask in fresh):
                useful = fresh
            else:
                used = set()  # every column with a useful candidate has one pick: a new round
        best = None
        for b in range(len(blocks)):
            value = np.where(useful[b], scores[b] / cell_costs[b], -np.inf)
            if not len(value):
                continue
            cell = int(np.argmax(value))  # first of ties: grid order, deterministic
            if np.isfinite(value[cell]) and (best is None or value[cell] > best[2]):
                best = (b, cell, float(value[cell]))
        if best is None:
            break
        b, cell, per_cost = best
        benefit = abs(float(scores[b][cell]))
        std = float(stds[b][cell])
        ranked.append((b, cell, benefit, per_cost, std, rule.reason(b, cell, benefit, std)))
        used.add(columns[b][cell])
        allowed[b][cell] = False
        rule.picked(b, cell)
        scores[b] = rule.scores(b)
        step(progress)
    return ranked


def pick_next(
    surrogate,
    count=5,
    goal="table",
    method=None,
    cost=None,
    window=None,
    element_symbols=(),
    random_state=0,
    host=None,
    new_hosts=None,
    kernels=N_PLAUSIBLE,
    progress=None,
):
    """A ranked batch of missing cells worth calculating next.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate (either learner).
    count : int, default=5
        Number of picks; fewer come back if fewer cells are missing.
    goal : {"table", "site", "window"}, default="table"
        Acquisition rule (module docstring).
    method : str or None, default=None
        Propose and count only this method's cells; None: every method's.
    cost : dict, str or None, default=None
        Method -> cost (``parse_cost`` text accepted); methods not named cost 1.
    window : tuple or str or None, default=None
        (quantity, low, high) in eV, or its ``QUANTITY:LOW:HIGH`` text; needed by
        the window goal.
    element_symbols : sequence of str, default=()
        Elements to add to those of the table (their cells are all missing).
    random_state : None, int, RandomState or Generator, default=0
        Seed of the site goal's Monte Carlo draws (``reproducible.seed_integer``,
        checked before any work).
    host : str or None, default=None
        Propose, and count the benefit over, this host's cells only: what to compute
        first in a host (a new one included, with ``new_hosts``).
    new_hosts : NewHostPlan or None, default=None
        Hosts with no computed cell (``new_hosts.plan_new_hosts``): their cells join
        the candidates, predicted by the plan's model.
    kernels : int, default=N_PLAUSIBLE
        Plausible versions of the model the benefit is averaged over, the fitted one
        included (``AveragedGoal``; module docstring, "Robust picks"); 1: the fitted
        model alone. Only stages learned from few elements have versions.
    progress : object or None, default=None
        Told the number of steps first (``expect``, when it has one: the re-tuned
        versions, each version's joint per quantity, the picks), then ``update(1)``
        after each (``progress.bar``).

    Returns
    -------
    DataFrame
        ``PICK_COLUMNS``, one row per pick, ranked 1..K: the cell, its current
        calibrated ``value`` and ``std`` (eV), the method's ``cost``, ``benefit``
        (in ``benefit_unit``: eV for table, bits for site and window; given the
        picks ranked above), ``benefit_per_cost`` (the ranking score), the cell's
        ``scenario`` and a short ``reason`` (quoting the row's ``std``). Only picks
        worth at least ``USEFUL_BENEFIT`` of their unit are listed: fewer than ``count``
        rows come back when fewer cells would teach anything noticeable.
        ``attrs["candidates"]`` holds the number of missing cells weighed,
        ``attrs["kernels"]`` the number of versions the benefit was averaged over,
        ``attrs["joint_groups"]`` the quantities whose missing cells were weighed in
        groups of hosts (more than ``joint.MAX_JOINT_CELLS``) and their number of groups.

    Raises
    ------
    DopantgapError
        For an unknown goal, method or cost method, a bad count or window, or a
        site goal on a table without two sites in any host.
    """
    count = _check_count(count)
    random_state = seed_integer(random_state)
    if goal not in GOALS:
        raise DopantgapError(f"--goal: {goal!r} is not a goal; choose one of {', '.join(GOALS)}.")
    levels = list(surrogate.levels_)
    if method is not None and method not in levels:
        raise DopantgapError(
            f"--method: {method!r} is not a method of the model; choose one of {', '.join(levels)}."
        )
    costs = parse_cost(cost) if cost is None or isinstance(cost, str) else dict(cost)
    unknown = [name for name in costs if name not in levels]
    if unknown:
        raise DopantgapError(
            f"--cost names {', '.join(map(repr, unknown))}, not a method of the model; "
            f"the methods are {', '.join(levels)}."
        )
    for name, value in costs.items():
        if isinstance(value, bool) or not (isinstance(value, numbers.Real) and math.isfinite(value) and value > 0):
            raise DopantgapError(f"--cost: the cost of {name!r} must be a positive number, got {value!r}.")
    table = surrogate.table_
    quantities = list(dict.fromkeys(table["quantity"]))
    if goal == "window":
        if window is None:
            raise DopantgapError("--goal window needs --window QUANTITY:LOW:HIGH, e.g. --window E_bind:-1.2:-0.4.")
        window_quantity, low, high = parse_window(window) if isinstance(window, str) else window
        low, high = float(low), float(high)
        if window_quantity not in quantities:
            raise DopantgapError(
                f"--window: {window_quantity!r} is not a quantity of the model; "
                f"choose one of {', '.join(quantities)}."
            )
        if not low < high:
            raise DopantgapError(f"--window: LOW must be below HIGH, got {low} and {high}.")
        quantities = [window_quantity]
    elif window is not None:
        raise DopantgapError("--window is used only by --goal window; add --goal window or drop --window.")
    if goal == "site":
        site_qs = site_quantities(table)
        if not site_qs:
            raise DopantgapError(
                "--goal site needs a quantity with two or more sites in a host; the table has "
                "none. Use --goal table or --goal window."
            )
        quantities = [quantity for quantity in quantities if quantity in site_qs]
    methods = levels if method is None else [method]
    extra_columns = None
    if new_hosts is not None:
        surrogate, extra_columns = new_hosts.surrogate, new_hosts.columns
    grid = cell_grid(surrogate, element_symbols, extra_columns)
    if host is not None:
        if host not in set(grid["host"]):
            raise DopantgapError(
                f"--host: {host!r} is not a host of the model; choose one of "
                f"{', '.join(dict.fromkeys(grid['host']))}, or name a new host with its formula."
            )
        grid = grid[grid["host"] == host].reset_index(drop=True)
    n_versions = _check_versions(kernels)
    n_versions = n_versions if n_versions > 1 and uncertain_stages(surrogate) else 1
    expect_steps(progress, (n_versions - 1) + n_versions * len(quantities) + count)
    versions = plausible_surrogates(surrogate, n_versions=n_versions, random_state=random_state, progress=progress)
    rules = []
    # the versions share the stages they do not re-tune: each stage's joint is made once
    stage_cache = shared_stage_cache(versions)
    for version in versions:
        blocks = missing_joints(version, grid, methods, quantities, progress=progress, stage_cache=stage_cache)
        if goal == "table":
            rules.append(_TableGoal(blocks))
        elif goal == "window":
            rules.append(_WindowGoal(blocks, low, high))
        else:
            known = surrogate._known(table[list(REQUIRED_COLUMNS)])
            rules.append(_SiteGoal(blocks, grid, known, set(site_qs), random_state))
    rule = rules[0] if len(rules) == 1 else AveragedGoal(rules)
    blocks = rule.blocks
    # a cell's value is reported as it was before any pick, by the fitted model
    means = [block.mean.copy() for block in blocks]
    cell_costs = [
        np.array([float(costs.get(name, 1.0)) for name in block.cells["method"]]) for block in blocks
    ]
    # a model unsure of how its columns share information spreads the batch over them
    # (module docstring, "Robust picks"); the site goal's questions pair sites on purpose
    spread = len(versions) > 1 and goal != "site"
    ranked = greedy_batch(rule, count, cell_costs, spread_columns=spread, progress=progress)
    step(progress, count - len(ranked))  # a shorter list: the steps of the picks not made
    records = []
    for rank, (b, cell, benefit, per_cost, std, reason) in enumerate(ranked, start=1):
        block = blocks[b]
        row = dict(zip(KEY_COLUMNS, block.cells.loc[cell, list(KEY_COLUMNS)]))
        row.update(
            rank=rank,
            value=float(means[b][cell]),
            std=std,
            cost=float(cell_costs[b][cell]),
            benefit=benefit,
            reason=reason,
            benefit_unit=rule.unit,
            benefit_per_cost=per_cost,
            scenario=block.cells.at[cell, "scenario"],
        )
        records.append(row)
    picks = pd.DataFrame(records, columns=list(PICK_COLUMNS))
    # how many missing cells were weighed, so that an empty or short list can say why
    picks.attrs["candidates"] = int(sum(int(_candidates(rule, b).sum()) for b in range(len(blocks))))
    # how many plausible versions of the model the benefits were averaged over, and
    # whether the batch was spread over columns
    picks.attrs["kernels"] = len(versions)
    picks.attrs["spread_columns"] = spread
    # quantities whose missing cells were weighed in groups of hosts (joint.joint_groups)
    picks.attrs["joint_groups"] = {
        block.quantity: block.n_groups for block in blocks if block.n_groups > 1
    }
    return picks
