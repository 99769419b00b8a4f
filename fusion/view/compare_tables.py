"""The comparison in the terminal: settings ranked on one figure, each figure's mean over seeds with its interval,
in as many tables as the terminal's width needs (setting names and figure labels are never cut)."""

from __future__ import annotations

import math

from fusion.compare import FIGURES, Setting
from fusion.compare.verdicts import INTERVAL
from fusion.view.fitting import Column, fitted_tables

__all__ = ["TABLE_FIGURES", "ranked", "cell", "tables", "comparison_text"]

TABLE_FIGURES = (
    "median_error_m",
    "p95_error_m",
    "median_heading_error_deg",
    "in_region",
    "nll",
    "brier",
    "recovery_s",
    "recovered",
    "alert_precision",
    "alert_recall",
    "false_alerts",
    "ms_per_step",
)
"""The figures shown in tables, in order (the report's legend explains every figure)."""


def ranked(summary, settings: list[Setting], rank_by: str) -> list[Setting]:
    """Settings from best to worst on ``rank_by`` (settings without a value last)."""
    fig = FIGURES[rank_by]
    means = summary[summary.figure == rank_by].set_index("key")["mean"]

    def score(s: Setting):
        v = float(means.get(s.key, math.nan))
        return (not math.isfinite(v), v if fig.better == "low" else -v)

    return sorted(settings, key=score)


def cell(summary, key: str, name: str) -> str:
    """``mean (low–high)`` of one setting's figure, or ``–`` where it does not apply."""
    row = summary[(summary.key == key) & (summary.figure == name)]
    if row.empty or not math.isfinite(float(row["mean"].iloc[0])):
        return "–"
    mean, lo, hi = (float(row[c].iloc[0]) for c in ("mean", "low", "high"))
    digits = 2 if name not in ("ms_per_step", "false_alerts", "recovery_s") else 1
    text = f"{mean:.{digits}f}"
    if math.isfinite(lo):
        text += f" ({lo:.{digits}f}–{hi:.{digits}f})"
    return text


def _header(name: str) -> str:
    f = FIGURES[name]
    return f"{f.label}{' (' + f.unit + ')' if f.unit else ''} {'↓' if f.better == 'low' else '↑'}"


def tables(summary, settings: list[Setting], rank_by: str, title: str, width: int = 120) -> list:
    """The comparison as tables that fit ``width`` columns: the figures are split across as many tables as
    needed (each keeps the ranking and the setting names whole).  The first table holds ``rank_by``."""
    order = ranked(summary, settings, rank_by)
    figures = [rank_by, *(n for n in TABLE_FIGURES if n != rank_by)]
    rows = [[str(i), s.label, *(cell(summary, s.key, n) for n in figures)] for i, s in enumerate(order, 1)]
    keys = [Column("#", "right"), Column("setting")]
    values = [Column(_header(n), "right", "bold" if n == rank_by else None) for n in figures]
    out = fitted_tables(title, keys, values, rows, width)
    out.append(f"Each cell: the mean over seeds and its {INTERVAL}; ranked by {FIGURES[rank_by].label}.")
    return out


def comparison_text(found, width: int) -> list:
    """Everything the terminal shows of a finished comparison (``fusion.compare.conclusion.Comparison``): the
    tables, a verdict per figure, the sanity row and the recommendation."""
    from fusion.text import literal
    from fusion.words import plural

    title = f"{literal(found.case_name)}, {plural(len(found.records), 'run')}"
    out = tables(found.summary, found.settings, found.rank_by, title, width)
    out += [f"• {literal(v.sentence)}" for v in found.verdicts]
    out.append(f"Sanity row (Shafer 1976: Dempster's rule on Bayesian masses is Bayes' rule): {found.identity.words()}")
    out.append(f"[bold]{literal(found.recommendation.text)}[/]")
    return out
