"""How long the rest of a sweep will take, from what its runs have measured.

Before any run of a setting has finished, its cost is the case's own estimate (``fusion.budget``, per back end
and rule); once runs land, their mean wall time replaces it.  The time left is the sum over the runs still to do
of their setting's cost, divided by the workers (runs of one worker follow each other; the workers run side by
side).  This ignores the idle tail at the end, so near the end it may be a little short; it is never the
rate-of-finished-runs guess that reads "3 minutes" while hours of slow settings remain."""

from __future__ import annotations

import math
from collections import Counter, defaultdict

__all__ = ["SweepEta", "LONG_SWEEP_S", "duration_words"]

LONG_SWEEP_S = 600.0
"""A sweep expected to take longer than this says so before it starts, with how to shrink it (our choice)."""


class SweepEta:
    def __init__(self, prior_s: dict[str, float], todo: Counter, workers: int):
        self.prior_s = dict(prior_s)  # setting key -> estimated seconds of one run
        self.todo = Counter(todo)  # setting key -> runs still to do
        self.workers = max(1, workers)
        self.measured: dict[str, list[float]] = defaultdict(list)

    def landed(self, key: str, wall_s: float) -> None:
        """A run of setting ``key`` finished after ``wall_s`` seconds."""
        if self.todo[key] > 0:
            self.todo[key] -= 1
        if math.isfinite(wall_s) and wall_s > 0:
            self.measured[key].append(wall_s)

    def cost_s(self, key: str) -> float:
        seen = self.measured.get(key)
        return sum(seen) / len(seen) if seen else self.prior_s.get(key, 0.0)

    def remaining_s(self) -> float:
        return sum(n * self.cost_s(k) for k, n in self.todo.items()) / self.workers

    def measured_share(self) -> float:
        """Share of the remaining time that comes from measured runs (the rest is the case's estimate)."""
        total = sum(n * self.cost_s(k) for k, n in self.todo.items())
        known = sum(n * self.cost_s(k) for k, n in self.todo.items() if self.measured.get(k))
        return known / total if total else 1.0

    def words(self) -> str:
        left = self.remaining_s()
        basis = "measured" if self.measured_share() > 0.5 else "estimated"
        return f"about {duration_words(left)} left ({basis})" if left > 0 else "finishing"


def duration_words(seconds: float) -> str:
    """A duration as a person reads it: "40 s", "12 min", "3 h 20 min"."""
    if seconds < 90:
        return f"{seconds:.0f} s"
    minutes = seconds / 60
    if minutes < 90:
        return f"{minutes:.0f} min"
    hours, rest = divmod(round(minutes), 60)
    return f"{hours} h {rest} min" if rest else f"{hours} h"
