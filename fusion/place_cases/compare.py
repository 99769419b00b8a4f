"""``fusion compare`` on a place graph: each setting (a back end, and for the evidential one a rule) on the same
seeds, identical readings per seed, the figures of a graph run, intervals over seeds and paired verdicts.

Each seed drives the route from another of its places, as ``fusion targets`` does (``fusion.place_cases.targets``);
the statistics are the metric comparison's own (``fusion.compare.verdicts``: bias-corrected bootstrap intervals
of the mean, Wilcoxon signed-rank tests over paired seeds) on the figures of ``GRAPH_FIGURES``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from fusion.compare.settings import Figure, Setting
from fusion.monitor.policy import ALERT, RELOCALIZE
from fusion.place_cases.case import PlaceCase
from fusion.place_cases.run import run_places
from fusion.place_cases.targets import CARRY_PLACES, rotated

__all__ = ["GRAPH_FIGURES", "GraphRecord", "GraphComparison", "compare_graph", "graph_settings"]

GRAPH_FIGURES: dict[str, Figure] = {
    "right_share": Figure(
        "at the right place", "high", "", "share of ticks whose most probable cell is within 2 steps of the truth", 0, 1
    ),
    "median_error_m": Figure("median error", "low", "m", "median distance along the graph from the truth"),
    "found": Figure(
        "found from the start", "high", "", "share of runs that found themselves from an unknown start", 0, 1
    ),
    "start_places": Figure(
        "places to find itself", "low", "", "distinctive places reached before found from the start"
    ),
    "carry_found": Figure(
        "carry found again", "high", "", f"share of carries found again within {CARRY_PLACES} distinctive places", 0, 1
    ),
    "alerts": Figure("alerts", "low", "", "alert actions in the run"),
    "relocalizations": Figure("re-localizations", "low", "", "re-localizations in the run"),
    "ms_per_step": Figure("cost", "low", "ms/step", "mean wall time of one localizer step"),
}


@dataclass(frozen=True)
class GraphRecord:
    key: str
    seed: int
    setting: dict
    figures: dict

    def value(self, name: str) -> float:
        return float(self.figures[name])


@dataclass(frozen=True)
class GraphComparison:
    case: str
    seeds: tuple[int, ...]
    settings: tuple[Setting, ...]
    records: tuple[GraphRecord, ...]
    summary: object  # pandas DataFrame: setting, key, figure, runs, mean, low, high
    verdicts: tuple


def graph_settings(case: PlaceCase, backends=None, rules=None) -> list[Setting]:
    from fusion.backends import backend_kind

    out = []
    for b in backends or case.run.backends:
        if backend_kind(b).takes_rule:
            out += [Setting(b, r) for r in (rules or (case.run.rule,))]
        else:
            out.append(Setting(b))
    return out


def _figures(result, backend: str) -> dict:
    rows = result.rows_of(backend)
    episodes = result.episodes(backend)
    carries = [e.places_needed for e in episodes[1:]]
    actions = [r.action for r in rows]
    start = episodes[0].places_needed
    return {
        "right_share": float(np.mean([r.right for r in rows])),
        "median_error_m": float(np.median([r.error_m for r in rows])),
        "found": float(start is not None),
        "start_places": math.nan if start is None else float(start),
        "carry_found": float(np.mean([n is not None and n <= CARRY_PLACES for n in carries])) if carries else math.nan,
        "alerts": float(actions.count(ALERT)),
        "relocalizations": float(actions.count(RELOCALIZE)),
        "ms_per_step": float(np.mean([r.seconds for r in rows]) * 1e3),
    }


def _shared_runs(settings: list[Setting]) -> list[tuple[str | None, list[Setting]]]:
    """The settings grouped into runs: one run holds each back end once and one rule, so the settings it holds see
    the same simulated drive and share its sensors' encoding (a back end without a rule joins any run)."""
    runs: list[list] = []
    for s in settings:
        for run in runs:
            backends = {m.backend for m in run[1]}
            if s.backend not in backends and (s.rule is None or run[0] is None or s.rule == run[0]):
                run[0] = run[0] or s.rule
                run[1].append(s)
                break
        else:
            runs.append([s.rule, [s]])
    return [(rule, members) for rule, members in runs]


def compare_graph(case: PlaceCase, seeds, settings: list[Setting], landed=None) -> GraphComparison:
    """Every setting on every seed; ``landed(record)`` after each run."""
    from fusion.compare.verdicts import summarise, verdicts

    records = []
    for seed in seeds:
        base = rotated(case, seed)
        made = {}
        for rule, members in _shared_runs(settings):
            run = dataclasses.replace(base.run, rule=rule or base.run.rule)
            result = run_places(dataclasses.replace(base, run=run), backends=[s.backend for s in members])
            made.update({s.key: GraphRecord(s.key, seed, s.as_dict(), _figures(result, s.backend)) for s in members})
        for s in settings:  # in the settings' order, whatever run each came from
            records.append(made[s.key])
            if landed is not None:
                landed(made[s.key])
    table = summarise(records, settings, table=GRAPH_FIGURES)
    found = verdicts(records, settings, GRAPH_FIGURES, table=GRAPH_FIGURES)
    return GraphComparison(case.name, tuple(seeds), tuple(settings), tuple(records), table, tuple(found))
