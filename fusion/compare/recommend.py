"""The comparison's bottom line in words: which setting, for which figure, how sure, and on what evidence.

It is read off the verdicts (``verdicts.verdicts``): the setting best on the figure the user ranks by is
recommended when the paired test calls the order "clear" or "likely"; otherwise the text says that the
seeds do not tell the two best apart and how to get more evidence.  Figures where another setting is
clearly or likely better are named as trade-offs, so one figure never hides another."""

from __future__ import annotations

from dataclasses import dataclass

from fusion.compare.records import Verdict
from fusion.compare.settings import FIGURES
from fusion.words import plural

__all__ = ["Recommendation", "recommend", "CONVINCING"]

CONVINCING = ("clear", "likely")
"""Verdicts strong enough to recommend on (Wilcoxon p < 0.01 and < 0.05: ``verdicts._paired``)."""


@dataclass(frozen=True)
class Recommendation:
    setting: str | None  # the recommended setting's label; None when the evidence names none
    figure: str  # the figure it is chosen on
    sureness: str  # the verdict's word on that figure
    also_best: tuple[str, ...]  # other figures where it is convincingly best
    trade_offs: tuple[tuple[str, str, str], ...]  # (figure, better setting, sureness) where another one wins
    text: str


def recommend(verdict_list: list[Verdict], rank_by: str, settings: int, seeds: int, case_name: str) -> Recommendation:
    evidence = (
        f"Evidence: {plural(settings, 'setting')} × {plural(seeds, 'seed')} of {case_name}, every setting seeing "
        "the same readings on a seed; simulated runs, which support a choice but certify nothing."
    )
    label = FIGURES[rank_by].label
    main = next((v for v in verdict_list if v.figure == rank_by), None)
    if main is None or main.best is None:
        said = main.sentence if main else f"no setting has a value of {label} in these runs."
        return Recommendation(None, rank_by, main.sureness if main else "no data", (), (), f"{said} {evidence}")
    if main.sureness not in CONVINCING:
        why = {
            "too few paired seeds to tell": f"there are too few paired seeds to tell it from {main.runner_up}",
            "a tie on every seed (to rounding)": f"it ties with {main.runner_up} on every seed (to rounding)",
        }.get(main.sureness, f"the seeds cannot tell it from {main.runner_up}")
        more = (
            "" if main.sureness.startswith("a tie") else " More seeds (--seeds) would tell them apart if they differ."
        )
        text = f"No recommendation on {label}: {main.best} measured best, but {why} ({_paired(main)}).{more} {evidence}"
        return Recommendation(None, rank_by, main.sureness, (), (), text)
    also = tuple(
        v.figure for v in verdict_list if v.figure != rank_by and v.best == main.best and v.sureness in CONVINCING
    )
    trade = tuple(
        (v.figure, v.best, v.sureness)
        for v in verdict_list
        if v.best is not None and v.best != main.best and v.sureness in CONVINCING
    )
    text = f"Recommendation: {main.best} for {label}, {main.sureness} ({_paired(main)})."
    if also:
        text += f" It is also best on {_names(also)}."
    if trade:
        text += " Trade-offs: " + "; ".join(f"{b} is better on {FIGURES[f].label} ({s})" for f, b, s in trade) + "."
    return Recommendation(main.best, rank_by, main.sureness, also, trade, f"{text} {evidence}")


def _paired(v: Verdict) -> str:
    unit = FIGURES[v.figure].unit
    u = f" {unit}" if unit else ""
    p = f", Wilcoxon p = {v.p_value:.2g}" if v.p_value == v.p_value else ""
    return (
        f"mean {v.best_mean:.3g}{u} against {v.runner_up} {v.runner_up_mean:.3g}{u}; better on {v.wins} of "
        f"{plural(v.paired_seeds, 'paired seed')}, worse on {v.losses}{p}"
    )


def _names(figures) -> str:
    labels = [FIGURES[f].label for f in figures]
    return labels[0] if len(labels) == 1 else ", ".join(labels[:-1]) + " and " + labels[-1]
