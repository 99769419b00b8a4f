"""Streaming mode: observations as JSON lines in, one decision per line out.

Each input line is one observation (the log format of ``fusion.io.observations``).
An odometry line predicts and yields a decision; any other line is absorbed as a
reading and yields a decision.  A malformed line yields an error record on
standard output (so a consumer sees it in order) and on standard error, and the
stream goes on; the localizer's state is unchanged by a rejected line.  Lines
longer than ``MAX_LINE_BYTES`` are refused unread, so memory stays bounded.
"""

from __future__ import annotations

import json
import sys

from fusion.errors import FusionError
from fusion.io.json_line import decode_line
from fusion.io.observations import from_record
from fusion.localizer import Localizer

__all__ = ["stream", "MAX_LINE_BYTES"]

MAX_LINE_BYTES = 64 * 1024


def _error(line_number: int, message: str, out, err) -> None:
    record = {"line": line_number, "error": message}
    out.write(json.dumps(record) + "\n")
    out.flush()
    err.write(f"fusion stream: line {line_number}: {message}\n")
    err.flush()


def stream(localizer: Localizer, source=None, out=None, err=None) -> tuple[int, int]:
    """Run until the input ends; returns (decisions written, lines rejected)."""
    source = source or sys.stdin.buffer
    out, err = out or sys.stdout, err or sys.stderr
    written = rejected = 0
    number = 0
    while True:
        raw = source.readline(MAX_LINE_BYTES + 1)
        if not raw:
            break
        number += 1
        if len(raw) > MAX_LINE_BYTES and not raw.endswith(b"\n"):
            while raw and not raw.endswith(b"\n"):  # skip the rest of the over-long line
                raw = source.readline(MAX_LINE_BYTES + 1)
            _error(number, f"line longer than {MAX_LINE_BYTES} bytes; refused", out, err)
            rejected += 1
            continue
        text = raw.decode("utf-8", errors="replace").strip()
        if not text:
            continue
        if not raw.endswith(b"\n") and not text.endswith("}"):
            _error(number, "the stream stopped in the middle of a line", out, err)
            rejected += 1
            break
        try:
            obs = from_record(decode_line(text))
        except FusionError as e:
            _error(number, str(e), out, err)
            rejected += 1
            continue
        decision = localizer.step(obs, []) if obs.kind == "odometry" else localizer.step(None, [obs])
        if decision.rejected:
            _error(number, "; ".join(r for _, r in decision.rejected), out, err)
            rejected += 1
            continue
        out.write(json.dumps(decision.to_record(), allow_nan=False) + "\n")
        out.flush()
        written += 1
    return written, rejected
