"""True poses from a JSON-lines truth file: ``{"t": 12.25, "x_m": 3.5, "y_m": 6.5, "heading_deg": 90.0}`` a line
(``"carried": true`` marks a tick where the robot was put down elsewhere), in time order, bad lines set aside."""

from __future__ import annotations

from collections.abc import Iterator

from fusion.errors import ObservationError
from fusion.io.json_line import finite_number, shown
from fusion.io.logs import (
    NOTHING_USABLE_LINES,
    LogRead,
    ReadPosition,
    SetAside,
    TruthPose,
    _decode,
    _no_log,
    _released,
    held,
    text_lines,
)
from fusion.io.timeline import Timeline

__all__ = ["iter_truth", "read_truth"]


def iter_truth(
    path, set_aside: list[SetAside] | None = None, position: ReadPosition | None = None
) -> Iterator[tuple[int, TruthPose]]:
    """Stream ``(line, pose)`` from a JSON-lines truth file, times strictly increasing (an outlier is set
    aside by the rule of ``fusion.io.timeline``; the clock of a truth file never restarts)."""
    set_aside = [] if set_aside is None else set_aside
    timeline = Timeline(hold=True, strict=True, restarts=False)
    usable = False
    for number, text, problem in text_lines(path, position):
        if not usable and number >= NOTHING_USABLE_LINES:
            _no_log(path, number, set_aside[-1:])
        rec = _decode(number, text, problem, set_aside)
        if rec is None:
            continue
        try:
            pose = _truth(rec)
        except ObservationError as err:
            set_aside.append(SetAside(number, str(err), text.strip()[:80]))
            continue
        usable = True
        yield from _released(timeline.offer(pose.t, (number, pose, "")), set_aside.append)
    yield from _released(timeline.flush(), set_aside.append)


def read_truth(path) -> LogRead:
    """True poses of a JSON-lines truth file, in time order; bad lines are set aside."""
    set_aside: list[SetAside] = []
    position = ReadPosition()
    records = held(iter_truth(path, set_aside, position), path, "true poses")
    return LogRead(str(path), records, set_aside, position.lines)


def _truth(rec) -> TruthPose:
    if not isinstance(rec, dict):
        raise ObservationError(f"a truth record must be a JSON object, got {type(rec).__name__}")
    values = []
    for key in ("t", "x_m", "y_m", "heading_deg"):
        v = finite_number(rec.get(key))
        if v is None:
            raise ObservationError(f"truth: field '{key}' must be a finite number, got {shown(rec.get(key))}")
        values.append(v)
    carried = rec.get("carried", False)
    if not isinstance(carried, bool):
        raise ObservationError(f"truth: field 'carried' must be true or false, got {carried!r}")
    return TruthPose(*values, carried)
