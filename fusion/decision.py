"""What one step of the localizer decides (``fusion.localizer.Localizer.step``): the pose estimate and its
uncertainty, the tick's conflict figures, the action and its reasons, the readings rejected, and at an action the
sensors to blame and the reading at fault.  ``to_record`` is the decision as one JSON line of a stream.

Decision support and monitoring only: not a certified safety function.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from fusion.figures import TickFigures
from fusion.monitor.at_fault import ReadingAtFault
from fusion.places.frame import PlaceFix

__all__ = ["Decision"]


@dataclass
class Decision:
    t: float
    backend: str
    x_m: float
    y_m: float
    heading_deg: float
    spread_m: float  # RMS distance of the distribution from the estimate
    region_cells: int
    action: str
    reasons: list[str]
    figures: TickFigures  # conflict figures of this tick (fusion.figures)
    blame: list[tuple[str, float]]  # leave-one-out: how much removing each sensor lowers this tick's conflict
    quarantined: tuple[str, ...]
    rejected: list[tuple[str, str]] = field(default_factory=list)  # (sensor, reason)
    seconds: float = 0.0
    # At an alert or a quarantine: Dempster's K between each two sensors' readings of the tick.
    pairs: list[tuple[str, str, float]] = field(default_factory=list)
    # At an action: the blamed sensor's reading that conflicted most, against the estimate before the tick.
    at_fault: ReadingAtFault | None = None
    # On a place graph: the most probable place, its probability and the most probable cell in words.
    place: PlaceFix | None = None

    def to_record(self) -> dict:
        return {
            "t": round(self.t, 6),
            "backend": self.backend,
            "x_m": round(self.x_m, 4),
            "y_m": round(self.y_m, 4),
            "heading_deg": round(self.heading_deg, 3),
            "spread_m": round(self.spread_m, 4),
            "region_cells": self.region_cells,
            "action": self.action,
            "reasons": self.reasons,
            "figures": self.figures.to_record(),
            "blame": [[s, round(v, 6)] for s, v in self.blame],
            "quarantined": list(self.quarantined),
            "rejected": [{"sensor": s, "reason": r} for s, r in self.rejected],
            "seconds": round(self.seconds, 6),
            "pairwise_conflict": [[a, b, round(k, 6)] for a, b, k in self.pairs],
            "reading_at_fault": None
            if self.at_fault is None
            else {
                "sensor": self.at_fault.sensor,
                "conflict": round(self.at_fault.conflict, 6),
                "said": self.at_fault.said,
            },
            **({} if self.place is None else {"place": self.place.to_record()}),
        }
