"""The monitor stage: the conflict policy (``policy``), recovery from an episode (``recovery``: blame,
the move test, re-seeding), the reading at fault (``at_fault``) and conflict episodes of a replay
(``episodes``).  The policy's names are importable from here."""

from fusion.monitor.policy import (
    ALERT,
    CARRY_ON,
    INFORMATIVE,
    QUARANTINE,
    RELOCALIZE,
    Monitor,
    Policy,
    TickVerdict,
)

__all__ = ["Policy", "Monitor", "TickVerdict", "CARRY_ON", "ALERT", "RELOCALIZE", "QUARANTINE", "INFORMATIVE"]
