"""A replay in words and files: the summary table, the rounds, the floor and the share."""

import json
import math
from pathlib import Path

from dopantgap.atomic import write_text_atomic
from dopantgap.replay.scoring import RANDOM
from dopantgap.table import write_table

__all__ = ["replay_text", "write_replay"]


_RELEARN_WORDS = {
    "refresh": ("the model refreshed after each round (learner, correction form and hyperparameters kept "
                "until a stage outgrows them): a first look only, since the full fits you run between rounds "
                "(--relearn fit, the default) can change those and tell another story"),
    "fit": "the model fitted in full after each round",
}


def replay_text(result):
    """Plain-text summary of a replay, lines ending ``\\n``."""
    settings = result.settings
    lines = [
        f"Replay of {settings['method']}: {settings['n_hidden']} cells hidden, {settings['n_visible']} visible "
        f"({settings['hiding_rule']}).",
        f"{settings['rounds']} rounds of {settings['per_round']} picks; random picks over "
        f"{settings['n_random_seeds']} seeds among the same hidden cells (median shown); "
        f"{_RELEARN_WORDS[settings.get('relearn', 'refresh')]}.",
        f"Figures scored against the {settings.get('scored_against', 'completed table')}.",
        "",
        f"  {'goal':<8} {'figure':<8} {'picks':>5} {'picker':>9} {'random':>9} {'ratio':>6} "
        f"{'picker needs':>13} {'saved':>7}",
    ]
    for row in result.summary.itertuples(index=False):
        digits = 3 if row.metric == "error" else 1
        needs = "never" if math.isnan(row.picker_picks_to_match) else f"{row.picker_picks_to_match:.1f}"
        if row.picker_picks_to_match == 0.0:
            needs = "at start"
        saved = "none" if row.picks_saved <= 0.0 else f"{row.picks_saved:.1f}"
        label = "MAE eV" if row.metric == "error" else "decided"
        lines.append(
            f"  {row.goal:<8} {label:<8} {row.picks:>5} {row.picker_final:>9.{digits}f} "
            f"{row.random_median_final:>9.{digits}f} {row.ratio:>6.2f} {needs:>13} {saved:>7}"
        )
    lines.append("")
    lines.append("saved: random's picks minus those the picker's curve needed (interpolated) to reach "
                 "random's final figure (median over seeds); never negative")
    lines += _round_lines(result)
    for row in result.summary.itertuples(index=False):
        if row.note:
            lines.append(f"note: {row.goal}/{row.metric}: {row.note}")
    return "\n".join(lines) + "\n"


def _round_lines(result):
    """Error per round: each goal, random's median and spread over seeds, and the floor."""
    curves = result.curves
    randoms = curves[curves["strategy"] == RANDOM].groupby("round")["error"]
    goals = [goal for goal in dict.fromkeys(curves["strategy"]) if goal != RANDOM]
    if curves.empty or randoms.ngroups == 0 or curves["error"].isna().all():
        return []
    median, low, high = randoms.median(), randoms.quantile(0.25), randoms.quantile(0.75)
    picks = curves[curves["strategy"] == RANDOM].groupby("round")["n_revealed"].median()
    lines = ["", "MAE (eV) per round; random: median [quartiles] over seeds:",
             f"  {'round':>5} {'picks':>5} " + " ".join(f"{goal:>8}" for goal in goals) + "  random"]
    for number in median.index:
        picked = [
            curves[(curves["strategy"] == goal) & (curves["round"] == number)]["error"] for goal in goals
        ]
        shown = " ".join(f"{part.iat[0]:>8.4f}" if len(part) else f"{'':>8}" for part in picked)
        lines.append(f"  {number:>5} {int(picks.at[number]):>5} {shown}  {median.at[number]:.4f} "
                     f"[{low.at[number]:.4f}, {high.at[number]:.4f}]")
    error_rows = result.summary[result.summary["metric"] == "error"]
    floor = float(error_rows["floor"].iat[0]) if len(error_rows) and "floor" in error_rows else math.nan
    if not math.isnan(floor):
        lines.append(f"floor: {floor:.4f} eV over all hidden cells, each predicted with every other hidden "
                     "cell known")
        last = curves["round"].max()
        for row in error_rows.itertuples(index=False):
            share = "n/a (random at the floor)" if math.isnan(row.share_removed) else f"{row.share_removed:.0%}"
            final = curves[(curves["strategy"] == row.goal) & (curves["round"] == last)]
            left = float(final["floor_left"].iat[0]) if len(final) and "floor_left" in final else math.nan
            over = f" (floor {left:.4f} eV over the cells it left hidden)" if not math.isnan(left) else ""
            lines.append(f"  {row.goal}: share of random's excess error removed, each over the floor of the "
                         f"cells it still hides: {share}{over}")
            lines += _share_spread_lines(row)
    return lines


def _share_spread_lines(row):
    """How far random's own seeds move the share: it is read only where they move it little."""
    if math.isnan(row.random_excess) or row.random_excess <= 0:
        return []

    def percent(value):
        return "n/a" if math.isnan(value) else f"{value:.0%}"

    # a picker below the floor of the cells it left gains more against the nearer seed
    shares = [share for share in (row.share_low, row.share_high) if not math.isnan(share)]
    reading = f"{percent(min(shares))} to {percent(max(shares))}"
    if len(shares) < 2:
        reading = f"{percent(row.share_high)} (its lower quartile seed reached the floor)"
    lines = [f"    random's median excess {row.random_excess:.4f} eV, its seeds' quartiles "
             f"{row.random_excess_spread:.4f} eV apart; against random's quartile seeds the share is {reading}"]
    chance_low = getattr(row, "chance_share_low", math.nan)
    chance_high = getattr(row, "chance_share_high", math.nan)
    if not (math.isnan(chance_low) or math.isnan(row.share_removed)):
        if row.share_removed > chance_high:
            verdict = "this picker's share lies above that range"
        elif row.share_removed >= chance_low:
            verdict = "this picker's share lies inside it, so this replay cannot tell the picker from chance"
        else:
            verdict = "this picker's share lies below it: random picks did better here"
        lines.append(f"    a picker no better than random reads {percent(chance_low)} to {percent(chance_high)} here "
                     f"(each random seed against the median of the others): {verdict}")
    if row.random_excess_spread >= row.random_excess:
        lines.append("    the share cannot be read here: random's seeds spread as much as their excess over the "
                     "floor (random nearly reached the floor)")
    return lines


def write_replay(result, out_dir):
    """Write a replay's files into ``out_dir`` (created if needed).

    Files: ``curves.csv``, ``summary.csv``, ``picks.csv`` (revealed cells),
    ``hidden.csv`` (cells hidden at the start), ``settings.json`` and
    ``learning_curves.png`` (``plots.learning_curve_figure``).

    Returns
    -------
    dict
        Name -> path written.
    """
    out_dir = Path(out_dir)
    paths = {
        "curves": out_dir / "curves.csv",
        "summary": out_dir / "summary.csv",
        "picks": out_dir / "picks.csv",
        "hidden": out_dir / "hidden.csv",
        "settings": out_dir / "settings.json",
    }
    write_table(result.curves, paths["curves"])
    write_table(result.summary, paths["summary"])
    write_table(result.picks, paths["picks"])
    write_table(result.hidden, paths["hidden"])
    write_text_atomic(paths["settings"], json.dumps(result.settings, indent=2, sort_keys=True) + "\n")
    from dopantgap import plots  # matplotlib only when files are written

    unit = "cost units" if result.settings.get("cost") else "calculations"
    paths["png"] = out_dir / "learning_curves.png"
    floors = result.summary.loc[result.summary["metric"] == "error", "floor"] if "floor" in result.summary else []
    floor = float(floors.iat[0]) if len(floors) else None
    plots.save_png(plots.learning_curve_figure(result.curves, cost_unit=unit, floor=floor), paths["png"])
    return paths
