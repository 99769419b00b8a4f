"""From a recording's records to ticks: each reading applied at the pose odometry gives at its own time.

A recording interleaves odometry records (the motion since the previous one) and readings, each
stamped with its own time.  The replay forms ticks so that no reading waits for, or runs ahead of,
the motion:

* A reading at time ``t`` that falls inside the span ``(t_a, t_b]`` of an odometry record is
  applied after the part of that record's motion up to ``t``: the record is split at ``t`` in
  proportion to time (constant velocity over one record, the usual assumption of odometry
  interpolation), and the rest of it is applied after the reading.  No odometry record per
  reading is needed.
* Readings within ``SAME_TIME_S`` of each other share one tick (and one pose).
* Motion with no reading ends a tick once it spans ``min_tick_s`` (the case's ``tick_s``), so the
  belief follows the motion when no reading comes, without a tick per odometry record (a robot
  may log odometry at 100 Hz).  The records of one tick are composed into one (exact pose
  composition; the path length the noise grows with is then the net move's, which differs only
  for a robot that reversed within one tick).
* A reading no odometry record covers is held at most ``MAX_HOLD_S``; past that (a log without
  odometry, or a robot whose odometry stopped) it is applied at the last pose odometry gave.
  Held readings are released the same way at the end of the log and where its clock restarts.

``TickFormer.add`` takes ``(line, observation)`` in log order and returns the ticks it completed;
a tick is a list of ``(line, observation)``: at most one odometry record (a whole record or a
part, stamped with its end time) first, then the readings.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Iterator

from fusion.io.observations import Observation
from fusion.sensors.odometry import OdometryReading, Travel, split_reading

__all__ = ["TickFormer", "form_ticks", "SAME_TIME_S", "MAX_HOLD_S"]

SAME_TIME_S = 0.01
"""Readings this close in time share a tick (our choice: at 2 m/s a robot moves 2 cm, a fifth of a fine
grid cell)."""
MAX_HOLD_S = 1.0
"""Longest a reading waits for an odometry record to cover its time (our choice, as long as one tick of the
slowest odometry we have met); readings waiting longer are applied at the last pose odometry gave."""

Item = tuple[int, Observation]


class TickFormer:
    """Ticks from records in log order (see the module docstring); ``is_odometry`` picks the records that move."""

    def __init__(self, is_odometry: Callable[[Observation], bool], min_tick_s: float = 0.0):
        self.is_odometry = is_odometry
        self.min_tick_s = min_tick_s
        self.odometry_t: float | None = None  # end of the motion already taken from the records
        self.held: list[Item] = []
        self.last_t = -math.inf
        self.moved: Item | None = None  # motion taken but not yet handed out (one composed record)
        self.moved_since = -math.inf  # time of the last tick handed out

    def add(self, line: int, obs: Observation) -> list[list[Item]]:
        out: list[list[Item]] = []
        if obs.t < self.last_t:  # the clock restarted (the reader let time go back only there)
            out += self.flush()
            self.odometry_t = None
        self.last_t = obs.t
        if self.held and obs.t - self.held[0][1].t > MAX_HOLD_S:
            out += self._release(self.held)
            self.held = []
        out += self._release_reached(obs.t)
        out += self._due(obs.t)
        if not self.is_odometry(obs):
            self.held.append((line, obs))
            return out
        if self.odometry_t is None or obs.t <= self.odometry_t:
            # The first record (its span is unknown) or a mis-stamped one, which the replay sets aside.
            out += self._release(self.held)
            self.held = []
            if self.odometry_t is None:
                self._take(line, obs)
                self.odometry_t = obs.t
            else:
                out.append([(line, obs)])
            return out
        return out + self._split(line, obs)

    def _split(self, line: int, obs: Observation) -> list[list[Item]]:
        """Take the record's motion in parts, one up to each group of held readings it covers."""
        out: list[list[Item]] = []
        n = 0
        while n < len(self.held) and self.held[n][1].t <= obs.t + SAME_TIME_S:  # held in time order
            n += 1
        covered, self.held = self.held[:n], self.held[n:]
        rest: OdometryReading = obs.reading
        start, end = self.odometry_t, obs.t
        for group in _same_time(covered):
            t = min(group[0][1].t, end)
            if t > start:
                part, rest = split_reading(rest, (t - start) / (end - start))
                self._take(line, Observation(t, obs.sensor, obs.kind, part))
                start = t
            out += self._release(group)
        if end > start:
            self._take(line, Observation(end, obs.sensor, obs.kind, rest))
        self.odometry_t = end
        return out

    def _due(self, now: float) -> list[list[Item]]:
        """The motion taken, as a tick of its own, once it spans ``min_tick_s`` and a record more than
        ``SAME_TIME_S`` after its end shows that no reading of its time follows (that would share its tick)."""
        if self.moved is None or self.held:
            return []
        t = self.moved[1].t
        if t - self.moved_since < self.min_tick_s or now - t <= SAME_TIME_S:
            return []
        tick, self.moved, self.moved_since = [self.moved], None, t
        return [tick]

    def _take(self, line: int, part: Observation) -> None:
        """Add a record (or part) to the motion not yet handed out, composed into one record."""
        if self.moved is None:
            self.moved = (line, part)
            return
        first_line, before = self.moved
        net = Travel().then(before.reading).then(part.reading).reading
        self.moved = (min(first_line, line), Observation(part.t, part.sensor, part.kind, net))

    def _release_reached(self, now: float) -> list[list[Item]]:
        """Release held readings at the pose already reached (their time is no later than the motion taken),
        once a record more than ``SAME_TIME_S`` after them shows no other reading joins them."""
        out: list[list[Item]] = []
        while (
            self.held
            and self.odometry_t is not None
            and self.held[0][1].t <= self.odometry_t + SAME_TIME_S
            and now - self.held[0][1].t > SAME_TIME_S
        ):
            n = 1
            while n < len(self.held) and self.held[n][1].t - self.held[0][1].t <= SAME_TIME_S:
                n += 1
            out += self._release(self.held[:n])
            self.held = self.held[n:]
        return out

    def _release(self, items: list[Item]) -> list[list[Item]]:
        """Ticks of readings, each group after the motion taken so far."""
        out = []
        for group in _same_time(items):
            if self.moved is not None:
                group = [self.moved, *group]
                self.moved = None
            self.moved_since = group[-1][1].t
            out.append(group)
        return out

    def flush(self) -> list[list[Item]]:
        out = self._release(self.held)
        self.held = []
        if self.moved is not None:
            out.append([self.moved])
            self.moved = None
        return out


def _same_time(items: list[Item]) -> Iterator[list[Item]]:
    group: list[Item] = []
    for item in items:
        if group and item[1].t - group[0][1].t > SAME_TIME_S:
            yield group
            group = []
        group.append(item)
    if group:
        yield group


def form_ticks(
    records: Iterable[Item], is_odometry: Callable[[Observation], bool], min_tick_s: float = 0.0
) -> Iterator[list[Item]]:
    """The ticks of a whole stream of ``(line, observation)`` records, in order."""
    former = TickFormer(is_odometry, min_tick_s)
    for line, obs in records:
        yield from former.add(line, obs)
    yield from former.flush()
