"""Streaming mode: observations as JSON lines in, exactly one JSON line out for every line in.

Each input line is one observation (the log format of ``fusion.io.observations``).  Every output
line carries ``"line"``, the input line it answers, so a consumer can always realign:

- an odometry line or a reading that is accepted: the decision (``Decision.to_record``);
- a malformed or refused line: ``{"line": N, "error": "..."}`` (also on standard error); the
  localizer's state is unchanged by it;
- a blank line: ``{"line": N, "ignored": "blank line"}``.

Time order follows ``fusion.io.timeline`` without holding lines back: a record stamped far from
the others (one in milliseconds among seconds, ``t: 1e300``) is refused as a time outlier and
the stream goes on with the records that follow; a real jump of the clock is taken after
``CONFIRM`` records agree on it.  Lines longer than ``MAX_LINE_BYTES`` are refused unread, so
memory stays bounded.
"""

from __future__ import annotations

import json
import sys

from fusion.errors import FusionError
from fusion.io.json_line import decode_line
from fusion.io.observations import from_record
from fusion.io.timeline import RESTART, Timeline
from fusion.localizer import Localizer
from fusion.text import plain

__all__ = ["stream", "MAX_LINE_BYTES"]

MAX_LINE_BYTES = 64 * 1024


class _Answers:
    def __init__(self, out, err):
        self.out, self.err = out, err
        self.written = self.rejected = 0

    def record(self, record: dict) -> None:
        self.out.write(json.dumps(record, allow_nan=False) + "\n")
        self.out.flush()

    def error(self, line_number: int, message: str) -> None:
        self.record({"line": line_number, "error": message})
        self.err.write(f"fusion stream: line {line_number}: {plain(message)}\n")
        self.err.flush()
        self.rejected += 1


def stream(localizer: Localizer, source=None, out=None, err=None) -> tuple[int, int]:
    """Run until the input ends; returns (decisions written, lines rejected)."""
    source = source or sys.stdin.buffer
    answers = _Answers(out or sys.stdout, err or sys.stderr)
    timeline = Timeline(hold=False)
    number = 0
    while True:
        raw = source.readline(MAX_LINE_BYTES + 1)
        if not raw:
            break
        number += 1
        if len(raw) > MAX_LINE_BYTES and not raw.endswith(b"\n"):
            while raw and not raw.endswith(b"\n"):  # skip the rest of the over-long line
                raw = source.readline(MAX_LINE_BYTES + 1)
            answers.error(number, f"line longer than {MAX_LINE_BYTES} bytes; refused")
            continue
        text = raw.decode("utf-8", errors="replace").strip().removeprefix("\ufeff")
        if not text:
            answers.record({"line": number, "ignored": "blank line"})
            continue
        if not raw.endswith(b"\n") and not text.endswith("}"):
            answers.error(number, "the stream stopped in the middle of a line")
            break
        _answer(localizer, timeline, number, text, answers)
    return answers.written, answers.rejected


def _answer(localizer: Localizer, timeline: Timeline, number: int, text: str, answers: _Answers) -> None:
    try:
        obs = from_record(decode_line(text))
        localizer.sensors.check(obs)  # an unknown sensor never moves the timeline
    except FusionError as e:
        answers.error(number, str(e))
        return
    (verdict,) = timeline.offer(obs.t, obs)
    if not verdict.accepted:
        answers.error(number, verdict.reason)
        return
    if verdict.decision == RESTART:
        localizer.restart_clock()
    decision = localizer.step(obs, []) if obs.moves else localizer.step(None, [obs])
    if decision.rejected:
        timeline.retract()
        answers.error(number, "; ".join(r for _, r in decision.rejected))
        return
    answers.record({"line": number, **decision.to_record()})
    answers.written += 1
