"""Fuzzing every input surface: case files, calibration files, logs (JSON lines, CSV), truth files,
stream lines, the scrub index and the command line's --start.

The property everywhere: a malformed input gets our error (``InputFileError`` naming the file and,
where there is one, the line and field; or a set-aside row / error record with a line number),
never another exception, a hang or unbounded memory.  Inputs come from mutating valid files of
our test bay (line deletion, duplication, truncation, values swapped for hostile ones, bytes
flipped) and from hypothesis' own text and JSON generators.  ``fuzz_count.tried`` tallies the
distinct malformed inputs; the run prints the figure.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import tempfile
from pathlib import Path

import numpy as np
import pytest
from fuzz_count import tried
from hypothesis import given, settings
from hypothesis import strategies as st

from fusion.cli import EXIT_DEFECT, main
from fusion.errors import FusionError, InputFileError
from fusion.io.case import apply_calibration, load_case, parse_case
from fusion.io.logs import CSV_COLUMNS, MAX_LINE_BYTES, iter_observations
from fusion.io.start_pose import parse_start
from fusion.io.truth_file import iter_truth
from fusion.localizer import Localizer
from fusion.stream import stream
from fusion.view.scrub import Scrubber

TINY = Path(__file__).parent / "data" / "tiny.toml"
CASE_TEXT = TINY.read_text(encoding="utf-8")
CASE = load_case(TINY)

CALIBRATION_TEXT = """\
[calibration]
site = "test bay"
log = "night.jsonl"
truth = "night-truth.jsonl"

[[sensors]]
name = "ranger"
kind = "ranging"
wall_spread_m = 0.16
wall_share = 0.8
early_share = 0.1
no_echo_share = 0.05
stray_share = 0.05
[sensors.interval]
wall_spread_m = [0.14, 0.18]

[[sensors]]
name = "contact"
kind = "door"
hit_rate = 0.93
reliability = 0.9
"""

# Values a hostile or careless editor may put on the right of `key = ...` in a TOML file.
HOSTILE_TOML = [
    "-1",
    "0",
    "-0.0",
    "1e309",
    "nan",
    "inf",
    "-inf",
    "1e-320",
    "9" * 40,
    '""',
    '"x"',
    '"../../../etc/passwd"',
    '"/dev/zero"',
    "[]",
    "[1, 2]",
    "[[1, 2], [3]]",
    "true",
    "{}",
    "{ a = 1 }",
    "1979-05-27T07:32:00Z",
    '"' + "é" * 3000 + '"',
    "[" * 50 + "]" * 50,
]

# JSON values for a field of a log record.
HOSTILE_JSON = [
    None,
    True,
    "x",
    "",
    [],
    {},
    -1,
    -1e-300,
    1e308,
    0,
    [1, "x"],
    [[1.0]],
    {"a": 1},
    "R-west" * 100,
    2**70,
]
HOSTILE_RAW = ["NaN", "Infinity", "-Infinity", "1" * 5000, "1e400", "[" * 30000 + "]" * 30000]


def _rejects_with_our_error(call, surface: str, data) -> object:
    """Run ``call``; an ``InputFileError`` counts as a clear refusal (tallied), anything else fails the test."""
    try:
        return call()
    except InputFileError as err:
        tried(surface, data)
        assert str(err).strip() and err.path
        return err


# ----------------------------------------------------------------------------- text mutations
@st.composite
def mutated_text(draw, text: str):
    """``text`` with one to three line-level or byte-level mutations."""
    lines = text.splitlines()
    for _ in range(draw(st.integers(1, 3))):
        op = draw(st.sampled_from(["value", "value", "value", "delete", "duplicate", "insert", "swap", "unknown"]))
        i = draw(st.integers(0, max(len(lines) - 1, 0))) if lines else 0
        if op == "value":
            assigned = [j for j, line in enumerate(lines) if " = " in line]
            if assigned:
                j = draw(st.sampled_from(assigned))
                key = lines[j].split(" = ", 1)[0]
                lines[j] = f"{key} = {draw(st.sampled_from(HOSTILE_TOML))}"
        elif op == "delete" and lines:
            del lines[i]
        elif op == "duplicate" and lines:
            lines.insert(i, lines[i])
        elif op == "insert":
            lines.insert(i, draw(st.text(max_size=40)))
        elif op == "swap" and len(lines) > 1:
            j = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[j] = lines[j], lines[i]
        elif op == "unknown":
            lines.insert(i, f'{draw(st.sampled_from(["map", "path", "include", "colour"]))} = "../outside.toml"')
    out = "\n".join(lines) + "\n"
    if draw(st.booleans()):
        cut = draw(st.integers(0, len(out)))
        out = out[:cut]
    return out


def _case_file(text: str | bytes, suffix=".toml") -> Path:
    fh = tempfile.NamedTemporaryFile("wb", suffix=suffix, delete=False)
    with fh:
        fh.write(text.encode("utf-8", "surrogatepass") if isinstance(text, str) else text)
    return Path(fh.name)


@given(mutated_text(CASE_TEXT))
@settings(max_examples=400)
def test_a_mutated_case_file_loads_or_is_refused_with_file_line_and_field(text):
    path = _case_file(text)
    try:
        result = _rejects_with_our_error(lambda: load_case(path), "case files", text)
    finally:
        path.unlink()
    if isinstance(result, InputFileError):
        assert result.path == str(path)
        if result.line is not None:  # a line that exists (or the one after the last, for a missing table)
            assert 1 <= result.line <= text.count("\n") + 2


@given(st.binary(max_size=300))
@settings(max_examples=150)
def test_a_case_file_of_random_bytes_is_refused(data):
    path = _case_file(data)
    try:
        _rejects_with_our_error(lambda: load_case(path), "case files", data)
    finally:
        path.unlink()


def test_a_case_file_over_the_size_bound_is_refused_unread():
    path = _case_file("# padding\n" * 200_000)
    try:
        with pytest.raises(InputFileError, match="limited to"):
            load_case(path)
        tried("case files", path.read_bytes())
    finally:
        path.unlink()


@given(mutated_text(CASE_TEXT))
@settings(max_examples=25)
def test_the_command_line_never_shows_a_traceback_for_a_mutated_case(text):
    path = _case_file(text)
    err = io.StringIO()
    try:
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            code = main(["check", str(path), "--no-preview"])  # validation only; drawing is tested on its own
    finally:
        path.unlink()
    assert code in (0, 2), err.getvalue()
    assert code != EXIT_DEFECT and "Traceback" not in err.getvalue()
    if code == 2:
        tried("case files", text)
        assert str(path) in err.getvalue()


def test_case_files_name_no_paths_so_none_can_escape_the_folder():
    # Case files are data only: a field holding a path (to a map, an include, a log) is refused as unknown.
    for field in ('map = "../../etc/passwd"', 'include = "/etc/shadow"', 'log = "../other/night.jsonl"'):
        text = CASE_TEXT.replace("[site]\n", f"[site]\n{field}\n")
        with pytest.raises(InputFileError, match="unknown field"):
            parse_case(text, "bay.toml")


# ----------------------------------------------------------------------------- calibration files
@given(mutated_text(CALIBRATION_TEXT))
@settings(max_examples=300)
def test_a_mutated_calibration_file_applies_or_is_refused_with_file_line_and_field(text):
    path = _case_file(text)
    try:
        result = _rejects_with_our_error(lambda: apply_calibration(CASE, path), "calibration files", text)
    finally:
        path.unlink()
    if not isinstance(result, InputFileError):
        for spec in result.sensors:  # what was accepted is a usable model
            for v in vars(spec.params).values():
                assert not isinstance(v, float) or np.isfinite(v)


def test_the_unmutated_calibration_text_applies():
    path = _case_file(CALIBRATION_TEXT)
    try:
        case = apply_calibration(CASE, path)
    finally:
        path.unlink()
    assert case.sensor("ranger").params.wall_spread_m == pytest.approx(0.16)


# ----------------------------------------------------------------------------- log records
@st.composite
def valid_record(draw, t: float) -> dict:
    kind = draw(st.sampled_from(["odometry", "ranging", "markers", "door"]))
    if kind == "odometry":
        return {"t": t, "sensor": "wheels", "kind": kind, "forward_m": 0.25, "left_m": 0.0, "turn_deg": 0.0}
    if kind == "ranging":
        return {"t": t, "sensor": "ranger", "kind": kind, "ranges_m": [1.5, 5.0, 2.5]}
    if kind == "markers":
        if draw(st.booleans()):
            return {"t": t, "sensor": "camera", "kind": kind, "marker": None}
        return {"t": t, "sensor": "camera", "kind": kind, "marker": "R-west", "range_m": 2.0, "bearing_deg": 10.0}
    return {"t": t, "sensor": "contact", "kind": kind, "active": draw(st.booleans())}


@st.composite
def corrupted_line(draw, rec: dict) -> bytes:
    """``rec`` broken in one of the ways a log line breaks."""
    op = draw(st.sampled_from(["field", "field", "drop", "raw", "truncate", "text", "json", "bytes", "long"]))
    rec = dict(rec)
    if op == "field":
        rec[draw(st.sampled_from(sorted(rec)))] = draw(st.sampled_from(HOSTILE_JSON))
    elif op == "drop":
        del rec[draw(st.sampled_from(sorted(rec)))]
    elif op == "raw":  # a value only a broken writer produces, spliced into the text
        key = draw(st.sampled_from(sorted(rec)))
        rec[key] = "@@"
        return json.dumps(rec).replace('"@@"', draw(st.sampled_from(HOSTILE_RAW))).encode()
    elif op == "truncate":
        text = json.dumps(rec)
        return text[: draw(st.integers(0, len(text) - 1))].encode()
    elif op == "text":
        return draw(st.text(max_size=60)).replace("\n", " ").encode("utf-8", "surrogatepass")
    elif op == "json":
        value = draw(st.recursive(st.none() | st.booleans() | st.floats() | st.text(max_size=8), _containers))
        return json.dumps(value).encode()
    elif op == "bytes":
        text = bytearray(json.dumps(rec).encode())
        text[draw(st.integers(0, len(text) - 1))] = draw(st.integers(0x80, 0xFF))  # not UTF-8 any more
        return bytes(text)
    else:
        return b'{"t": 1.0, "pad": "' + b"x" * (MAX_LINE_BYTES + 10) + b'"}'
    return json.dumps(rec).encode()


def _containers(children):
    return st.lists(children, max_size=4) | st.dictionaries(st.text(max_size=6), children, max_size=4)


@st.composite
def log_lines(draw) -> tuple[list[bytes], int]:
    """Lines of a log, some valid and some corrupted; and how many were corrupted."""
    lines, bad, t = [], 0, 0.0
    for _ in range(draw(st.integers(1, 25))):
        t += draw(st.sampled_from([0.0, 0.25, 0.5]))
        rec = draw(valid_record(t))
        if draw(st.integers(0, 2)) == 0:
            lines.append(draw(corrupted_line(rec)))
            bad += 1
        else:
            lines.append(json.dumps(rec).encode())
    return lines, bad


def _records(data: bytes) -> list[bytes]:
    """The lines of a JSON-lines log: separated by \\n only, a \\r\\n ending allowed (JSON Lines,
    jsonlines.org).  ``bytes.splitlines`` would also break at a bare \\r inside a line, which the log
    format (and the reader) keep as part of that line."""
    lines = data.split(b"\n")
    return lines[:-1] if lines and lines[-1] == b"" else lines


def _read_log(path, lines: list[bytes]):
    aside = []
    got = list(iter_observations(path, aside))
    numbers = [n for n, _ in got] + [row.line for row in aside]
    assert len(numbers) == len(set(numbers)), "a line was both read and set aside"
    assert all(1 <= n <= len(lines) for n in numbers)
    assert all(row.reason for row in aside)
    return got, aside


@given(log_lines(), st.booleans())
@settings(max_examples=300)
def test_a_corrupted_json_lines_log_is_read_with_every_bad_line_set_aside(drawn, final_newline):
    lines, bad = drawn
    data = b"\n".join(lines) + (b"\n" if final_newline else b"")
    path = _case_file(data, ".jsonl")
    try:
        got, aside = _read_log(path, _records(data) or [b""])
    finally:
        path.unlink()
    blank = sum(1 for line in _records(data) if not line.strip())
    assert len(got) + len(aside) + blank == len(_records(data))
    if aside:
        tried("logs (JSON lines)", data)


def _csv_row(rec: dict) -> list[str]:
    cells = []
    for col in CSV_COLUMNS:
        v = rec.get(col, "")
        if col == "ranges_m" and isinstance(v, list):
            v = ";".join(str(z) for z in v)
        elif col == "marker" and v is None:
            v = ""
        cells.append(str(v).lower() if isinstance(v, bool) else str(v))
    return cells


@st.composite
def csv_log(draw) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    header = list(CSV_COLUMNS)
    if draw(st.integers(0, 9)) == 0:  # a broken header, now and then
        header = draw(st.lists(st.sampled_from([*CSV_COLUMNS, "colour", "", "t t"]), max_size=12))
    writer.writerow(header)
    t = 0.0
    for _ in range(draw(st.integers(0, 20))):
        t += 0.25
        row = _csv_row(draw(valid_record(t)))
        op = draw(st.sampled_from(["none", "none", "cell", "extra", "short", "quote", "text"]))
        if op == "cell":
            row[draw(st.integers(0, len(row) - 1))] = draw(
                st.sampled_from(["x", "nan", "inf", "-1", "", "1e400", "maybe"])
            )
        elif op == "extra":
            row.append("surplus")
        elif op == "short":
            row = row[: draw(st.integers(0, len(row) - 1))]
        elif op == "quote":
            out.write('"' + ",".join(row) + "\n")
            continue
        elif op == "text":
            out.write(draw(st.text(max_size=40)).replace("\n", " ").replace("\r", " ") + "\n")
            continue
        writer.writerow(row)
    return out.getvalue()


@given(csv_log())
@settings(max_examples=300)
def test_a_corrupted_csv_log_is_read_or_refused_at_its_header(text):
    path = _case_file(text, ".csv")
    try:
        aside = []
        result = _rejects_with_our_error(lambda: list(iter_observations(path, aside)), "logs (CSV)", text)
    finally:
        path.unlink()
    if isinstance(result, InputFileError):
        # only the header (the first line that is not blank) refuses the whole file
        header = next((i for i, line in enumerate(text.splitlines(), 1) if line.strip()), 1)
        assert result.line == header
    else:
        assert all(row.reason and row.line >= 2 for row in aside)
        if aside:
            tried("logs (CSV)", text)


@given(st.lists(st.sampled_from(HOSTILE_JSON + ["ok"]), min_size=1, max_size=6), st.binary(max_size=80))
@settings(max_examples=200)
def test_a_corrupted_truth_file_is_read_with_bad_lines_set_aside(values, noise):
    lines = []
    for i, v in enumerate(values):
        rec = {"t": float(i), "x_m": 1.0, "y_m": 2.0, "heading_deg": 0.0}
        if v != "ok":
            rec[["t", "x_m", "y_m", "heading_deg", "carried"][i % 5]] = v
        lines.append(json.dumps(rec).encode())
    data = b"\n".join([*lines, noise])
    path = _case_file(data, ".jsonl")
    try:
        aside = []
        list(iter_truth(path, aside))
    finally:
        path.unlink()
    assert all(row.reason for row in aside)
    if aside:
        tried("truth files", data)


def test_a_log_line_of_a_hundred_megabytes_without_newline_is_set_aside_in_bounded_memory():
    import tracemalloc

    path = _case_file(b"", ".jsonl")
    with path.open("wb") as fh:
        block = b"x" * (1 << 20)
        for _ in range(100):
            fh.write(block)
        fh.write(b'\n{"t": 0.0, "sensor": "contact", "kind": "door", "active": true}\n')
    try:
        tracemalloc.start()
        aside = []
        got = list(iter_observations(path, aside))
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
    finally:
        path.unlink()
    assert len(got) == 1 and aside[0].line == 1 and "longer than" in aside[0].reason
    assert peak < 4 * MAX_LINE_BYTES + (1 << 20)  # blocks of one line's bound, never the whole line
    tried("logs (JSON lines)", b"x" * 64 + b"...100 MB")


# ----------------------------------------------------------------------------- stream lines
@given(log_lines(), st.booleans())
@settings(max_examples=150)
def test_the_stream_answers_every_line_and_never_writes_nan(drawn, final_newline):
    lines, bad = drawn
    data = b"\n".join(lines) + (b"\n" if final_newline else b"")
    loc = Localizer.from_case(CASE, "bayes")
    out, err = io.StringIO(), io.StringIO()
    written, rejected = stream(loc, io.BytesIO(data), out, err)
    answers = out.getvalue().splitlines()
    records = [json.loads(a, parse_constant=lambda c: pytest.fail(f"{c} in the output")) for a in answers]
    given = data.split(b"\n")[:-1] if data.endswith(b"\n") else data.split(b"\n")
    stopped = bool(records) and "middle of a line" in records[-1].get("error", "")
    ignored = sum("ignored" in r for r in records)
    assert len(records) == written + rejected + ignored
    # exactly one answer per input line, in order, each naming its line (blank lines included)
    assert [r["line"] for r in records] == list(range(1, len(records) + 1))
    assert len(records) == len(given) or stopped
    assert ignored == sum(not line.strip() for line in given[: len(records)])
    assert len(err.getvalue().splitlines()) == rejected
    if rejected:
        tried("stream lines", data)


@given(st.data())
@settings(max_examples=100)
def test_a_rejected_stream_line_leaves_the_localizer_as_it_was(data):
    loc = Localizer.from_case(CASE, "evidential" if data.draw(st.booleans()) else "bayes")
    good = [json.dumps(data.draw(valid_record(0.25 * i))).encode() for i in range(1, 4)]
    stream(loc, io.BytesIO(b"\n".join(good) + b"\n"), io.StringIO(), io.StringIO())
    before, last_t = loc.filter.distribution().copy(), loc.last_t
    line = data.draw(corrupted_line(data.draw(valid_record(1.0))))
    out = io.StringIO()
    written, rejected = stream(loc, io.BytesIO(line + b"\n"), out, io.StringIO())
    if rejected:
        tried("stream lines", line)
        assert np.array_equal(loc.filter.distribution(), before) and loc.last_t == last_t


# ----------------------------------------------------------------------------- scrub index, --start
@given(
    st.recursive(st.none() | st.booleans() | st.integers(-5, 40) | st.text(max_size=5), _containers, max_leaves=12),
    st.integers(0, 64),
)
@settings(max_examples=200)
def test_a_broken_frame_index_is_refused_by_scrub(index, frame_bytes):
    with tempfile.TemporaryDirectory() as folder:
        Path(folder, "frames.json").write_text(json.dumps(index))
        Path(folder, "frames.u8").write_bytes(b"\0" * frame_bytes)
        result = _rejects_with_our_error(
            lambda: Scrubber(folder), "scrub folders", json.dumps(index) + str(frame_bytes)
        )
    assert isinstance(result, InputFileError)


@given(st.text(max_size=30))
@settings(max_examples=200)
def test_a_bad_start_pose_is_refused_with_our_error(text):
    try:
        x, y, h = parse_start(text)
    except FusionError as err:
        tried("--start", text)
        assert "--start" in str(err)
    else:
        assert all(np.isfinite(v) for v in (x, y, h))
