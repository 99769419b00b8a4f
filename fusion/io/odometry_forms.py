"""Odometry as robots record it, turned into our records (the motion since the previous record).

Three forms, named in a log layout (``odometry = ...``):

* ``steps``: each row is already the motion since the previous row (forward, left, turn).
* ``poses``: each row is the pose the robot's odometry integrated (x, y, heading in its own
  frame, which need not be the site's).  A record is the move between two consecutive poses,
  seen from the first: its translation rotated into that pose's heading, and the heading change
  wrapped to ±180°.
* ``velocities``: each row holds the forward speed, the turn rate (and optionally the sideways
  speed) commanded or measured from its time until the next row's (a zero-order hold).  A record
  is the exact arc of constant speeds over that span (Thrun, Burgard & Fox 2005, §5.3, the
  velocity motion model's noise-free motion).  A speed is held at most ``MAX_HOLD_S``; a longer
  gap counts as standing still after that, and is reported once.

A conversion returns None for the first row (there is no move yet).
"""

from __future__ import annotations

import math

from fusion.sensors.odometry import OdometryReading

__all__ = ["OdometryForm", "MAX_HOLD_S"]

MAX_HOLD_S = 1.0
"""Longest a velocity row is held when the next row is late (our choice: a robot that stops publishing its
speeds for a second has most likely stopped, or its log has a gap)."""


class OdometryForm:
    """Turn rows of one odometry form into ``OdometryReading`` records (see the module docstring)."""

    def __init__(self, form: str):
        if form not in ("steps", "poses", "velocities"):
            raise ValueError(f"unknown odometry form {form!r}")
        self.form = form
        self.previous: tuple[float, float, float, float] | None = None  # t and the row's three values
        self.gaps = 0  # velocity rows held for less than their span (a gap in the log)

    def record(self, t: float, a: float, b: float, c: float) -> OdometryReading | None:
        """The record ending at ``t``.  ``steps``: (forward_m, left_m, turn_rad); ``poses``: (x_m, y_m,
        heading_rad); ``velocities``: (forward m/s, left m/s, turn rad/s)."""
        if self.form == "steps":
            return OdometryReading(a, b, math.degrees(c))
        previous, self.previous = self.previous, (t, a, b, c)
        if previous is None:
            return None
        t0, a0, b0, c0 = previous
        if self.form == "poses":
            dx, dy = a - a0, b - b0
            cos, sin = math.cos(c0), math.sin(c0)
            turn = (math.degrees(c - c0) + 180.0) % 360.0 - 180.0
            return OdometryReading(cos * dx + sin * dy, -sin * dx + cos * dy, turn)
        span = t - t0
        if span > MAX_HOLD_S:
            self.gaps += 1
            span = MAX_HOLD_S
        return arc(a0, b0, c0, max(span, 0.0))

    def restart(self) -> None:
        """The log's clock restarted: motion across it is unknown."""
        self.previous = None


def arc(forward: float, left: float, turn_rate: float, span: float) -> OdometryReading:
    """The move of constant body speeds (m/s, m/s, rad/s) over ``span`` seconds, as a record."""
    turn = turn_rate * span
    if abs(turn) < 1e-9:
        return OdometryReading(forward * span, left * span, math.degrees(turn))
    # Integrate the body velocity rotated by the heading reached so far: closed form of the arc.
    s, c = math.sin(turn), math.cos(turn)
    x = (forward * s - left * (1 - c)) / turn_rate
    y = (forward * (1 - c) + left * s) / turn_rate
    return OdometryReading(x, y, math.degrees(turn))
