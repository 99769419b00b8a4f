"""Reading recorded logs tolerantly: observations and true poses as JSON lines.

A bad line (not JSON, a field missing or not finite, time running backwards) is
set aside with its line number and the reason, and reading goes on: a log from a
robot is never perfect, and one bad row must not hide the other hundred thousand.
The caller decides how many set-aside rows it can live with and reports them.

The observation format is ``fusion.io.observations``; a truth line is

    {"t": 12.25, "x_m": 3.5, "y_m": 6.5, "heading_deg": 90.0, "carried": false}

(``carried`` optional: true on the tick the robot was put down somewhere else).
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from fusion.errors import FusionError, InputFileError, ObservationError
from fusion.io.observations import Observation, from_record

__all__ = ["SetAside", "LogRead", "read_observations", "read_truth", "TruthPose", "MAX_LINE_BYTES"]

MAX_LINE_BYTES = 64 * 1024
"""A log line longer than this is set aside unread (a real record is a few hundred bytes)."""


@dataclass(frozen=True)
class SetAside:
    line: int
    reason: str
    text: str  # the start of the line, for the report


@dataclass(frozen=True)
class TruthPose:
    t: float
    x_m: float
    y_m: float
    heading_deg: float
    carried: bool = False


@dataclass
class LogRead:
    path: str
    records: list
    set_aside: list[SetAside]
    lines: int

    def summary(self) -> str:
        return f"{self.path}: {len(self.records):,} records read, {len(self.set_aside):,} of {self.lines:,} lines set aside"


def _lines(path) -> Iterator[tuple[int, str]]:
    try:
        fh = open(path, "rb")  # noqa: SIM115 - closed by the with below
    except OSError as err:
        raise InputFileError(path, None, None, f"cannot read the log: {err.strerror}") from None
    with fh:
        for number, raw in enumerate(fh, 1):
            if len(raw) > MAX_LINE_BYTES:
                yield number, None
                continue
            try:
                yield number, raw.decode("utf-8")
            except UnicodeDecodeError as err:
                yield number, f"\0not UTF-8 (byte {err.start})"


def _decode(number: int, text: str | None, set_aside: list[SetAside]):
    if text is None:
        set_aside.append(SetAside(number, f"longer than {MAX_LINE_BYTES:,} bytes", ""))
        return None
    if text.startswith("\0"):
        set_aside.append(SetAside(number, text[1:], ""))
        return None
    stripped = text.strip()
    if not stripped:
        return None
    try:
        return json.loads(stripped, parse_constant=_no_constant)
    except (ValueError, FusionError) as err:
        set_aside.append(SetAside(number, f"not a JSON object: {err}", stripped[:80]))
        return None


def _no_constant(name: str):
    raise FusionError(f"{name} is not a number a log may hold")


def read_observations(path) -> LogRead:
    """Every observation of a JSON-lines log, in file order; bad lines are set aside."""
    records, set_aside, last_t, count = [], [], -math.inf, 0
    for number, text in _lines(path):
        count = number
        rec = _decode(number, text, set_aside)
        if rec is None:
            continue
        try:
            obs: Observation = from_record(rec)
        except ObservationError as err:
            set_aside.append(SetAside(number, str(err), text.strip()[:80]))
            continue
        if obs.t < last_t:
            set_aside.append(SetAside(number, f"time {obs.t:g} s is before the previous record's {last_t:g} s", ""))
            continue
        last_t = obs.t
        records.append((number, obs))
    return LogRead(str(path), records, set_aside, count)


def read_truth(path) -> LogRead:
    """True poses of a JSON-lines truth file, in time order; bad lines are set aside."""
    records, set_aside, last_t, count = [], [], -math.inf, 0
    for number, text in _lines(path):
        count = number
        rec = _decode(number, text, set_aside)
        if rec is None:
            continue
        try:
            pose = _truth(rec)
        except ObservationError as err:
            set_aside.append(SetAside(number, str(err), text.strip()[:80]))
            continue
        if pose.t <= last_t:
            set_aside.append(SetAside(number, f"time {pose.t:g} s does not follow the previous {last_t:g} s", ""))
            continue
        last_t = pose.t
        records.append((number, pose))
    return LogRead(str(path), records, set_aside, count)


def _truth(rec) -> TruthPose:
    if not isinstance(rec, dict):
        raise ObservationError(f"a truth record must be a JSON object, got {type(rec).__name__}")
    values = []
    for key in ("t", "x_m", "y_m", "heading_deg"):
        v = rec.get(key)
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise ObservationError(f"truth: field '{key}' must be a finite number, got {v!r}")
        values.append(float(v))
    carried = rec.get("carried", False)
    if not isinstance(carried, bool):
        raise ObservationError(f"truth: field 'carried' must be true or false, got {carried!r}")
    return TruthPose(*values, carried)


def require_records(read: LogRead, what: str) -> None:
    """Refuse a file that yielded nothing usable, saying why the first lines were set aside."""
    if read.records:
        return
    first = "; ".join(f"line {s.line}: {s.reason}" for s in read.set_aside[:3])
    raise InputFileError(
        Path(read.path), None, None, f"no usable {what} in {read.lines} lines" + (f" ({first})" if first else "")
    )
