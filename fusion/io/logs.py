"""Reading recorded logs tolerantly: observations (JSON lines or CSV) and true poses (JSON lines).

A bad line (not JSON, a field missing or not finite, time running backwards) is
set aside with its line number and the reason, and reading goes on: a log from a
robot is never perfect, and one bad row must not hide the other hundred thousand.
The caller decides how many set-aside rows it can live with and reports them.

The observation format is ``fusion.io.observations``; a truth line is

    {"t": 12.25, "x_m": 3.5, "y_m": 6.5, "heading_deg": 90.0, "carried": false}

(``carried`` optional: true on the tick the robot was put down somewhere else).
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from fusion.errors import InputFileError, ObservationError
from fusion.io.json_line import decode_line
from fusion.io.observations import Observation, from_record
from fusion.io.timeline import Timeline
from fusion.words import plural

__all__ = [
    "SetAside",
    "LogRead",
    "iter_observations",
    "read_observations",
    "TruthPose",
    "MAX_LINE_BYTES",
    "CSV_COLUMNS",
    "require_readable",
    "ReadPosition",
    "text_lines",
    "held",
]

MAX_LINE_BYTES = 64 * 1024
"""A log line longer than this is set aside unread (a real record is a few hundred bytes)."""
MAX_SKIP_BYTES = 1024**3
"""A line longer than this ends the reading: the input is no log of ours (``/dev/zero``, a binary file).
A single over-long line below it (a corrupted record of 100 MB) is set aside and reading goes on."""
MAX_HELD_RECORDS = 2_000_000
"""Most records ``read_observations`` and ``read_truth`` hold in memory at once (a calibration reads
the whole log; about 1 GiB at this count).  Replays stream and have no such bound."""
NOTHING_USABLE_LINES = 10_000
"""A log whose first this many lines hold no record at all is refused: it is not a log (our choice)."""


@dataclass(frozen=True)
class SetAside:
    line: int
    reason: str
    text: str  # the start of the line, for the report
    file: str = ""  # the table or recording it is in, when a layout reads several (the line is in that file)

    @property
    def where(self) -> str:
        return f"{self.file}:{self.line}" if self.file else f"line {self.line}"


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
        return f"{self.path}: {plural(len(self.records), 'record')} read, {len(self.set_aside):,} of {plural(self.lines, 'line')} set aside"


@dataclass
class ReadPosition:
    """How far a reader got: the lines read so far (a pipe is read once, so this is its only line count)."""

    lines: int = 0


_UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")
_UTF8_BOM = b"\xef\xbb\xbf"


def text_lines(path, position: ReadPosition | None = None) -> Iterator[tuple[int, str | None, str]]:
    """``(line number, text, problem)`` read once from a file or a pipe.  ``text`` is None, and ``problem``
    says why, for a line that is over-long (skipped unread in blocks), not UTF-8 or holds NUL bytes.  A
    UTF-8 byte-order mark is dropped; UTF-16 or UTF-32 text with its mark is refused with what to do."""
    try:
        fh = open(path, "rb")  # noqa: SIM115 - closed by the with below
    except OSError as err:
        raise InputFileError(path, None, None, f"cannot read the log: {err.strerror}") from None
    with fh:
        for number, raw in _bounded_lines(fh, path):
            if position is not None:
                position.lines = number
            if number == 1 and raw is not None:
                if raw.startswith(_UTF16_BOMS):
                    raise InputFileError(
                        path,
                        1,
                        None,
                        "the file is UTF-16 or UTF-32 text (it starts with that byte-order mark); save it as UTF-8",
                    )
                raw = raw.removeprefix(_UTF8_BOM)
            if raw is None:
                yield number, None, f"longer than {MAX_LINE_BYTES:,} bytes"
            elif b"\0" in raw:
                yield number, None, "holds NUL bytes (is the file UTF-16 text? save it as UTF-8)"
            else:
                try:
                    yield number, raw.decode("utf-8"), ""
                except UnicodeDecodeError as err:
                    yield number, None, f"not UTF-8 (byte {err.start}); save the file as UTF-8"


def _bounded_lines(fh, path) -> Iterator[tuple[int, bytes | None]]:
    """``(line number, line)`` of ``fh`` (binary), the line None when longer than ``MAX_LINE_BYTES``.

    Iterating a file reads a whole line into memory, so one line of a gigabyte with no newline
    would take a gigabyte; reading at most ``MAX_LINE_BYTES + 1`` at a time keeps memory bounded,
    and a line that runs past ``MAX_SKIP_BYTES`` ends the reading (time stays bounded too)."""
    number = 0
    while True:
        line = fh.readline(MAX_LINE_BYTES + 1)
        number += 1
        if not line:
            return
        if len(line) > MAX_LINE_BYTES:
            skipped = len(line)
            while line and not line.endswith(b"\n"):
                line = fh.readline(MAX_LINE_BYTES + 1)
                skipped += len(line)
                if skipped > MAX_SKIP_BYTES:
                    raise InputFileError(
                        path,
                        number,
                        None,
                        f"line {number} runs past {MAX_SKIP_BYTES:,} bytes with no end: this is no log",
                    )
            yield number, None
        else:
            yield number, line


def _decode(number: int, text: str | None, problem: str, set_aside: list[SetAside]):
    if text is None:
        set_aside.append(SetAside(number, problem, ""))
        return None
    stripped = text.strip()
    if not stripped:
        return None
    try:
        value = decode_line(stripped)
    except ObservationError as err:
        set_aside.append(SetAside(number, str(err), stripped[:80]))
        return None
    if value is None:  # a bare `null` is JSON but no record; None below means "nothing on this line"
        set_aside.append(SetAside(number, "not a JSON object: null", stripped[:80]))
    return value


def iter_observations(
    path, set_aside: list[SetAside] | None = None, on_set_aside=None, position: ReadPosition | None = None
) -> Iterator[tuple[int, Observation]]:
    """Stream ``(line, observation)`` from a JSON-lines or CSV log (by the file's suffix), in file order.

    The file (or pipe) is read once; nothing is held but the current line and the few records a
    time jump holds (``fusion.io.timeline``).  A bad line is handed to ``on_set_aside(SetAside)``
    (and appended to ``set_aside`` when given) and reading goes on.  Times go back only where the
    timeline rule saw the clock restart; ``position.lines`` counts the lines read.
    """

    latest: list[SetAside] = []  # the last row set aside, for the message of an input that is no log

    def aside(row: SetAside) -> None:
        latest[:] = [row]
        if set_aside is not None:
            set_aside.append(row)
        if on_set_aside is not None:
            on_set_aside(row)

    timeline = Timeline(hold=True)
    csv_log = str(path).lower().endswith(".csv")
    rows = _csv_records(path, aside, position) if csv_log else _json_records(path, aside, position)
    usable = False
    for number, rec, text in rows:
        if rec is not None:
            try:
                obs: Observation = from_record(rec)
            except ObservationError as err:
                aside(SetAside(number, str(err), text[:80]))
            else:
                usable = True
                yield from _released(timeline.offer(obs.t, (number, obs, text)), aside)
                continue
        if not usable and number >= NOTHING_USABLE_LINES:
            _no_log(path, number, latest)
    yield from _released(timeline.flush(), aside)


def _released(verdicts, aside) -> Iterator[tuple[int, Observation]]:
    for v in verdicts:
        number, obs, text = v.item
        if v.accepted:
            yield number, obs
        else:
            aside(SetAside(number, v.reason, text[:80]))


def _json_records(path, aside, position=None) -> Iterator[tuple[int, object, str]]:
    """``(line, JSON value, text)`` of every line; the value None for a line set aside (or blank), so the
    caller sees every line and can tell an input that is no log."""
    for number, text, problem in text_lines(path, position):
        rejected: list[SetAside] = []
        rec = _decode(number, text, problem, rejected)
        for row in rejected:
            aside(row)
        yield number, rec, "" if text is None else text.strip()


def _no_log(path, number: int, rejected: list[SetAside]) -> None:
    """Refuse an input whose first lines hold no record at all (random bytes, a binary file, garbage under a
    CSV header): set aside one by one, an endless one would fill the disk with reasons."""
    why = f" (line {number}: {rejected[0].reason})" if rejected else ""
    raise InputFileError(path, None, None, f"none of the first {number:,} lines holds a record{why}: this is no log")


CSV_COLUMNS = (
    "t",
    "sensor",
    "kind",
    "ranges_m",
    "marker",
    "range_m",
    "bearing_deg",
    "active",
    "forward_m",
    "left_m",
    "turn_deg",
)
"""Columns of a CSV log (a header row names them, in any order; unused cells stay empty).
``ranges_m`` holds the beams separated by ``;``, an empty ``marker`` cell of a markers row means
"looked, saw nothing", ``active`` is true/false (or 1/0)."""


def _csv_records(path, aside, position=None) -> Iterator[tuple[int, object, str]]:
    """Rows of a CSV log as observation records, None for a row set aside (as ``_json_records``).  Each
    line is parsed on its own, so a stray quote costs its own row only (a quoted cell cannot run on into
    the next line; our logs never need one to)."""
    import csv

    header = None
    unknown: list[str] = []
    for number, text, problem in text_lines(path, position):
        if text is None:
            if header is None:
                raise InputFileError(path, number, None, f"the header row is {problem}")
            aside(SetAside(number, problem, ""))
            yield number, None, ""
            continue
        if not text.strip():
            continue
        try:
            cells = next(csv.reader([text.rstrip("\r\n")], strict=True))
        except csv.Error as err:
            if header is None:
                raise InputFileError(path, number, None, f"the header row is not CSV: {err}") from None
            aside(SetAside(number, f"not a CSV row: {err}", text.strip()[:80]))
            yield number, None, ""
            continue
        if header is None:
            header = [h.strip() for h in cells]
            missing = [c for c in ("t", "sensor", "kind") if c not in header]
            if missing:
                raise InputFileError(
                    path,
                    number,
                    None,
                    f"the header lacks the column(s) {', '.join(missing)}; columns are {', '.join(CSV_COLUMNS)}",
                )
            unknown = [c for c in header if c not in CSV_COLUMNS and c]
            continue
        shown = ",".join(cells)
        if len(cells) != len(header):
            aside(SetAside(number, f"{len(cells)} cells where the header has {len(header)}", shown[:80]))
            yield number, None, shown
            continue
        try:
            rec = _csv_record(dict(zip(header, cells)), unknown)
        except ObservationError as err:
            aside(SetAside(number, str(err), shown[:80]))
            rec = None
        yield number, rec, shown


def _csv_record(row: dict, unknown: list[str]) -> dict:
    rec: dict = {}
    for key, raw in row.items():
        if key in unknown or not key:
            continue
        cell = raw.strip()
        if key in ("sensor", "kind"):
            rec[key] = cell
        elif key == "marker":
            if rec.get("kind", row.get("kind", "").strip()) == "markers":
                rec[key] = cell or None
        elif not cell:
            continue
        elif key == "ranges_m":
            rec[key] = [_csv_number(key, part) for part in cell.split(";")]
        elif key == "active":
            flag = cell.lower()
            if flag not in ("true", "false", "1", "0"):
                raise ObservationError(f"field 'active' must be true or false, got {cell!r}")
            rec[key] = flag in ("true", "1")
        else:
            rec[key] = _csv_number(key, cell)
    return rec


def _csv_number(key: str, cell: str) -> float:
    try:
        return float(cell)
    except ValueError:
        raise ObservationError(f"field {key!r} must be a number, got {cell!r}") from None


def read_observations(path) -> LogRead:
    """Every observation of a log (JSON lines or CSV), in file order; bad lines are set aside."""
    set_aside: list[SetAside] = []
    position = ReadPosition()
    records = held(iter_observations(path, set_aside, position=position), path, "observations")
    return LogRead(str(path), records, set_aside, position.lines)


def held(rows, path, what: str) -> list:
    """The rows as a list, refusing more than ``MAX_HELD_RECORDS`` (memory must stay bounded)."""
    out = []
    for row in rows:
        out.append(row)
        if len(out) > MAX_HELD_RECORDS:
            raise InputFileError(
                path,
                row[0],
                None,
                f"more than {MAX_HELD_RECORDS:,} {what}: this command holds them all in memory; give it a part "
                "of the log (an hour or two is plenty to calibrate)",
            )
    return out


def require_readable(path, what: str = "file") -> None:
    """Refuse a file that cannot be opened for reading, without reading from it (a pipe stays unread)."""
    import stat

    try:
        mode = os.stat(path).st_mode
        if stat.S_ISDIR(mode):
            raise InputFileError(path, None, None, f"cannot read the {what}: it is a folder")
        if stat.S_ISREG(mode):
            os.close(os.open(path, os.O_RDONLY))
            return
    except OSError as err:
        raise InputFileError(path, None, None, f"cannot read the {what}: {err.strerror}") from None
    if not os.access(path, os.R_OK):  # a pipe: opening it to try would take it from its writer
        raise InputFileError(path, None, None, f"cannot read the {what}: Permission denied")


def require_records(read: LogRead, what: str) -> None:
    """Refuse a file that yielded nothing usable, saying why the first lines were set aside."""
    if read.records:
        return
    first = "; ".join(f"line {s.line}: {s.reason}" for s in read.set_aside[:3])
    raise InputFileError(
        Path(read.path),
        None,
        None,
        f"no usable {what} in {plural(read.lines, 'line')}" + (f" ({first})" if first else ""),
    )
