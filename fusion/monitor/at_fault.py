"""The reading at fault in an alert, a re-localization or a quarantine, in words.

Blame (leave-one-out, ``fusion.monitor.recovery.Recovery.blame``) names the sensor; this names its reading: of the
blamed sensor's readings of the tick, the one that conflicted most with the belief before the tick,
described against the pose estimate of that belief ("marker 7 measured at 3.10 m, +40°; expected at
2.31 m, +12°").  The estimate before the tick is the right reference: after it, a wrong reading has
already pulled the belief towards itself.
"""

from __future__ import annotations

from dataclasses import dataclass

from fusion.errors import FusionError

__all__ = ["TickReading", "ReadingAtFault", "reading_at_fault"]


@dataclass(frozen=True)
class TickReading:
    """One reading of a tick and its conflict with the belief it met."""

    sensor: str
    reading: object
    conflict: float


@dataclass(frozen=True)
class ReadingAtFault:
    sensor: str
    conflict: float
    said: str  # the reading against the estimate, in words

    def sentence(self) -> str:
        return f"reading at fault: {self.sensor}, {self.said} (K {self.conflict:.2f} with the belief before it)"


def reading_at_fault(readings: list[TickReading], suspects: list[str], explain, pose) -> ReadingAtFault | None:
    """``suspects``: sensors in the order of blame (the first one that gave a reading this tick is
    taken; none: the reading of any sensor that conflicted most).  ``explain(sensor, reading, x, y,
    heading_deg)`` describes a reading; ``pose``: (x, y, heading_deg) of the estimate before the tick."""
    if not readings:
        return None
    chosen = None
    for sensor in suspects:
        own = [r for r in readings if r.sensor == sensor]
        if own:
            chosen = max(own, key=lambda r: r.conflict)
            break
    if chosen is None:
        chosen = max(readings, key=lambda r: r.conflict)
    try:
        said = explain(chosen.sensor, chosen.reading, *pose)
    except (FusionError, ValueError, TypeError, AttributeError) as err:
        said = f"(cannot be described: {err})"
    return ReadingAtFault(chosen.sensor, chosen.conflict, said)
