"""Recovery: what the monitor needs to know about a conflict episode, and what it does about it.

``Recovery`` keeps the ticks of the current episode (the motion, the readings as applied and as the
sensors gave them) and the belief the episode started from, and answers, on a back end it is given:

- **blame**: how much the tick's conflict falls when one sensor's readings are left out;
- **dissenters**: who disagrees with where the robot was (persistently, or as a witness of a move);
- **was the robot moved?**: a trial belief built from the episode's readings alone, from ignorance
  over free space, in which no replayed reading conflicts: the trial becomes the belief;
- **re-seeding**: reset to ignorance over free space and replay the episode's readings.

The back end is used only through the ``Backend`` protocol (fork, snapshot, restore, reset, predict,
update, reading_conflict, joint_conflict); the monitor is asked through its methods.
"""

from __future__ import annotations

from collections import deque

import numpy as np

from fusion.conflict import weight_of_conflict
from fusion.monitor.policy import INFORMATIVE, Monitor, Policy

__all__ = ["Recovery", "informative"]


def informative(evidence) -> float:
    """How much a reading says about where the robot is: the share of cells it rules out (contour < ½).
    A quiet door contact rules out almost nothing and so cannot vouch for a belief against a sensor
    that disagrees with it."""
    return float(evidence.ruled_out)


class Recovery:
    def __init__(self, policy: Policy, monitor: Monitor, free_prior: np.ndarray):
        self.policy, self.monitor, self.free_prior = policy, monitor, free_prior
        self.episode: deque = deque(maxlen=policy.relocalize_after + 4)
        self.anchor = None  # the belief before the oldest kept tick's readings (see ``remember``)

    # ------------------------------------------------------------------ memory
    def remember(self, f, before, motion, applied, undiscounted) -> None:
        """Keep this tick for a re-seed or a trial, and the belief the episode started from, carried
        along by the odometry alone."""
        episode = self.episode
        if not episode:
            self.anchor = before
        elif len(episode) == episode.maxlen:  # the oldest tick leaves; the anchor moves on by the next one's motion
            self.anchor = self._dead_reckoned(f, self.anchor, [episode[1][0]])
        episode.append((motion, applied, undiscounted))

    def clear(self) -> None:
        self.episode.clear()

    # ------------------------------------------------------------------ blame
    def blame(self, f, before, applied) -> list[tuple[str, float]]:
        """For each sensor of this tick: how much the tick's conflict falls when its readings are left out.

        One entry per sensor, however many readings it gave this tick, so the work grows with
        sensors × readings, never with the square of the readings (a log with hundreds of readings
        at one time stamp stays linear)."""
        sensors = list(dict.fromkeys(s for s, _ in applied))
        if len(sensors) < 2:
            return [(s, _tick_conflict(f, before, applied)) for s in sensors]
        whole = _tick_conflict(f, before, applied)
        out = []
        for sensor in sensors:
            rest = [r for r in applied if r[0] != sensor]
            out.append((sensor, whole - _tick_conflict(f, before, rest)))
        return sorted(out, key=lambda sv: -sv[1])

    def dissenters(self, f) -> tuple[set[str], set[str]]:
        """Who disagrees with where the robot was: this episode's readings, as given, against the belief the
        episode started from, carried along by the odometry alone (``anchor``).  Against the belief of the
        moment, one faulty reading absorbed would make the next good reading disagree with it.  Two sets:

        - persistent: sensors whose weights of conflict −log(1 − K) with it, added up (weights of
          independent conflicts add, Shafer 1976), reach twice the weight of the conflict threshold, from two
          readings at least that each conflict beyond it; one odd reading of a good sensor, at the time of
          another's fault, is not yet a second voice, however sure it is;
        - against: the sensors that testify to a move (``moved_elsewhere`` wants two).  The persistent
          ones, and, when exactly one is persistent and no sensor's informative reading (ruling out at
          least half the site, see ``informative``) still fits the old place, also the sensors each of
          whose informative readings disagrees with it.  A camera that sees a marker once in two ticks
          cannot reach twice the weight with one sighting (its reliability caps K), yet that sighting
          rules the old place out; while a ranger that still fits the old place says a stuck contact
          and a lone odd sighting are faults, not a move.
        """
        weights: dict[str, float] = {}
        voices: dict[str, int] = {}
        odd: dict[str, list[bool]] = {}
        single = weight_of_conflict(self.policy.conflict_k)
        reference = self.anchor
        for i, (motion, _, given) in enumerate(self.episode):
            if i:
                reference = self._dead_reckoned(f, reference, [motion])
            for sensor, evidence in given:
                weight = weight_of_conflict(f.reading_conflict(reference, evidence))
                weights[sensor] = weights.get(sensor, 0.0) + weight
                voices[sensor] = voices.get(sensor, 0) + (weight > single)
                if informative(evidence) >= INFORMATIVE:
                    odd.setdefault(sensor, []).append(weight > single)
        # Two conflicting readings at least: one confident reading of a good sensor (a door detector's false alarm,
        # a misread tag) reaches twice the weight alone, and is what its own error rates expect now and then.
        persistent = {sensor for sensor, w in weights.items() if w >= 2.0 * single and voices[sensor] >= 2}
        unanimous = {sensor for sensor, flags in odd.items() if all(flags)}
        if len(persistent) == 1 and set(odd) <= persistent | unanimous:
            return persistent, persistent | unanimous
        return persistent, persistent

    # ------------------------------------------------------------------ actions
    def moved_elsewhere(self, f, dissenters: set[str]):
        """On a conflicting tick from the one that would alert to the one that would re-localize: was
        the robot moved, rather than a sensor gone wrong?  Yes when at least two sensors disagree with
        where the robot was (``dissenters``) and the episode's readings agree with one another
        somewhere else: a trial belief built from them alone, from ignorance over free space, has no
        replayed reading that conflicts with it.  A faulty sensor fails one test or the other.  Two
        conflicting ticks in a row at least, so a single spurious reading never re-localizes.

        Returns (the trial back end, the reason in words) — the trial is to become the belief — or None."""
        p = self.policy
        if not self.monitor.may_test_a_move():
            return None
        if len(self.episode) < 2 or len(dissenters) < 2:  # one sensor against the rest: a fault, not a move
            return None
        trial = f.fork()
        worst, note = self._replay(trial, as_given=True)
        if worst >= p.clear_fraction * p.conflict_k:  # every replayed reading must be clear, not merely neutral
            return None
        ticks = len(self.episode)
        self.episode.clear()
        self.monitor.forget_history()
        reason = (
            f"{' and '.join(sorted(dissenters))} disagree with where the robot was, and the readings of the last {ticks} "
            f"ticks agree with one another at another place (worst conflict {worst:.2f} there): the robot was "
            "probably moved; the belief is re-seeded from them"
        )
        return trial, reason + (f"; {note}" if note else "")

    def reseed(self, f) -> str | None:
        """Reset ``f`` to ignorance over free space, then replay this episode's readings as applied; returns what
        the back end said of its belief during the replay (the last thing), if anything."""
        _, note = self._replay(f, as_given=False)
        self.episode.clear()
        self.monitor.forget_history()
        return note

    # ------------------------------------------------------------------ helpers
    def _replay(self, f, as_given: bool) -> tuple[float, str | None]:
        """Reset ``f`` to ignorance over free space and replay this episode into it (the readings as
        the sensors gave them, or as applied, quarantine discounts included); returns the worst
        conflict of a replayed reading with the belief built from the readings before it, and the last
        thing the back end said of its belief (``Backend.reset``, ``StepReport.note``)."""
        note = f.reset(self.free_prior)
        worst = 0.0
        for motion, applied, undiscounted in list(self.episode):
            if motion is not None:
                f.predict(motion)
            for _, evidence in undiscounted if as_given else applied:
                prior = f.snapshot()
                report = f.update(evidence)
                k = report.conflict if report.conflict is not None else f.reading_conflict(prior, evidence)
                worst = max(worst, k)
                note = report.note or note
        return worst, note

    @staticmethod
    def _dead_reckoned(f, belief, motions):
        """``belief`` carried along by ``motions`` (no readings), in snapshot form."""
        ref = f.fork()
        ref.restore(belief)
        for motion in motions:
            if motion is not None:
                ref.predict(motion)
        return ref.snapshot()


def _tick_conflict(f, before, applied) -> float:
    """Conflict of absorbing ``applied`` into ``before`` at once, as the back end scores it."""
    return f.joint_conflict(before, applied) if applied else 0.0
