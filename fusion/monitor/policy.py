"""The conflict policy: turns each tick's conflict figures into an action, without crying wolf.

A tick is *conflicting* when its readings disagree with the belief:
- its conflict figure K (as the back end scores it) is above ``conflict_k``, and the back end's
  second opinion (``fusion.backends.base.SecondOpinion``) does not veto it: a disagreement
  figure, when the back end gives one, must also be above ``disagreement`` (two-dimensional
  conflict, Liu 2006: a large K alone can come from sources that agree but are each
  uncertain); or, for a reading whose K is between the clear level and ``conflict_k``, its
  conflict with the belief's core is above ``conflict_k``; each back end documents its figures;
- or the slow/fast evidence ratio is above ``lost_ratio`` (back ends that report log evidence).
It is *clear* when both figures are below ``clear_fraction`` of their thresholds, and
neutral in between (hysteresis: a neutral tick neither starts nor ends an episode).

Actions: ``carry on``; ``alert operator`` after ``alert_after`` conflicting ticks in a row
(once per episode, naming the sensors most to blame), once some sensor's readings of the episode
disagree with where the robot was by twice the weight of conflict of ``conflict_k`` (see
``fusion.monitor.recovery.Recovery.dissenters``: two lone odd readings of two sensors are no alert); ``re-localize`` after
``relocalize_after`` conflicting ticks in a row, then not again for ``cooldown_ticks``;
``re-localize`` at once, on a conflicting tick from the alert count to the re-localization count,
when two sensors disagree with where the robot was and the episode's readings agree with one
another at another place (the robot was moved; see ``Recovery.moved_elsewhere``);
``quarantine sensor`` when one sensor keeps disagreeing while the others agree: it is
then discounted (its reliability multiplied by ``quarantine_reliability``) until it has
agreed ``release_after`` times in a row.  "Keeps disagreeing" is measured against the sensor's
own error model: a camera whose model allows 2% false sightings and 2% misread identities is
odd in 4% of its readings when it works, so 3 odd readings in its last 6 (a chance of 1.2e-3)
happen by luck every few hundred readings, a few times per hour at 2 Hz.  A sensor is
quarantined once k of its last ``quarantine_window`` readings disagree, k the smallest count,
at least ``quarantine_after``, whose binomial tail P(X ≥ k) under its declared odd rate is at
most ``quarantine_alpha`` (all of the window when none is); a sensor that declares no odd
readings needs ``quarantine_after``.  Thresholds are set per case (``[run.policy]``).
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

__all__ = [
    "Policy",
    "Monitor",
    "binomial_tail",
    "TickVerdict",
    "CARRY_ON",
    "ALERT",
    "RELOCALIZE",
    "QUARANTINE",
    "INFORMATIVE",
]

CARRY_ON = "carry on"
ALERT = "alert operator"
RELOCALIZE = "re-localize"
QUARANTINE = "quarantine sensor"

INFORMATIVE = 0.5
"""A reading is informative when it rules out at least this share of the site (our choice)."""


@dataclass(frozen=True)
class Policy:
    conflict_k: float = 0.8
    disagreement: float = 0.3
    lost_ratio: float = 4.0
    clear_fraction: float = 0.5
    alert_after: int = 2
    relocalize_after: int = 4
    cooldown_ticks: int = 8
    quarantine_after: int = 3
    quarantine_window: int = 6
    quarantine_reliability: float = 0.2
    release_after: int = 4
    quarantine_alpha: float = 1e-4  # chance that a working sensor, by its own error rates, reaches the count
    others_agree: float = 0.25  # others disagree in at most this share of their recent readings


@dataclass
class TickVerdict:
    action: str
    reasons: list[str] = field(default_factory=list)
    conflicting: bool = False
    quarantined: tuple[str, ...] = ()
    released: tuple[str, ...] = ()
    newly: tuple[str, ...] = ()  # sensors quarantined on this tick


class Monitor:
    """State of the policy for one back end.  Feed it one tick at a time with ``judge``."""

    def __init__(self, policy: Policy = Policy(), odd_rates: dict[str, float] | None = None):
        """``odd_rates``: per sensor, the share of a working one's readings its own error model says
        contradict the true pose (``SensorModel.odd_rate``); a sensor not named declares none."""
        self.policy = policy
        self.odd_rates = dict(odd_rates or {})
        self._counts: dict[str, tuple[int, float]] = {}
        self.run = 0  # consecutive conflicting ticks
        self.cooldown = 0
        self.alerted = False
        self.quarantined: set[str] = set()
        self._history: dict[str, deque] = {}  # sensor -> recent disagree flags
        self._informed: dict[str, deque] = {}  # sensor -> were those readings informative?
        self._agree_run: dict[str, int] = {}

    # ----------------------------------------------------------------- per reading
    def disagrees(self, figure: float, opinion=None) -> bool:
        """Does one reading's conflict figure count as disagreeing with the belief?  ``opinion``: the back
        end's further figures (``fusion.backends.base.SecondOpinion``): a disagreement that must also
        exceed its threshold, and a core conflict that counts when the figure is short of the threshold
        yet not clear; a figure None is not weighed."""
        p = self.policy
        extra = getattr(opinion, "disagreement", None)
        core = getattr(opinion, "core", None)
        two_dimensional = figure > p.conflict_k and (extra is None or extra > p.disagreement)
        return two_dimensional or (core is not None and core > p.conflict_k)

    def record_reading(self, sensor: str, disagree: bool, informative: float = 1.0) -> None:
        """``informative``: the share of the site the reading rules out (a door contact that is quiet far
        from any door rules out almost nothing, so it agrees with almost every belief and cannot vouch
        for one); readings ruling out at least half the site (``INFORMATIVE``) count as informative."""
        window = self._history.setdefault(sensor, deque(maxlen=self.policy.quarantine_window))
        window.append(disagree)
        informed = self._informed.setdefault(sensor, deque(maxlen=self.policy.quarantine_window))
        informed.append(float(informative) if not disagree else max(float(informative), INFORMATIVE))
        self._agree_run[sensor] = 0 if disagree else self._agree_run.get(sensor, 0) + 1

    # ----------------------------------------------------------------- per tick
    def judge(
        self,
        conflicting: bool,
        clear: bool,
        blame: list[tuple[str, float]],
        moved: str | None = None,
        persistent: bool = True,
    ) -> TickVerdict:
        """``moved``: the localizer found that this episode's readings agree with one another elsewhere
        (the reason, in words); the tick then re-localizes at once.  ``persistent``: some sensor's readings
        of the episode disagree with where the robot was by twice the weight of conflict of
        ``conflict_k``; without it no alert is raised (two lone odd readings of two sensors on two ticks are not a fault)."""
        p = self.policy
        if moved:
            self.run, self.cooldown, self.alerted = 0, p.cooldown_ticks, False
            return TickVerdict(RELOCALIZE, [moved], conflicting, tuple(sorted(self.quarantined)))
        verdict = TickVerdict(CARRY_ON, conflicting=conflicting)
        newly, released = self._quarantine_changes()
        if newly:
            self._quarantine(verdict, newly)
            newly = list(verdict.newly)
        if released:
            verdict.reasons.append(f"{', '.join(released)} agrees again; its quarantine is lifted")
        verdict.quarantined, verdict.released = tuple(sorted(self.quarantined)), tuple(released)
        if self.cooldown:
            self.cooldown -= 1
        if conflicting:
            self.run += 1
        elif clear:
            if self.alerted and self.run == 0:
                verdict.reasons.append("readings agree with the belief again")
            self.run, self.alerted = 0, False
        top = ", ".join(f"{s} ({v:.2f})" for s, v in blame[:2] if v > 0) or "no single sensor"
        if self.run >= p.relocalize_after and not self.cooldown and not newly:
            verdict.action = RELOCALIZE
            verdict.reasons.append(
                f"{self.run} conflicting ticks in a row (limit {p.relocalize_after}); most to blame: {top}; "
                "the belief is reset and re-seeded from the readings of this episode"
            )
            self.run, self.cooldown, self.alerted = 0, p.cooldown_ticks, False
        elif (
            self.run >= p.alert_after and not self.alerted and verdict.action == CARRY_ON and conflicting and persistent
        ):
            # Only on a conflicting tick: persistence is judged there; a neutral tick after a run that the
            # persistence test vetoed (two lone odd readings) is no new evidence of a fault.
            verdict.action = ALERT
            verdict.reasons.append(f"{self.run} conflicting ticks in a row; most to blame: {top}")
            self.alerted = True
        return verdict

    def _quarantine(self, verdict: TickVerdict, newly: list[tuple[str, int, int]]) -> None:
        """Quarantine the sensors that keep disagreeing, each with its count against its limit, in words."""
        verdict.action = QUARANTINE
        for sensor, odd, seen in newly:
            k, chance = self.quarantine_count(sensor)
            by_luck = (
                f"; a working one, by its own error rates, does so with chance {chance:.1g}"
                if self.odd_rates.get(sensor, 0.0) > 0
                else ""
            )
            verdict.reasons.append(
                f"{sensor} disagreed with the belief in {odd} of its last {seen} readings (limit {k}{by_luck}) "
                f"while the other sensors agreed; it is discounted until it agrees again"
            )
        verdict.newly = tuple(sensor for sensor, _, _ in newly)

    def is_quarantined(self, sensor: str) -> bool:
        return sensor in self.quarantined

    def quarantined_sensors(self) -> tuple[str, ...]:
        return tuple(sorted(self.quarantined))

    def would_act(self) -> bool:
        """Would one more conflicting tick reach the alert, or the window for a trial re-seed?"""
        p = self.policy
        due = self.run + 1 >= p.alert_after
        return due and (not self.alerted or (not self.cooldown and self.run + 1 <= p.relocalize_after))

    def may_test_a_move(self) -> bool:
        """Is one more conflicting tick inside the window, from the alert count to the re-localization
        count and out of the cool-down, in which the "was the robot moved?" test may run?"""
        p = self.policy
        return not self.cooldown and p.alert_after <= self.run + 1 <= p.relocalize_after

    def quarantine_count(self, sensor: str) -> tuple[int, float]:
        """How many of its last ``quarantine_window`` readings must disagree before ``sensor`` is
        quarantined, and the chance a working one gets there: the binomial tail P(X ≥ k) under its
        declared odd rate (``binomial_tail``; 0 when it declares none)."""
        if sensor not in self._counts:
            p = self.policy
            n, rate = p.quarantine_window, self.odd_rates.get(sensor, 0.0)
            k, chance = min(max(p.quarantine_after, 1), n), 0.0
            if rate > 0:
                while k < n and binomial_tail(k, n, rate) > p.quarantine_alpha:
                    k += 1
                chance = binomial_tail(k, n, rate)
            self._counts[sensor] = (k, chance)
        return self._counts[sensor]

    def _quarantine_changes(self) -> tuple[list[tuple[str, int, int]], list[str]]:
        """Sensors newly quarantined, each with its count of disagreeing readings and the readings
        counted; sensors released."""
        p = self.policy
        newly, released = [], []
        for sensor, window in self._history.items():
            if sensor in self.quarantined:
                if self._agree_run.get(sensor, 0) >= p.release_after:
                    self.quarantined.discard(sensor)
                    released.append(sensor)
                continue
            if sum(window) < self.quarantine_count(sensor)[0]:
                continue
            # The others must vouch for the belief with informative readings, and mostly agree; and
            # at least one of them must be as informative as the suspect: when the richest sensor is
            # the one that disagrees, the belief is more likely wrong than the sensor (the robot was
            # moved), and the conflict is left to run on to a re-localization.
            own_share = _share(self._informed.get(sensor, ()))
            others, strongest = [], 0.0
            for s, w in self._history.items():
                if s == sensor or s in self.quarantined:
                    continue
                flags = [d for d, i in zip(w, self._informed.get(s, ())) if i >= INFORMATIVE]
                if len(flags) >= 2:
                    others.append(flags)
                    strongest = max(strongest, _share(self._informed.get(s, ())))
            if others and strongest >= 0.9 * own_share and all(sum(f) / len(f) <= p.others_agree for f in others):
                self.quarantined.add(sensor)
                newly.append((sensor, sum(window), len(window)))
                window.clear()
                self._agree_run[sensor] = 0
        return newly, released

    def forget_history(self) -> None:
        """After a re-localization the old readings no longer describe the new belief."""
        for window in (*self._history.values(), *self._informed.values()):
            window.clear()


def binomial_tail(k: int, n: int, rate: float) -> float:
    """P(X ≥ k) for X binomial(n, rate): the sum of the terms from k to n, each formed in logarithms (lgamma), so
    a window of thousands of readings neither overflows nor loses the small terms.  Written out rather than taken
    from scipy.stats, whose import costs a second or more of CPU at the first tick of a stream (measured)."""
    if k <= 0:
        return 1.0
    if k > n:
        return 0.0
    if rate >= 1.0:
        return 1.0
    log_r, log_q = math.log(rate), math.log1p(-rate)
    head = math.lgamma(n + 1)
    return min(
        1.0,
        math.fsum(
            math.exp(head - math.lgamma(i + 1) - math.lgamma(n - i + 1) + i * log_r + (n - i) * log_q)
            for i in range(k, n + 1)
        ),
    )


def _share(values) -> float:
    """Mean informativeness of a sensor's recent readings."""
    values = list(values)
    return sum(values) / len(values) if values else 0.0
