"""Conflict episodes of a replay: when the evidence disagreed with the belief, how badly, and whose fault.

An episode opens on a tick where any back end's conflict reaches ``open_k`` (the policy's
conflict threshold), stays open while the conflict stays at or above ``keep_k`` (the policy's
clear level) and closes after ``quiet_ticks`` ticks in a row below it (hysteresis, so one calm
tick inside a long disagreement does not split it in two).  For each episode it keeps the start,
peak and end, each back end's peak conflict, the sum of each sensor's leave-one-out blame, the
pairwise conflict between the sensors' readings, and every monitor action taken while it was open.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field

__all__ = ["Episode", "EpisodeFinder", "blame_shares", "QUIET_TICKS"]

QUIET_TICKS = 4
"""Calm ticks in a row that close an episode (our choice: one second at the demo's 4 ticks a second)."""


@dataclass
class Episode:
    number: int
    start_tick: int
    start_t: float
    start_line: int
    peak_tick: int = 0
    peak_t: float = 0.0
    end_tick: int = 0
    end_t: float = 0.0
    ticks: int = 0
    severity: float = 0.0  # Σ over its ticks of the largest conflict of any back end
    peak: dict = field(default_factory=dict)  # back end -> largest conflict
    blame: dict = field(default_factory=lambda: defaultdict(lambda: defaultdict(float)))  # back end -> sensor -> Σ
    pairs: dict = field(default_factory=lambda: defaultdict(list))  # (sensor a, sensor b) -> K of each tick
    actions: list = field(default_factory=list)  # (t, back end, action, first reason)
    errors: dict = field(default_factory=lambda: defaultdict(float))  # back end -> largest true error, if known

    @property
    def top_conflict(self) -> float:
        return max(self.peak.values(), default=0.0)

    def shares(self) -> list[tuple[str, float]]:
        """Sensors ranked by their share of the blame, averaged over the back ends."""
        return blame_shares(self.blame)

    def pairwise(self) -> list[tuple[str, str, float]]:
        """Mean conflict K between two sensors' readings over the ticks both read, largest first."""
        rows = [(a, b, sum(ks) / len(ks)) for (a, b), ks in self.pairs.items() if ks]
        return sorted(rows, key=lambda r: -r[2])

    def acted(self, backend: str, action: str) -> float | None:
        """Time of the first ``action`` the back end took during the episode, or None."""
        return next((t for t, b, a, _ in self.actions if b == backend and a == action), None)

    def to_record(self) -> dict:
        return {
            "episode": self.number,
            "start_t": self.start_t,
            "peak_t": self.peak_t,
            "end_t": self.end_t,
            "start_line": self.start_line,
            "ticks": self.ticks,
            "severity": round(self.severity, 6),
            "peak_conflict": {b: round(v, 6) for b, v in self.peak.items()},
            "blame_share": [[s, round(v, 4)] for s, v in self.shares()],
            "blame": {b: {s: round(v, 6) for s, v in per.items()} for b, per in self.blame.items()},
            "pairwise_conflict": [[a, b, round(k, 6)] for a, b, k in self.pairwise()],
            "actions": [{"t": t, "backend": b, "action": a, "reason": r} for t, b, a, r in self.actions],
            "max_true_error_m": {b: round(v, 4) for b, v in self.errors.items()} or None,
        }


def blame_shares(blame: dict) -> list[tuple[str, float]]:
    """{back end: {sensor: Σ blame}} → sensors by mean share over the back ends (each back end's
    positive blame normalised to 1, so a back end with larger conflict figures does not dominate)."""
    total: dict[str, float] = defaultdict(float)
    backends = [per for per in blame.values() if sum(max(v, 0.0) for v in per.values()) > 0]
    for per in backends:
        s = sum(max(v, 0.0) for v in per.values())
        for sensor, v in per.items():
            total[sensor] += max(v, 0.0) / s / len(backends)
    return sorted(total.items(), key=lambda sv: (-sv[1], sv[0]))


class EpisodeFinder:
    """Feed it one tick at a time (``add``); closed episodes come back from ``add`` and ``finish``."""

    def __init__(self, open_k: float, keep_k: float, quiet_ticks: int = QUIET_TICKS):
        if not 0 <= keep_k <= open_k:
            raise ValueError(f"the clear level {keep_k} must lie between 0 and the conflict threshold {open_k}")
        self.open_k, self.keep_k, self.quiet_ticks = open_k, keep_k, quiet_ticks
        self.current: Episode | None = None
        self._quiet = 0
        self._count = 0

    def add(self, tick: int, t: float, line: int, conflict: dict[str, float]) -> tuple[Episode | None, Episode | None]:
        """Record one tick's conflict per back end; returns (the episode this tick belongs to, a closed episode)."""
        top = max(conflict.values(), default=0.0)
        ep = self.current
        if ep is None:
            if top < self.open_k:
                return None, None
            self._count += 1
            ep = self.current = Episode(self._count, tick, t, line, peak_tick=tick, peak_t=t)
        if top >= self.keep_k:
            self._quiet = 0
        else:
            self._quiet += 1
            if self._quiet >= self.quiet_ticks:
                return None, self._close()
            return ep, None  # a calm tick inside the episode: counted, but adds no severity
        ep.ticks += 1
        ep.severity += top
        ep.end_tick, ep.end_t = tick, t
        if top > ep.top_conflict:
            ep.peak_tick, ep.peak_t = tick, t
        for b, k in conflict.items():
            ep.peak[b] = max(ep.peak.get(b, 0.0), k)
        return ep, None

    def finish(self) -> Episode | None:
        """Close the episode still open at the end of the log (if any)."""
        return self._close() if self.current is not None else None

    def _close(self) -> Episode:
        ep, self.current, self._quiet = self.current, None, 0
        return ep
