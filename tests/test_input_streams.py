"""Logs and streams are read once, from files and pipes alike, and no input is dropped silently.

What is checked: a stray quote costs one CSV row; a log given through a pipe is replayed whole;
a byte-order mark is dropped and UTF-16 is refused with what to do; one record stamped far off
(milliseconds among seconds, ``1e300``) is set aside alone instead of blinding the rest, in a
replay and in the stream; a clock that restarts is followed; every stream line is answered once.
The expected counts come from the unmodified log itself (read the same way, without the fault).
The time rule is ours (``fusion.io.timeline``); the CSV quoting rule is RFC 4180 (Shafranovich 2005).
"""

from __future__ import annotations

import io
import json
import os
import threading
from pathlib import Path

import pytest

from fusion.inspect import inspect_log
from fusion.io.case import load_case
from fusion.io.logs import iter_observations, read_observations
from fusion.io.timeline import ACCEPT, CONFIRM, RESTART, TIME_JUMP_S, Timeline
from fusion.localizer import Localizer
from fusion.runner import log_text
from fusion.simulate import simulate
from fusion.stream import stream

TINY = Path(__file__).parent / "data" / "tiny.toml"


@pytest.fixture(scope="module")
def case():
    return load_case(TINY)


@pytest.fixture(scope="module")
def log_lines(case) -> list[str]:
    return log_text(simulate(case))[0].splitlines()


def _records(path) -> list[dict]:
    return [o.to_record() for _, o in iter_observations(path)]


def _csv(lines: list[str]) -> str:
    """The JSON-lines log as CSV (the columns of fusion.io.logs), written by hand, one row a line."""
    cols = ["t", "sensor", "kind", "ranges_m", "marker", "range_m", "bearing_deg", "active", "forward_m", "turn_deg"]
    out = [",".join(cols)]
    for line in lines:
        rec = json.loads(line)
        cells = []
        for c in cols:
            v = rec.get(c, "")
            if c == "ranges_m" and v:
                v = ";".join(repr(x) for x in v)
            if c == "active" and v != "":
                v = "true" if v else "false"
            cells.append("" if v is None else str(v))
        out.append(",".join(cells))
    return "\n".join(out) + "\n"


def test_a_stray_quote_costs_its_own_csv_row_only(tmp_path, log_lines):
    clean = tmp_path / "clean.csv"
    clean.write_text(_csv(log_lines))
    rows = clean.read_text().splitlines()
    rows[20] = rows[20].replace(",", ',"', 1)  # an opening quote that is never closed
    dirty = tmp_path / "dirty.csv"
    dirty.write_text("\n".join(rows) + "\n")
    aside: list = []
    got = list(iter_observations(dirty, aside))
    assert len(got) == len(_records(clean)) - 1
    assert [s.line for s in aside] == [21] and "not a CSV row" in aside[0].reason


def _fifo_with(tmp_path: Path, text: str) -> Path:
    fifo = tmp_path / "pipe.jsonl"
    os.mkfifo(fifo)

    def feed():
        with open(fifo, "w") as fh:
            fh.write(text)

    threading.Thread(target=feed, daemon=True).start()
    return fifo


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs named pipes")
def test_a_log_through_a_pipe_is_replayed_whole(tmp_path, case, log_lines):
    text = "\n".join(log_lines) + "\n"
    (tmp_path / "file.jsonl").write_text(text)
    expected = inspect_log(case, tmp_path / "file.jsonl", tmp_path / "a", frames=False)
    piped = inspect_log(case, _fifo_with(tmp_path, text), tmp_path / "b", frames=False)
    assert piped.records == expected.records == len(log_lines) and piped.lines == len(log_lines)
    assert piped.used == expected.used and piped.set_aside == 0
    os.unlink(tmp_path / "pipe.jsonl")
    read = read_observations(_fifo_with(tmp_path, text))
    assert len(read.records) == len(log_lines) and read.lines == len(log_lines)


def test_a_byte_order_mark_is_dropped_and_utf16_is_refused_with_advice(tmp_path, log_lines):
    text = "\n".join(log_lines) + "\n"
    for name, body in (("log.jsonl", text), ("log.csv", _csv(log_lines))):
        plain, marked = tmp_path / ("p-" + name), tmp_path / ("m-" + name)
        plain.write_text(body, encoding="utf-8")
        marked.write_text(body, encoding="utf-8-sig")  # what spreadsheet programs save
        assert _records(marked) == _records(plain) and len(_records(plain)) == len(log_lines)
        wide = tmp_path / ("w-" + name)
        wide.write_text(body, encoding="utf-16")
        with pytest.raises(ValueError, match="UTF-16.*save it as UTF-8"):
            _records(wide)


@pytest.mark.parametrize("stamp", [lambda t: t * 1000.0, lambda t: 1e300, lambda t: t + 3600.0, lambda t: -5.0])
def test_one_mis_stamped_reading_is_set_aside_alone(tmp_path, case, log_lines, stamp):
    lines = list(log_lines)
    k = 40
    rec = json.loads(lines[k])
    rec["t"] = stamp(rec["t"])
    lines[k] = json.dumps(rec)
    path = tmp_path / "log.jsonl"
    path.write_text("\n".join(lines) + "\n")
    aside: list = []
    got = list(iter_observations(path, aside))
    assert len(got) == len(log_lines) - 1 and [s.line for s in aside] == [k + 1]
    found = inspect_log(case, path, tmp_path / "o", frames=False)
    assert found.set_aside == 1 and found.records == len(log_lines) - 1
    # the stream refuses the same line and answers every other one as it would without it
    answers = _streamed(case, lines)
    baseline = _streamed(case, log_lines)
    assert [a["line"] for a in answers if "error" in a] == [k + 1]
    assert sum("error" not in a for a in answers) == sum("error" not in a for a in baseline) - (
        "error" not in baseline[k]
    )


def _streamed(case, lines: list[str]) -> list[dict]:
    out = io.StringIO()
    stream(Localizer.from_case(case, "bayes"), io.BytesIO(("\n".join(lines) + "\n").encode()), out, io.StringIO())
    return [json.loads(a) for a in out.getvalue().splitlines()]


def test_a_clock_that_restarts_is_followed_not_fought(tmp_path, case, log_lines):
    path = tmp_path / "twice.jsonl"
    path.write_text("\n".join(log_lines + log_lines) + "\n")  # a second shift, its clock from 0 again
    found = inspect_log(case, path, tmp_path / "o", frames=False)
    assert found.set_aside == 0 and found.records == 2 * len(log_lines)
    assert any("clock restarted" in w for w in found.warnings)
    answers = _streamed(case, log_lines + log_lines)
    refused = [a["line"] for a in answers if "error" in a]
    # the stream cannot wait: it refuses the records before the confirming one, and only those
    assert refused == list(range(len(log_lines) + 1, len(log_lines) + CONFIRM))


def test_the_time_rule_keeps_sparse_logs_and_drops_a_first_record_that_is_off():
    sparse = Timeline(hold=True)
    verdicts = [v for t in range(0, 1000, 100) for v in sparse.offer(float(t), t)] + sparse.flush()
    assert [v.item for v in verdicts if v.accepted] == list(range(0, 1000, 100))  # 100 s > TIME_JUMP_S apart
    assert TIME_JUMP_S < 100
    first_off = Timeline(hold=True)
    verdicts = [v for t in (5000.0, 1.0, 1.1, 1.2, 1.3) for v in first_off.offer(t, t)] + first_off.flush()
    assert [v.item for v in verdicts if v.accepted] == [1.0, 1.1, 1.2, 1.3]
    assert [v.decision for v in verdicts if v.accepted] == [ACCEPT] * 4
    back = Timeline(hold=True)
    verdicts = [v for t in (10.0, 11.0, 1.0, 1.5, 2.0, 2.5) for v in back.offer(t, t)] + back.flush()
    assert [(v.item, v.decision) for v in verdicts] == [
        (10.0, ACCEPT),
        (11.0, ACCEPT),
        (1.0, RESTART),
        (1.5, ACCEPT),
        (2.0, ACCEPT),
        (2.5, ACCEPT),
    ]


def test_every_stream_line_gets_one_answer_naming_its_line(case, log_lines):
    lines = log_lines[:10]
    lines[3:3] = ["", "   ", "{broken"]
    answers = _streamed(case, lines)
    assert [a["line"] for a in answers] == list(range(1, len(lines) + 1))
    assert [a.get("ignored") for a in answers[3:5]] == ["blank line", "blank line"] and "error" in answers[5]


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs named pipes")
def test_the_inspect_command_replays_a_pipe(tmp_path, log_lines, capsys):
    from fusion.cli import main

    fifo = _fifo_with(tmp_path, "\n".join(log_lines) + "\n")
    code = main(["inspect", str(fifo), "--site", str(TINY), "--out", str(tmp_path / "o"), "--no-frames"])
    assert code == 0, capsys.readouterr().err
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert summary["records"] == summary["lines"] == len(log_lines)


def test_garbage_under_a_csv_header_is_refused_as_no_log(tmp_path):
    """Rows that never make a record (here: the wrong number of cells) count towards "this is no log" in a CSV
    log as in JSON lines, so an endless one cannot fill the disk with set-aside reasons."""
    from fusion.errors import InputFileError
    from fusion.io.logs import NOTHING_USABLE_LINES

    path = tmp_path / "garbage.csv"
    path.write_text("t,sensor,kind\n" + "x\n" * (NOTHING_USABLE_LINES + 5))
    with pytest.raises(InputFileError, match="this is no log"):
        list(iter_observations(path))
