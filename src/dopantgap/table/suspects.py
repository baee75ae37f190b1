"""Values that a unit slip or a flipped sign would explain, found before they mislead a fit.

One energy typed in meV among values in eV, or one element's energies with the sign
flipped, reads without error yet moves every estimate near it. Each value is compared
twice, with the modified z-score of Iglewicz & Hoaglin::

    z = (x - median) / (MAD / 0.6745)

(B. Iglewicz and D. C. Hoaglin, *How to Detect and Handle Outliers*, ASQC Basic References
in Quality Control vol. 16, ASQC Quality Press, 1993: MAD is the median absolute deviation
from the median and 0.6745 the upper quartile of the standard normal, so the divisor is a
standard deviation for normal data; |z| > 3.5 marks a potential outlier.)

column
    against the other values of its column (host/site/method/quantity; pooled over hosts
    when the host's own column has too few values);
levels
    its difference from the same element's value at another method (same host, site and
    quantity) against that difference for the other elements computed at both methods.

A value is flagged only when it lies beyond 3.5 in a comparison *and* one reading brings it
back inside: divided by 1000 (written in meV), divided by 96.485 (written in kJ/mol), or
with its sign flipped. Values that are merely far from the rest are not flagged, because
real tables have heavy tails. Measured in ``benchmarks/bench_suspects.py``: |z| > 3.5
alone marks 50 of the 758 values of the invented demo table (large alkali and
alkaline-earth ions), and of the real tables 8 of 408 (Wu, Mayeshiba & Morgan, Sci. Data 3,
160054, 2016) and 1 of 575 (Ruban, Skriver & Norskov, Phys. Rev. B 59, 15990, 1999), all
of them right; with a reading required, no value of these or of 40 invented tables (25,712
values) is marked, while 99 % of planted meV slips and 76 % of planted flipped signs are
(a sign flip cannot show in a column whose values straddle zero).
"""

from statistics import NormalDist

import numpy as np
import pandas as pd
from scipy.constants import Avogadro, electron_volt

from dopantgap.table.columns import KEY_COLUMNS, shown
from dopantgap.table.labels import row_describe

__all__ = ["SUSPECT_COLUMNS", "SUSPECT_THRESHOLD", "suspect_values"]

#: |modified z| beyond which a value is a potential outlier (Iglewicz & Hoaglin 1993).
SUSPECT_THRESHOLD = 3.5
# Upper quartile of the standard normal: MAD / 0.6745 estimates a normal standard deviation.
_NORMAL_QUARTILE = NormalDist().inv_cdf(0.75)
# Fewer values than this and the median and MAD say too little about a column (common
# practice, no source). A unit slip lands a thousand spreads out, so a rough spread will do;
# a flipped sign lands a few spreads out, so it is weighed only on a better-known spread
# (measured in benchmarks/bench_suspects.py: with 5 values for signs too, 11 right values
# of 25,712 in 40 invented tables were taken for flipped signs; with 8, none).
_MIN_VALUES = 5
_MIN_VALUES_FOR_SIGN = 8
# Spread below which a column's scatter is rounding, not chemistry: published tables give
# energies to 0.01 eV (common practice, no source).
_SPREAD_FLOOR = 0.01
# A unit reading is weighed only for a value this many times larger than the largest
# magnitude the column's bulk allows, so a value merely beyond the tail is not taken for
# meV (common practice, no source; a true meV value is a thousand times too large).
_UNIT_MARGIN = 10.0
# A column is one-signed, and a value of the other sign there may be a flipped sign, when at
# most this share of its other values has that sign (common practice, no source).
_OTHER_SIGN_SHARE = 0.05
# kJ/mol per eV: the elementary charge times Avogadro's constant (exact in the 2019 SI).
_KJ_PER_MOL = electron_volt * Avogadro / 1000.0
_UNIT_READINGS = (("meV", 1e-3), ("kJ/mol", 1.0 / _KJ_PER_MOL))
_CAUSE_WORDS = {"meV": "written in meV", "kJ/mol": "written in kJ/mol", "sign": "a flipped sign"}

#: Columns of :func:`suspect_values`'s result.
SUSPECT_COLUMNS = (
    "where", *KEY_COLUMNS, "value", "comparison", "robust_z", "likely_cause", "corrected_value",
    "message",
)


def _centre_and_spread(values):
    centre = float(np.median(values))
    spread = float(np.median(np.abs(values - centre))) / _NORMAL_QUARTILE
    return centre, max(spread, _SPREAD_FLOOR)


def _readings(value, expected, spread, n_values, others=None):
    """Readings of ``value`` that bring it back inside the bulk, best first.

    ``expected`` is where the value should lie (the column's median, or the other level's
    value plus the usual difference); a reading fits within the threshold of it, or, given
    the column's ``others`` values, anywhere within their range. Unit readings are weighed
    only for a value far larger than anything the bulk allows; a flipped sign only for a
    value of the other sign than ``expected``, where the bulk (of ``n_values`` values)
    excludes zero or the column is one-signed (nearly all ``others`` have the sign of
    ``expected``).
    """
    limit = SUSPECT_THRESHOLD * spread

    def fits(corrected):
        if abs(corrected - expected) <= limit:
            return True
        return others is not None and len(others) and others.min() <= corrected <= others.max()

    found = []
    if abs(value) >= _UNIT_MARGIN * (abs(expected) + limit):
        for cause, factor in _UNIT_READINGS:
            corrected = value * factor
            if fits(corrected):
                found.append((abs(corrected - expected), cause, corrected))
    one_signed = others is not None and len(others) and np.mean(others * value > 0) <= _OTHER_SIGN_SHARE
    if (n_values >= _MIN_VALUES_FOR_SIGN and (abs(expected) > limit or one_signed)
            and value * expected < 0 and fits(-value)):
        found.append((abs(-value - expected), "sign", -value))
    return [(cause, corrected) for _, cause, corrected in sorted(found)]


def _reading_text(readings, what):
    cause, corrected = readings[0]
    phrase = f"read as {cause} it would be" if cause != "sign" else "with its sign flipped it would be"
    text = f"{phrase} {corrected:.4g} eV, {what}: likely {_CAUSE_WORDS[cause]}"
    if len(readings) > 1:
        text += " (or " + ", ".join(_CAUSE_WORDS[other] for other, _ in readings[1:]) + ")"
    return text


def _cell_name(row):
    return (f"{shown(row.element)} at {shown(row.host)}/{shown(row.site)}/{shown(row.method)}/"
            f"{shown(row.quantity)}")


def _column_references(core):
    """Per row position: (median, spread, positions, name) of the column it is judged in."""
    values = core["value"].to_numpy()
    pooled = core.groupby(["quantity", "site", "method"], sort=False).indices
    references = {}
    for (quantity, site, method, _host), positions in core.groupby(
        ["quantity", "site", "method", "host"], sort=False
    ).indices.items():
        reference, label = positions, "its column"
        if len(positions) < _MIN_VALUES:
            reference = pooled[(quantity, site, method)]
            label = f"the column {shown(site)}/{shown(method)}/{shown(quantity)} of all hosts"
            if len(reference) < _MIN_VALUES:
                continue
        centre, spread = _centre_and_spread(values[reference])
        for position in positions:
            references[int(position)] = (centre, spread, reference, label)
    return references


def _column_suspects(core, frame, references):
    """Flags from the comparison of each value with its own column."""
    values = core["value"].to_numpy()
    found = {}
    for position, (centre, spread, reference, label) in references.items():
        value = float(values[position])
        z = (value - centre) / spread
        if abs(z) <= SUSPECT_THRESHOLD:
            continue
        readings = _readings(value, centre, spread, len(reference), values[reference[reference != position]])
        if not readings:
            continue
        message = (
            f"{row_describe(frame, position)}: {_cell_name(core.iloc[position])} is {value:.6g} eV, "
            f"{abs(z):.3g} robust spreads {'above' if z > 0 else 'below'} the median of "
            f"{label} ({centre:.3g} eV; spread {spread:.2g} eV, {len(reference)} values); "
            + _reading_text(readings, "inside that column")
        )
        found[position] = ("column", z, readings, message)
    return found


def _level_suspects(core, frame, column_z):
    """Flags from the comparison of each value with the same element's other methods."""
    methods = sorted(core["method"].unique())
    if len(methods) < 2:
        return {}
    cell = ["element", "host", "site", "quantity"]
    positions = pd.Series(np.arange(len(core)), index=pd.MultiIndex.from_frame(core[cell + ["method"]]))
    # a repeated cell (possible in a frame built in memory) is judged by its first row
    wide = positions[~positions.index.duplicated()].unstack("method")
    values = core["value"].to_numpy()
    found = {}
    for first_index, first in enumerate(methods):
        for second in methods[first_index + 1:]:
            pair = wide[[first, second]].dropna().astype(np.int64)
            if len(pair) < _MIN_VALUES:
                continue
            for (host, site, quantity), group in pair.groupby(level=["host", "site", "quantity"], sort=False):
                if len(group) < _MIN_VALUES:
                    continue
                a = group[first].to_numpy()
                b = group[second].to_numpy()
                difference = values[b] - values[a]
                centre, spread = _centre_and_spread(difference)
                for index in np.flatnonzero(np.abs(difference - centre) > SUSPECT_THRESHOLD * spread):
                    choices = []
                    # which of the two cells is wrong: a reading of the second must bring the
                    # difference back, or one of the first; the cell farther out in its own
                    # column is blamed when both could be
                    for position, other, sign in ((b[index], a[index], 1.0), (a[index], b[index], -1.0)):
                        expected = values[other] + sign * centre
                        readings = _readings(float(values[position]), expected, spread, len(group))
                        if readings:
                            choices.append((abs(column_z.get(position, 0.0)), position, other, readings))
                    if not choices:
                        continue
                    _, position, other, readings = max(choices, key=lambda choice: choice[0])
                    row = core.iloc[position]
                    other_method = core["method"].iat[other]
                    value = float(values[position])
                    gap = value - float(values[other])
                    usual = centre if row.method == second else -centre
                    z = (gap - usual) / spread
                    message = (
                        f"{row_describe(frame, position)}: {_cell_name(row)} is {value:.6g} eV, "
                        f"{gap:+.4g} eV from its {shown(other_method)} value "
                        f"({row_describe(frame, other)}), where {shown(row.method)} minus "
                        f"{shown(other_method)} is typically {usual:+.3g} eV (spread {spread:.2g} "
                        f"eV, {len(group)} elements computed at both); "
                        + _reading_text(readings, f"{readings[0][1] - float(values[other]):+.3g} eV "
                                                  f"from its {shown(other_method)} value")
                    )
                    found.setdefault(position, ("levels", z, readings, message))
    return found


def suspect_values(frame):
    """Values that a unit slip (meV, kJ/mol) or a flipped sign would explain.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table with columns ``element, host, site, method, quantity, value`` (as
        returned by :func:`~dopantgap.table.read_table`); ``_file``/``_line`` name the rows.

    Returns
    -------
    pandas.DataFrame
        One row per flagged value, in table order, with ``SUSPECT_COLUMNS``: ``where``
        (``file:line``, or the row of an in-memory frame), the cell's keys and value,
        ``comparison`` (``"column"``, ``"levels"`` or both joined by ``", "``),
        ``robust_z`` (the modified z-score of the first comparison), ``likely_cause``
        (``"meV"``, ``"kJ/mol"`` or ``"sign"``), ``corrected_value`` (eV, the value read
        that way) and ``message`` (one line saying all of it). Empty when nothing is
        flagged.

    Examples
    --------
    >>> from dopantgap.demo import demo_table
    >>> len(suspect_values(demo_table()))
    0
    """
    core = frame[list(KEY_COLUMNS) + ["value"]].reset_index(drop=True)
    core = core.astype({name: str for name in KEY_COLUMNS}).astype({"value": np.float64})
    if len(core) == 0:
        return pd.DataFrame(columns=list(SUSPECT_COLUMNS))
    references = _column_references(core)
    by_column = _column_suspects(core, frame, references)
    values = core["value"].to_numpy()
    column_z = {position: (values[position] - centre) / spread
                for position, (centre, spread, _, _) in references.items()}
    by_levels = _level_suspects(core, frame, column_z)
    rows = []
    for position in sorted(set(by_column) | set(by_levels)):
        flags = [found[position] for found in (by_column, by_levels) if position in found]
        comparison, z, readings, _ = flags[0]
        row = core.iloc[position]
        rows.append({
            "where": row_describe(frame, position),
            **{name: row[name] for name in KEY_COLUMNS},
            "value": float(row["value"]),
            "comparison": ", ".join(flag[0] for flag in flags),
            "robust_z": float(z),
            "likely_cause": readings[0][0],
            "corrected_value": float(readings[0][1]),
            "message": "; also ".join(
                [flags[0][3]] + [flag[3].split(": ", 1)[1] for flag in flags[1:]]
            ),
        })
    return pd.DataFrame(rows, columns=list(SUSPECT_COLUMNS))
