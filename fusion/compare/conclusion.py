"""What a finished sweep concludes: the summary over seeds, the verdict per figure, the sanity row and the
recommendation, as one typed result the views draw (terminal tables, the HTML report)."""

from __future__ import annotations

from dataclasses import dataclass

from fusion.compare.recommend import Recommendation, recommend
from fusion.compare.records import IdentityCheck, RunRecord, Verdict
from fusion.compare.runs import fault_spans
from fusion.compare.settings import Setting
from fusion.compare.verdicts import bayes_dempster_identity, summarise, verdicts

__all__ = ["Comparison", "conclude"]


@dataclass
class Comparison:
    case_name: str
    rank_by: str
    settings: list[Setting]
    records: list[RunRecord]
    summary: object  # pandas DataFrame: setting, key, figure, runs, mean, low, high
    verdicts: list[Verdict]
    identity: IdentityCheck
    recommendation: Recommendation
    fault_spans: list[tuple[float, float, str]]  # (start s, end s, what): faults and carries, for the plots

    @property
    def seeds(self) -> int:
        return len({r.seed for r in self.records})


def conclude(case, records: list[RunRecord], settings: list[Setting], rank_by: str) -> Comparison:
    summary = summarise(records, settings)
    verdict_list = verdicts(records, settings)
    seeds = len({r.seed for r in records})
    advice = recommend(verdict_list, rank_by, len(settings), seeds, case.name)
    identity = bayes_dempster_identity(case)
    spans = fault_spans(case)
    return Comparison(case.name, rank_by, settings, records, summary, verdict_list, identity, advice, spans)
