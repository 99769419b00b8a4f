"""Scoring a replay against true poses: error figures, and when a localization from ignorance found itself.

``time_to_hold`` answers "after how long did the estimate hold within ``within_m`` and
``within_deg`` of the truth?": the first tick from which every tick of the next ``hold_s``
seconds (or to the end of the log, if sooner) is within both tolerances.  The defaults,
0.5 m and 15° held for 5 s, are our choice: a robot that close can re-enter a docking or
path-following routine, and a passing coincidence rarely lasts 5 s.
"""

from __future__ import annotations

import numpy as np

__all__ = ["time_to_hold", "WITHIN_M", "WITHIN_DEG", "HOLD_S"]

WITHIN_M = 0.5
WITHIN_DEG = 15.0
HOLD_S = 5.0


def time_to_hold(t, error_m, heading_error_deg, within_m=WITHIN_M, within_deg=WITHIN_DEG, hold_s=HOLD_S):
    """Seconds from the first tick to the first tick from which the estimate holds (see the module
    docstring), or None if it never does.  Ticks without a true pose (NaN) break a hold."""
    t = np.asarray(t, float)
    good = (np.asarray(error_m, float) <= within_m) & (np.asarray(heading_error_deg, float) <= within_deg)
    if t.size == 0:
        return None
    bad_after = np.full(t.size + 1, np.inf)  # time of the first bad tick at or after each tick
    for i in range(t.size - 1, -1, -1):
        bad_after[i] = bad_after[i + 1] if good[i] else t[i]
    for i in np.flatnonzero(good):
        if bad_after[i] > min(t[i] + hold_s, t[-1]) or (bad_after[i] == np.inf):
            return float(t[i] - t[0])
    return None
