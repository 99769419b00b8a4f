"""Fuzzing round two: output folders, pipes, time outliers, encodings, and "check accepts exactly what a
run can start".

Properties:
- output folders: whatever a folder holds (foreign files, earlier results of other work, links to
  files outside it, stale files, a broken ownership record), claiming and writing it never changes
  a file outside the folder or a file we did not write, and never leaves a temporary file;
- every non-blank line of a log is either read or set aside with a reason, through a pipe as from
  a file, in any encoding (nothing vanishes: read + set aside = lines);
- a few isolated mis-stamped records cost exactly those records;
- a mutated case that ``load_case`` accepts builds its sensors and back ends and runs its first
  ticks without an error (``check`` and ``run`` agree), and one it refuses is refused with file,
  line and field.
``fuzz_count.tried`` tallies the distinct inputs per surface.
"""

from __future__ import annotations

import json
import os
import threading
from pathlib import Path

from fuzz_count import tried
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fusion.errors import FusionError, InputFileError
from fusion.io import outdir
from fusion.io.case import load_case, parse_case
from fusion.io.logs import iter_observations
from fusion.io.outdir import MARK, TEMP_PREFIX, atomic_write, claim
from fusion.localizer import Localizer
from fusion.monitor import Policy
from fusion.runner import log_text
from fusion.sensors.sensor_set import SensorSet
from fusion.simulate import simulate

TINY = Path(__file__).parent / "data" / "tiny.toml"
CASE_TEXT = TINY.read_text(encoding="utf-8")
LOG_LINES = log_text(simulate(load_case(TINY)))[0].splitlines()
NO_DEADLINE = settings(deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


# ----------------------------------------------------------------------------- output folders
ENTRY_KINDS = ["foreign", "ours", "stale", "link_out", "link_ours", "temp", "subdir"]


@st.composite
def folder_state(draw):
    entries = draw(
        st.lists(st.tuples(st.sampled_from(ENTRY_KINDS), st.sampled_from(["a", "b", "steps.csv"])), max_size=5)
    )
    mark = draw(st.sampled_from(["none", "same", "other_settings", "other_job", "broken", "escaping"]))
    return entries, mark, draw(st.booleans())


@given(folder_state())
@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_claiming_a_folder_never_touches_what_is_not_ours(tmp_path_factory, state):
    entries, mark, replace = state
    root = tmp_path_factory.mktemp("claim")
    out, outside = root / "out", root / "outside.txt"
    out.mkdir()
    outside.write_text("outside")
    ours, foreign = [], []
    for kind, name in entries:
        path = out / f"{kind}-{name}"
        if path.exists() or path.is_symlink():
            continue
        if kind == "foreign":
            path.write_text("not ours")
            foreign.append(path.name)
        elif kind in ("ours", "stale"):
            path.write_text("ours")
            ours.append(path.name)
        elif kind == "link_out":
            path.symlink_to(outside)
            ours.append(path.name)  # a link listed as a result must be removed as a link, never followed
        elif kind == "link_ours":
            path.symlink_to(out / "nowhere")
            foreign.append(path.name)
        elif kind == "temp":
            (out / f"{TEMP_PREFIX}{name}").write_text("left by a killed run")
        elif kind == "subdir":
            path.mkdir()
            (path / "inner").write_text("not ours")
            foreign.append(path.name)
    record = {
        "none": None,
        "same": {"job": "j", "settings": {"k": 1}, "files": ours},
        "other_settings": {"job": "j", "settings": {"k": 2}, "files": ours},
        "other_job": {"job": "other", "settings": {"k": 1}, "files": ours},
        "broken": "{not json",
        "escaping": {"job": "other", "settings": {}, "files": ["../outside.txt", "/etc/passwd", *ours]},
    }[mark]
    if record is not None:
        (out / MARK).write_text(record if isinstance(record, str) else json.dumps(record))
    listed = record is not None and not isinstance(record, str)
    tried("output folders", json.dumps([entries, mark, replace]))
    before_foreign = {n: _content(out / n) for n in foreign}
    try:
        folder = claim(out, "j", {"k": 1}, replace=replace)
    except outdir.FolderError as err:
        assert str(err)
        refused = True
    else:
        refused = False
        atomic_write(folder.file("result.txt"), "new")
        folder.finish(["result.txt"])
    assert outside.read_text() == "outside"
    assert {n: _content(out / n) for n in foreign} == before_foreign  # never deleted, never changed
    if not refused:
        assert not foreign  # a folder holding files not ours is refused
        assert not [p for p in out.iterdir() if p.name.startswith(TEMP_PREFIX)]
        assert (out / "result.txt").read_text() == "new"
        if not listed:  # without a readable record no file is ours: a folder holding any was refused
            assert not ours
    else:
        # refused: nothing of the earlier results was touched
        for n in ours:
            assert (out / n).is_symlink() or (out / n).read_text() == "ours"


def _content(path: Path):
    if path.is_symlink():
        return ("link", os.readlink(path))
    if path.is_dir():
        return ("dir", sorted(p.name for p in path.iterdir()))
    return ("file", path.read_bytes())


# ----------------------------------------------------------------------------- pipes and encodings
@st.composite
def damaged_log(draw):
    lines = list(LOG_LINES[: draw(st.integers(5, 60))])
    for _ in range(draw(st.integers(0, 4))):
        i = draw(st.integers(0, len(lines) - 1))
        op = draw(st.sampled_from(["cut", "junk", "blank", "quote", "bytes"]))
        if op == "cut":
            lines[i] = lines[i][: draw(st.integers(0, len(lines[i])))]
        elif op == "junk":
            lines[i] = draw(st.text(max_size=30)).replace("\n", " ").replace("\r", " ")
        elif op == "blank":
            lines[i] = ""
        elif op == "quote":
            lines[i] = lines[i].replace(",", ',"', 1)
    return lines


def _through_pipe(data: bytes) -> str:
    read_end, write_end = os.pipe()

    def feed():
        with os.fdopen(write_end, "wb") as fh:
            fh.write(data)

    threading.Thread(target=feed, daemon=True).start()
    return read_end


def _nonblank(data: bytes) -> int:
    """Lines with anything on them once a UTF-8 byte-order mark is dropped."""
    return sum(1 for line in data.removeprefix(b"\xef\xbb\xbf").split(b"\n") if line.strip())


@given(damaged_log(), st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "utf-16-le", "latin-1", "cp1252"]))
@settings(max_examples=250, deadline=None)
def test_every_line_through_a_pipe_is_read_or_set_aside_in_any_encoding(lines, encoding):
    text = "\n".join(lines) + "\n"
    if encoding in ("latin-1", "cp1252"):
        text = text.replace("ranger", "rangér")  # bytes that are not UTF-8
    data = text.encode(encoding, "replace")
    fd = _through_pipe(data)
    aside: list = []
    try:
        got = list(iter_observations(f"/dev/fd/{fd}", aside))
    except InputFileError as err:
        assert encoding in ("utf-16", "utf-16-le") and "UTF" in str(err) or "header" in str(err)
        tried("logs through pipes", data)
        return
    finally:
        os.close(fd)
    tried("logs through pipes", data)
    tried("encodings", encoding.encode() + data[:2000])
    if encoding == "utf-16-le":  # no byte-order mark: every line is set aside (not JSON), none vanishes
        assert not got
    assert len(got) + len(aside) == _nonblank(data)
    assert all(row.reason for row in aside)


# ----------------------------------------------------------------------------- time outliers
STAMPS = [lambda t: t * 1000.0, lambda t: 1e300, lambda t: t + 3600.0, lambda t: -5.0, lambda t: t + 1e9, lambda t: 0.0]


@given(
    st.sets(st.integers(2, len(LOG_LINES) - 3), max_size=6), st.lists(st.sampled_from(range(len(STAMPS))), min_size=6)
)
@settings(max_examples=250, deadline=None)
def test_isolated_mis_stamped_records_cost_themselves_only(positions, kinds):
    positions = sorted(p for p in positions if p - 1 not in positions)  # isolated: never two in a row
    lines = list(LOG_LINES)
    changed = []
    for p, k in zip(positions, kinds):
        rec = json.loads(lines[p])
        new = STAMPS[k](rec["t"])
        if new == rec["t"] or (0 <= new - json.loads(lines[p - 1])["t"] <= 60 and new <= json.loads(lines[p + 1])["t"]):
            continue  # still in order: not an outlier
        rec["t"] = new
        lines[p] = json.dumps(rec)
        changed.append(p + 1)
    data = ("\n".join(lines) + "\n").encode()
    fd = _through_pipe(data)
    aside: list = []
    try:
        got = list(iter_observations(f"/dev/fd/{fd}", aside))
    finally:
        os.close(fd)
    tried("time outliers", data)
    assert sorted(row.line for row in aside) == changed
    assert len(got) == len(LOG_LINES) - len(changed)


# ----------------------------------------------------------------------------- check == run
HOSTILE_VALUES = [
    "0",
    "0.0",
    "-1",
    "2",
    "2.1",
    "1e-9",
    "1e300",
    "1e12",
    "[]",
    "[0.0]",
    '"[/]"',
    '"$x_{1}$"',
    '"' + "n" * 201 + '"',
    '"a\\u001b[2J"',
    "4096",
    "0.0001",
]


@st.composite
def hostile_case(draw):
    lines = CASE_TEXT.splitlines()
    assigned = [j for j, line in enumerate(lines) if " = " in line]
    for _ in range(draw(st.integers(1, 3))):
        j = draw(st.sampled_from(assigned))
        key = lines[j].split(" = ", 1)[0]
        lines[j] = f"{key} = {draw(st.sampled_from(HOSTILE_VALUES))}"
    if draw(st.booleans()):  # a monitor setting, from the same hostile values
        policy = draw(st.sampled_from(["quarantine_window", "alert_after", "conflict_k", "quarantine_alpha"]))
        lines.append(f"[run.policy]\n{policy} = {draw(st.sampled_from(HOSTILE_VALUES + ['1000000000000']))}")
    if draw(st.booleans()):  # a parameter the case does not set yet, on one of its sensors
        field = draw(st.sampled_from(["fov_deg", "p_detect", "wall_share", "levels", "sigma_range_m", "hit_rate"]))
        at = draw(st.sampled_from([j for j, line in enumerate(lines) if line.startswith("kind = ")]))
        lines.insert(at + 1, f"{field} = {draw(st.sampled_from(HOSTILE_VALUES))}")
    return "\n".join(lines) + "\n"


@given(hostile_case())
@settings(max_examples=300, deadline=None)
def test_check_accepts_a_case_exactly_when_a_run_can_start(text):
    try:
        case = parse_case(text, "hostile.toml")
    except InputFileError as err:
        assert err.path == "hostile.toml" and err.problem
        tried("case files (check = run)", text)
        return
    except FusionError as err:  # pragma: no cover - every refusal must name the file
        raise AssertionError(f"refused without file and line: {err}") from None
    tried("case files (check = run)", text)
    grid = case.site.grid(case.headings)
    sensors = SensorSet(case.site, grid, case.sensors)  # raises if a model refuses what check accepted
    ticks = simulate(case, max_ticks=4)
    for backend in case.run.backends:
        loc = Localizer(backend, sensors, Policy(**case.run.policy), rule=case.run.rule, max_focal=case.run.max_focal)
        loc.start_anywhere()
        for tick in ticks:
            odometry = next((o for o in tick.observations if o.kind == "odometry"), None)
            loc.step(odometry, [o for o in tick.observations if o.kind != "odometry"])


# ----------------------------------------------------------------------------- command lines
ARG_VALUES = [
    "nan",
    "inf",
    "-1",
    "0",
    "1e309",
    "9" * 30,
    "",
    "[/]",
    "-0.5,2,90",
    "1,2",
    "$x$",
    "\x1b[2J",
    "/",
    "/dev/null",
]


def test_hostile_command_line_values_get_an_answer_never_an_internal_error(tmp_path, capsys, monkeypatch):
    """Every option that takes a value, given values a careless or hostile caller may pass: each command
    ends with exit 0 (the value was fine) or 2 (refused with a message), never 70 or a traceback."""
    import io
    import sys

    from fusion.cli import EXIT_DEFECT, main

    log = tmp_path / "log.jsonl"
    log.write_text("\n".join(LOG_LINES[:40]) + "\n")
    tiny = str(TINY)
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(b"")))
    monkeypatch.chdir(tmp_path)  # relative --out values land here, never in the checkout
    for i, v in enumerate(ARG_VALUES):
        out = str(tmp_path / f"o{i}")
        for argv in (
            ["run", tiny, "--quiet", "--backend", "bayes", "--seed", v, "--out", out + "s"],
            ["run", tiny, "--quiet", "--rule", v, "--out", out + "r"],
            ["run", tiny, "--quiet", "--backend", "bayes", "--out", v or "x", "--replace"],
            ["inspect", str(log), "--site", tiny, "--start", v, "--out", out + "a", "--quiet", "--no-frames"],
            ["inspect", str(log), "--site", tiny, "--truth", v, "--out", out + "b", "--quiet", "--no-frames"],
            ["inspect", v, "--site", tiny, "--out", out + "c", "--quiet", "--no-frames"],
            ["inspect", str(log), "--site", tiny, "--calibration", v, "--out", out + "d", "--quiet"],
            ["compare", tiny, "--seeds", v, "--backend", "bayes", "--rule", "x", "--out", out + "e"],
            ["soak", tiny, "--steps", "20", "--corrupt", v, "--out", out + "f", "--quiet", "--backend", "bayes"],
            ["scrub", v],
            ["check", v],
            ["check", tiny, "--preview", v or "p.png"],
            ["stream", "--site", tiny, "--start", v],
        ):
            try:
                code = main(argv)
            except SystemExit as exit_:  # argparse's own refusal of a malformed value
                code = exit_.code
            err = capsys.readouterr().err
            assert code in (0, 2, 130) and code != EXIT_DEFECT and "Traceback" not in err, (argv, err)
            tried("command lines", "\0".join(argv))
