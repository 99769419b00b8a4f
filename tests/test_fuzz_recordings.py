"""Fuzzing the recording surfaces: log layouts, the tables they name, and MCAP files.

The property (as in ``test_fuzz.py``): a malformed layout is refused with our error naming the file,
line and field; a malformed table row is set aside with its file, line and reason; a damaged MCAP file
is read to its last complete message or refused; the command line never shows a traceback.  Inputs
come from mutating valid ones (line and value mutations of the layout, corrupted table cells, bytes of
an MCAP file flipped or cut); ``fuzz_count.tried`` tallies the distinct malformed inputs.
"""

from __future__ import annotations

import io
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from fuzz_count import tried
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_fuzz import HOSTILE_RAW, mutated_text

from fusion.cli import EXIT_DEFECT, main
from fusion.errors import InputFileError
from fusion.io.case import parse_case
from fusion.io.layout import load_layout
from fusion.io.recording import observations
from tests.test_recordings import CASE

LAYOUT = """[layout]
time_unit = "ms"

[[feeds]]
sensor = "wheels"
file = "wheels.csv"
header = true
odometry = "velocities"
columns = {t = "stamp", forward = "v", turn = "w"}

[[feeds]]
sensor = "eye"
file = "eye.tsv"
header = true
angle_unit = "rad"
length_unit = "cm"
not_markers = ["41"]
columns = {t = "stamp", marker = "id", range = "dist_cm", bearing = "angle"}

[[feeds]]
sensor = "bumper"
file = "bump.csv"
header = true
columns = {t = 1, active = 2}

[truth]
file = "truth.csv"
columns = {t = 1, x = 2, y = 3, heading = 4}
"""

TABLES = {
    "wheels.csv": "stamp,v,w\n" + "".join(f"{k * 100},0.2,0.0\n" for k in range(31)),
    "eye.tsv": "stamp\tid\tdist_cm\tangle\n1050\t7\t250\t0.1\n2050\t8\t300\t-0.2\n2070\t41\t100\t0.0\n",
    "bump.csv": "t,on\n500,true\n1500,0\n",
    "truth.csv": "".join(f"{k * 100},{-4 + 0.02 * k},0.0,0.0\n" for k in range(31)),
}
HOSTILE_CELLS = [*HOSTILE_RAW, "", " ", "-1", "1e-320", "0x10", "true", "7\t7", "é", "\x00", "1,2", '"', "nan"]


@contextmanager
def _folder(layout: str, tables: dict[str, str]) -> Iterator[Path]:
    """A recording folder that is gone again after the example (thousands of examples run)."""
    with tempfile.TemporaryDirectory(prefix="fuzz-rec-") as tmp:
        root = Path(tmp)
        (root / "yard.toml").write_text(CASE)
        (root / "layout.toml").write_text(layout, encoding="utf-8", errors="surrogatepass")
        for name, text in tables.items():
            (root / name).write_text(text, encoding="utf-8", errors="surrogatepass")
        yield root


def _read_all(root: Path):
    """Every observation of the recording, and the rows set aside; or our refusal."""
    case = parse_case(CASE, str(root / "yard.toml"))
    try:
        layout = load_layout(root / "layout.toml", case)
        aside = []
        got = list(observations(None, layout, aside.append))
    except InputFileError as err:
        assert str(err).strip() and err.path
        return err
    for row in aside:
        assert row.reason and row.line >= 1 and row.file, row
    return got, aside


@given(mutated_text(LAYOUT))
@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
def test_a_mutated_layout_is_read_or_refused_with_file_line_and_field(text):
    with _folder(text, TABLES) as root:
        result = _read_all(root)
    if isinstance(result, InputFileError):
        tried("layouts", text)
        assert "layout.toml" in str(result) or result.path.endswith((".csv", ".tsv"))


@st.composite
def corrupted_tables(draw) -> dict[str, str]:
    tables = dict(TABLES)
    for _ in range(draw(st.integers(1, 4))):
        name = draw(st.sampled_from(sorted(tables)))
        rows = tables[name].splitlines()
        i = draw(st.integers(0, len(rows) - 1))
        cells = rows[i].split("\t" if name.endswith(".tsv") else ",")
        op = draw(st.sampled_from(["cell", "cell", "drop", "extra", "cut", "swap"]))
        if op == "cell":
            cells[draw(st.integers(0, len(cells) - 1))] = draw(st.sampled_from(HOSTILE_CELLS))
        elif op == "drop":
            cells = cells[: draw(st.integers(0, len(cells) - 1))]
        elif op == "extra":
            cells.append(draw(st.sampled_from(HOSTILE_CELLS)))
        elif op == "cut":
            cells = [c[: len(c) // 2] for c in cells]
        elif op == "swap" and i + 1 < len(rows):
            rows[i], rows[i + 1] = rows[i + 1], rows[i]
        if op != "swap":
            rows[i] = ("\t" if name.endswith(".tsv") else ",").join(cells)
        tables[name] = "\n".join(rows) + ("\n" if draw(st.booleans()) else "")
    return tables


@given(corrupted_tables())
@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
def test_corrupted_tables_are_read_with_every_bad_row_set_aside(tables):
    with _folder(LAYOUT, tables) as root:
        result = _read_all(root)
    if isinstance(result, InputFileError):
        tried("recording tables", repr(sorted(tables.items())))
        return
    got, aside = result
    if aside:
        tried("recording tables", repr(sorted(tables.items())))
    times = [obs.t for _, obs in got]
    assert times == sorted(times)  # merged in time order whatever the damage


@given(corrupted_tables(), st.sampled_from(["known", "anywhere"]))
@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
def test_the_command_line_never_shows_a_traceback_for_a_damaged_recording(tables, start):
    with _folder(LAYOUT, tables) as root:
        args = ["inspect", str(root / "layout.toml"), "--site", str(root / "yard.toml"), "--no-frames", "--quiet"]
        args += ["--out", str(root / "out"), "--truth", str(root / "layout.toml")]
        if start == "anywhere":
            args += ["--start", "anywhere"]
        code = main(args)
    tried("recordings (command line)", repr(sorted(tables.items())) + start)
    assert code != EXIT_DEFECT


def _mcap_bytes() -> bytes:
    from mcap_ros2.writer import Writer

    from tests.ros2_messages import BOOL

    fh = io.BytesIO()
    writer = Writer(fh, chunk_size=256)
    flag = writer.register_msgdef("std_msgs/msg/Bool", BOOL)
    for k in range(40):
        writer.write_message("/gate", flag, {"data": k % 7 == 0}, log_time=k * 250_000_000)
    writer.finish()
    return fh.getvalue()


MCAP = _mcap_bytes()
MCAP_LAYOUT = '[layout]\n[[feeds]]\nsensor = "bumper"\ntopic = "/gate"\n'


@given(st.lists(st.tuples(st.integers(0, len(MCAP) - 1), st.integers(0, 255)), max_size=6), st.integers(1, len(MCAP)))
@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
def test_a_damaged_mcap_file_is_read_to_its_damage_or_refused(flips, keep):
    data = bytearray(MCAP)
    for at, value in flips:
        data[at] = value
    data = bytes(data[:keep])
    with _folder(MCAP_LAYOUT, {}) as root:
        (root / "run.mcap").write_bytes(data)
        case = parse_case(CASE, str(root / "yard.toml"))
        try:
            layout = load_layout(root / "layout.toml", case)
            aside = []
            got = list(observations(str(root / "run.mcap"), layout, aside.append))
        except InputFileError as err:
            tried("mcap files", data)
            assert str(err).strip() and err.path
            return
    if data != MCAP:
        tried("mcap files", data)
    assert len([o for _, o in got if o.kind == "door"]) <= 40
    for row in aside:
        assert row.reason, row
